"""Drill files and after-the-fact intents: parsing, and one clear line for every bad file."""

from __future__ import annotations

from pathlib import Path

import pytest

from analysis.drill import DrillError, intents_for_shots, load_drill, load_intents_csv
from railtrace.banks_cmd import main as banks_main
from vision.table import NINE_FOOT

GOOD = """\
player = "Sam"
table = "club 9ft no. 2"

[[shot]]
ball = "object"
aim = { rail = "top", diamond = 3.5 }
target = "bottom-side"
band = "medium"

[[shot]]
kind = "kick"
aim = { point = [1200.0, 1000.0] }
target = { rail = "bottom", diamond = 5.0 }
spin = { side = 0.3 }
rails = 2
"""


def _write(tmp_path: Path, text: str, name: str = "drill.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_good_drill_reads_every_field(tmp_path):
    d = load_drill(_write(tmp_path, GOOD), NINE_FOOT)
    assert d.player == "Sam" and d.table_name == "club 9ft no. 2" and not d.repeat
    a, b = d.intents
    assert (a.ball, a.aim.kind, a.aim.rail, a.aim.diamond, a.target.pocket, a.band) == (
        "object", "sight", "top", 3.5, "bottom-side", "medium")
    assert (b.ball, b.aim.point_mm, b.target.rail, b.target.diamond, b.tip_side, b.tip_height, b.rails) == (
        "cue", (1200.0, 1000.0), "bottom", 5.0, 0.3, 0.0, 2)
    assert [i.shot for i in intents_for_shots(d.intents, d.repeat, 3, d.source) if i] == [0, 1]


def test_repeating_drill_applies_to_every_shot(tmp_path):
    d = load_drill(_write(tmp_path, '[drill]\naim = { rail = "top", diamond = 4 }\ntarget = "bottom-side"\n'), NINE_FOOT)
    got = intents_for_shots(d.intents, d.repeat, 4, d.source)
    assert len(got) == 4 and all(g.target.pocket == "bottom-side" for g in got)


@pytest.mark.parametrize("text, line, words", [
    ('[[shot]]\ntarget = "middle-pocket"\n', 2, ["unknown pocket", "bottom-side"]),
    ('[[shot]]\naim = { rail = "top", diamond = 9.5 }\n', 2, ["off the top rail", "0..8"]),
    ('[[shot]]\naim = { point = [3000, 200] }\n', 2, ["off the table"]),
    ('[[shot]]\nband = 3\n', 2, ["band", "soft, medium or hard"]),
    ('[[shot]]\nrails = "two"\n', 2, ["whole number"]),
    ('\n\n[[shot]]\naim = { rail = "top", diamond = "3" }\n', 4, ["must be a number"]),
    ('[[shot]]\nspin = { side = 0.5, height = 0.5 }\n', 2, ["miscue"]),
    ('[[shot]]\ntarget = "bottom-side"\ncolour = "red"\n', 3, ["unknown key 'colour'"]),
    ('[[shot]]\ntarget = "bottom-side\n', 2, ["not valid TOML", "column", "quotes"]),
    ('[[shot]]\ntarget = 5\n', 2, ["target must be a pocket name"]),
    ('[[shot]]\naim = "top 3"\n', 2, ["aim must be a sight"]),
])
def test_bad_drill_gets_one_line_with_file_line_and_fix(tmp_path, text, line, words):
    p = _write(tmp_path, text)
    with pytest.raises(DrillError) as err:
        load_drill(p, NINE_FOOT)
    msg = str(err.value)
    assert "\n" not in msg
    assert msg.startswith(f"{p}:{line}:"), msg
    for w in words:
        assert w in msg


def test_more_intents_than_shots_names_the_first_extra(tmp_path):
    text = "".join(f'[[shot]]\ntarget = "bottom-side"\n' for _ in range(3))
    d = load_drill(_write(tmp_path, text), NINE_FOOT)
    with pytest.raises(DrillError, match=r"drill.toml:5: 3 intents but the session has 2 shot"):
        intents_for_shots(d.intents, d.repeat, 2, d.source)


def test_intents_csv_reads_and_rejects(tmp_path):
    good = _write(tmp_path, "shot,target,aim,band\n0,bottom-side,top:3.5,soft\n2,top:2,1200;300,\n", "i.csv")
    a, b = load_intents_csv(good, NINE_FOOT)
    assert (a.shot, a.target.pocket, a.aim.rail, a.aim.diamond, a.band) == (0, "bottom-side", "top", 3.5, "soft")
    assert (b.shot, b.target.rail, b.target.diamond, b.aim.point_mm) == (2, "top", 2.0, (1200.0, 300.0))
    bad = _write(tmp_path, "shot,target\n0,bottom-side\nx,bottom-side\n", "bad.csv")
    with pytest.raises(DrillError, match=r"bad.csv:3: shot 'x' must be a whole number"):
        load_intents_csv(bad, NINE_FOOT)
    header = _write(tmp_path, "shot,goal\n0,bottom-side\n", "h.csv")
    with pytest.raises(DrillError, match=r"h.csv:1: header"):
        load_intents_csv(header, NINE_FOOT)


def test_bad_drill_on_the_command_line_writes_nothing(tmp_path, capsys, bank_truth):
    folder, _ = bank_truth
    before = sorted(p.name for p in folder.iterdir())
    p = _write(tmp_path, '[[shot]]\ntarget = "corner"\n')
    assert banks_main([str(folder), "--drill", str(p)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(p) in err[0] and "unknown pocket" in err[0]
    assert sorted(p.name for p in folder.iterdir()) == before
    many = _write(tmp_path, "".join('[[shot]]\ntarget = "bottom-side"\n' for _ in range(40)), "many.toml")
    assert banks_main([str(folder), "--drill", str(many)]) == 2
    assert "intents but the session has" in capsys.readouterr().err
    assert sorted(p.name for p in folder.iterdir()) == before


@pytest.fixture(scope="module")
def bank_truth(tmp_path_factory):
    """(truth folder, scene text) of a small simulated (not rendered) bank session of 3 shots."""
    from benchmarks.bank_accuracy import bank_scene_text, write_truth_folder

    text = bank_scene_text([
        {"at": (1000.0, 300.0), "rail": "top", "diamond": 3.5, "speed": 1500.0, "target": "bottom-side"},
        {"at": (1500.0, 350.0), "rail": "top", "diamond": 5.5, "speed": 2000.0, "target": "bottom-right"},
        {"at": (800.0, 400.0), "rail": "top", "diamond": 2.0, "speed": 1000.0, "target": "bottom-left"},
    ])
    return write_truth_folder(text, tmp_path_factory.mktemp("drill") / "s.truth"), text
