"""``railtrace analyse`` end to end, and how it treats bad input.

Ground truth comes from our own filmed scene (tests/conftest.py); the scorer in
benchmarks/score.py compares the results with it.
"""

import shutil

import pandas as pd
import pytest
import tomllib

from benchmarks.score import score
from railtrace.cli import main
from railtrace.filming import film_scene
from railtrace.pipeline import split_frames
from railtrace.results import EVENT_COLUMNS, SHOT_COLUMNS, TRACK_COLUMNS
from railtrace.scene import parse_scene


@pytest.fixture(scope="module")
def analysed(small_clip, tmp_path_factory):
    clip, truth = small_clip
    base = tmp_path_factory.mktemp("analysed")
    out = base / "run"
    code = main([
        "analyse", str(clip), "--out", str(out), "--calibration", str(truth / "calibration.json"),
        "--quiet", "--db", str(base / "history.sqlite"), "--player", "Test Player",
    ])
    assert code == 0
    return out, truth


def test_analyse_writes_the_results_format(analysed):
    out, _ = analysed
    for name in ("tracks.csv", "events.csv", "shots.csv", "calibration.json", "detections.csv", "run.json", "report.html"):
        assert (out / name).is_file(), name
    assert list(pd.read_csv(out / "tracks.csv").columns[: len(TRACK_COLUMNS)]) == TRACK_COLUMNS
    assert list(pd.read_csv(out / "events.csv").columns[: len(EVENT_COLUMNS)]) == EVENT_COLUMNS
    assert list(pd.read_csv(out / "shots.csv").columns[: len(SHOT_COLUMNS)]) == SHOT_COLUMNS


def test_analyse_agrees_with_the_truth(analysed):
    # Issue targets for tracks: every ball found, no identity switches, median position error
    # at most 3 mm; every cushion contact found.
    out, truth = analysed
    s = score(out, truth)
    assert s["tracks"]["recall"] >= 0.99
    assert s["tracks"]["id_switches"] == 0
    assert s["position_error_mm"]["all"]["median"] <= 3.0
    assert s["events"]["collision"]["recall"] == 1.0


def test_analyse_finds_every_cushion_contact(analysed):
    # Issue target: cushion-contact recall at least 98 % (here: both contacts of the clip).
    out, truth = analysed
    assert score(out, truth)["events"]["cushion"]["recall"] == 1.0


def test_analyse_records_the_session_in_the_history(analysed):
    import sqlite3

    out, _ = analysed
    con = sqlite3.connect(out.parent / "history.sqlite")
    try:
        n_events = con.execute("SELECT COUNT(*) FROM events").fetchone()[0]
        players = [r[0] for r in con.execute("SELECT name FROM players")]
    finally:
        con.close()
    assert n_events == len(pd.read_csv(out / "events.csv"))
    assert players == ["Test Player"]


def test_existing_output_folder_is_never_overwritten(analysed, small_clip, capsys):
    out, truth = analysed
    before = sorted(p.name for p in out.iterdir())
    stamp = (out / "tracks.csv").stat().st_mtime_ns
    code = main(["analyse", str(small_clip[0]), "--out", str(out), "--calibration", str(truth / "calibration.json"), "--no-history"])
    assert code == 2
    err = capsys.readouterr().err
    assert "exists already" in err and err.count("\n") == 1
    assert sorted(p.name for p in out.iterdir()) == before
    assert (out / "tracks.csv").stat().st_mtime_ns == stamp


@pytest.mark.parametrize("kind", ["missing", "not-video", "truncated"])
def test_bad_clips_get_one_line_and_leave_nothing(kind, small_clip, tmp_path, capsys):
    clip, truth = small_clip
    bad = tmp_path / "bad.mp4"
    if kind == "not-video":
        bad.write_text("this is a shopping list, not a video\n")
    elif kind == "truncated":
        data = clip.read_bytes()
        bad.write_bytes(data[: len(data) // 3])
    out = tmp_path / "out"
    code = main(["analyse", str(bad), "--out", str(out), "--calibration", str(truth / "calibration.json"), "--no-history"])
    err = capsys.readouterr().err
    if kind == "truncated" and code == 0:
        pytest.fail("a truncated clip was analysed as if whole")
    assert code == 2
    assert err.startswith("railtrace analyse: error: ") and err.count("\n") == 1
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]


def test_clip_without_motion(tmp_path, capsys, small_scene):
    # Resting balls only: the analysis succeeds, says there were no shots and writes empty
    # events and shots tables with their columns.
    text = small_scene.source_text.split("[[shot]]")[0].replace("max_duration_s = 3.0", "max_duration_s = 1.0")
    scene = parse_scene(tomllib.loads(text), source_text=text)
    clip = tmp_path / "still.mp4"
    truth = film_scene(scene, clip)
    out = tmp_path / "res"
    assert main(["analyse", str(clip), "--out", str(out), "--calibration", str(truth / "calibration.json"), "--quiet", "--no-history"]) == 0
    printed = capsys.readouterr().out
    assert "no ball moved" in printed
    assert len(pd.read_csv(out / "shots.csv")) == 0
    assert len(pd.read_csv(out / "events.csv")) == 0
    assert pd.read_csv(out / "tracks.csv")["track"].nunique() == 3


@pytest.mark.parametrize("n,parts,warmup", [(2283, 2, 60), (10, 3, 2), (7, 7, 0), (1, 2, 5)])
def test_split_frames_covers_every_frame_once(n, parts, warmup):
    got = split_frames(n, parts, warmup)
    kept = []
    for k, (read_from, first, end) in enumerate(got):
        stop = n if end is None else end
        kept += list(range(first, stop))
        # A later part starts reading `warmup` frames early (not before frame 0).
        assert read_from == max(first - warmup, 0)
        assert (end is None) == (k == len(got) - 1)
    assert kept == list(range(n))
    # Near-equal parts: lengths differ by at most one frame.
    lengths = [(n if e is None else e) - f for _, f, e in got]
    assert max(lengths) - min(lengths) <= 1
    with pytest.raises(ValueError):
        split_frames(0, 2, 1)


def test_detection_in_parallel_parts_agrees_with_one_pass(analysed, small_clip, tmp_path):
    # The clip cut in two parts, the second detected in a worker process from its own
    # warm-up: every frame is still analysed once, and the detections agree with the single
    # pass (same calibration) within a tenth of the 3 mm position target (measured on
    # this clip: 99 % within 0.25 mm, at most 0.40 mm; over six scene seeds 99 % within
    # 0.07-0.26 mm; all after the cut, where the later part's background starts afresh).
    from railtrace.pipeline import AnalyseConfig, analyse_clip
    from vision.calibfile import read_calibration

    clip, truth = small_clip
    out, _ = analysed
    table = read_calibration(truth / "calibration.json")[0]
    config = AnalyseConfig(table=table, calibration_path=truth / "calibration.json", workers=2, chunk_min_s=1.0, chunk_warmup_s=0.5)
    split = tmp_path / "split"
    analyse_clip(clip, split, config)
    one = pd.read_csv(out / "detections.csv")
    two = pd.read_csv(split / "detections.csv")
    assert sorted(two["frame"].unique()) == sorted(one["frame"].unique())
    assert two["frame"].is_monotonic_increasing
    m = one.merge(two, on="frame", suffixes=("_1", "_2"))
    m["d"] = ((m["x_1"] - m["x_2"]) ** 2 + (m["y_1"] - m["y_2"]) ** 2) ** 0.5
    nearest = m.groupby(["frame", "x_1", "y_1"])["d"].min()
    assert len(nearest) == len(one)
    assert abs(len(two) - len(one)) <= 0.01 * len(one)
    assert nearest.quantile(0.99) <= 0.3, nearest.describe()
    s = score(split, truth)
    assert s["tracks"]["id_switches"] == 0
    assert s["events"]["cushion"]["recall"] == 1.0


def test_tracks_begun_on_the_first_part_equal_those_of_the_whole(analysed):
    # analyse tracks its own part's detections while the other part's process still detects
    # (_EarlyTracks): the tracks must be track()'s on the whole clip's detections as written,
    # to the bit (one tracker, two entry points; common practice), and a first part whose
    # rows are not the whole's first rows, value for value, is not used.
    from railtrace.pipeline import _EarlyTracks, _same_rows
    from tracking.tracker import TrackerConfig, track
    from vision.calibfile import read_calibration

    out, truth = analysed
    det = pd.read_csv(out / "detections.csv", dtype={"colour": str, "pattern": str})
    table = read_calibration(truth / "calibration.json")[0]
    whole = track(det, table)
    cut = int(det["frame"].median())
    early = _EarlyTracks(table, TrackerConfig())
    early.take(det[det["frame"] < cut])
    assert early.head is not None and 0 < len(early.head) < len(det)
    pd.testing.assert_frame_equal(early.finish(det), whole, check_exact=True)
    moved = det.copy()
    moved.loc[3, "x"] += 0.001  # a micrometre: the written precision
    late = _EarlyTracks(table, TrackerConfig())
    late.take(moved[moved["frame"] < cut])
    assert not _same_rows(det.iloc[: len(late.head)], late.head)
    pd.testing.assert_frame_equal(late.finish(det), whole, check_exact=True)


def test_stack_detections_equals_joining_each_frames_table():
    # A clip's steps (with a frame repeated unchanged, and empty frames) stacked at once must
    # equal concatenating the per-frame tables that BallDetector.process returns (exactly).
    import numpy as np

    from vision.detect import COLUMNS, empty_detections, stack_detections

    rng = np.random.default_rng(3)

    def det(n):
        d = pd.DataFrame({c: rng.uniform(0, 2000, n) for c in COLUMNS})
        d["frame"] = 0
        d["colour"] = rng.choice(["white", "red", ""], n)
        d["pattern"] = rng.choice(["cue", "solid"], n)
        return d

    a, b = det(3), det(2)
    steps = [(0, 0.0, a), (1, 1 / 60, a), (2, 2 / 60, empty_detections()), (3, 3 / 60, b), (4, 4 / 60, b)]
    want = []
    for i, t, d in steps:
        d = d.copy()
        d["frame"] = np.int64(i)
        d["t"] = float(t)
        want.append(d[COLUMNS])
    want = pd.concat([w for w in want if len(w)], ignore_index=True).astype(empty_detections().dtypes.to_dict())
    got = stack_detections(steps)
    pd.testing.assert_frame_equal(got, want)
    assert list(got.columns) == COLUMNS
    empty = stack_detections([(0, 0.0, empty_detections())])
    assert len(empty) == 0 and list(empty.columns) == COLUMNS


def test_stack_detections_of_rows_equals_that_of_tables():
    # BallDetector.step_rows' tuples of row dicts (one tuple repeated for an unchanged frame)
    # must stack to exactly the table of the same frames given as DataFrames.
    import numpy as np

    from vision.detect import COLUMNS, empty_detections, stack_detections

    rng = np.random.default_rng(4)

    def rows(n):
        return tuple(
            {**{c: float(rng.uniform(0, 2000)) for c in COLUMNS}, "frame": 0, "t": 0.0, "colour": str(rng.choice(["white", ""])), "pattern": "solid"}
            for _ in range(n)
        )

    a, b = rows(3), rows(1)
    as_rows = [(0, 0.0, a), (1, 1 / 60, a), (2, 2 / 60, ()), (3, 3 / 60, b)]
    as_tables = [(i, t, pd.DataFrame(list(r), columns=COLUMNS) if r else empty_detections()) for i, t, r in as_rows]
    got = stack_detections(as_rows)
    pd.testing.assert_frame_equal(got, stack_detections(as_tables))
    assert got["frame"].tolist() == [0, 0, 0, 1, 1, 1, 3]


def test_worker_processes_end_when_calibration_fails(tmp_path):
    # The later parts' processes start before calibration; a calibration that fails (a clip
    # with no table in view) must raise one ValueError, write nothing and leave no process
    # behind (they are told to stop while they wait for the cameras).
    import multiprocessing

    import numpy as np

    from railtrace.pipeline import AnalyseConfig, analyse_clip
    from vision.table import NINE_FOOT
    from vision.video import write_video

    bad = tmp_path / "noise.mp4"
    rng = np.random.default_rng(0)
    write_video(bad, (rng.integers(0, 256, (180, 320, 3), dtype=np.uint8) for _ in range(60)), 30.0)
    config = AnalyseConfig(table=NINE_FOOT, workers=2, chunk_min_s=0.5, chunk_warmup_s=0.2)
    out = tmp_path / "out"
    with pytest.raises(ValueError, match="table"):
        analyse_clip(bad, out, config)
    assert not out.exists()
    assert multiprocessing.active_children() == []


def test_calibration_helped_by_a_waiting_worker_is_the_same(small_clip):
    # While the later parts' processes wait for the cameras, calibration hands one of them half
    # of the cushion sides' nose searches (run_map). Each side's search depends on its
    # arguments alone, so the calibration must come out the same to the last bit as in one
    # process: the same camera, nose points and quality figures (the refinement amplifies a
    # one-ulp change of its input to micrometres of camera position, so any difference shows).
    import multiprocessing

    import numpy as np

    from railtrace.pipeline import _Helpers
    from vision.calibfile import read_calibration
    from vision.calibrate import CalibConfig, calibrate
    from vision.video import probe

    clip, truth = small_clip
    table = read_calibration(truth / "calibration.json")[0]
    alone = calibrate(clip, table, CalibConfig())
    helpers = _Helpers(clip, [(5, 5, None)], probe(clip).frame_count)
    try:
        shared = calibrate(clip, table, CalibConfig(), run_map=helpers.run_map)
    finally:
        helpers.close()
    for name in ("K", "dist", "rvec", "tvec"):
        assert np.array_equal(getattr(shared.camera, name), getattr(alone.camera, name)), name
    assert [n.rail for n in shared.noses] == [n.rail for n in alone.noses]
    for a, b in zip(alone.noses, shared.noses):
        assert np.array_equal(a.points_px, b.points_px) and np.array_equal(a.residuals_px, b.residuals_px), a.rail
    assert shared.quality == alone.quality
    assert np.array_equal(shared.corners_px, alone.corners_px)
    assert multiprocessing.active_children() == []


def test_worker_runs_requests_in_order_and_returns_their_errors(small_clip):
    # _Helpers.run_map shares the jobs between this process and a waiting worker: the results
    # must come back in the jobs' order, and an error raised in the worker must be raised here
    # as the same ValueError (its message names the bad value), leaving no process behind.
    import multiprocessing

    from railtrace.pipeline import _Helpers
    from vision.table import parse_table
    from vision.video import probe

    clip, _ = small_clip
    jobs = [("9ft", None), ("8ft", None), ("2000x1000", None), ("7ft", None), ("9ft", None)]
    helpers = _Helpers(clip, [(5, 5, None)], probe(clip).frame_count)
    try:
        assert helpers.run_map(parse_table, jobs) == [parse_table(*job) for job in jobs]
        with pytest.raises(ValueError, match="snooker-ish"):
            parse_table("snooker-ish", None)  # the error this process gives, as reference
        with pytest.raises(ValueError, match="snooker-ish"):
            helpers.run_map(parse_table, [("9ft", None), ("snooker-ish", None)])  # the second job runs in the worker
    finally:
        helpers.close()
    assert multiprocessing.active_children() == []
