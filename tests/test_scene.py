"""Scene files: parsing, defaults, and one-line errors that name the file and the key."""

import math

import pytest
import tomllib

from railtrace.scene import SceneError, load_scene, parse_scene
from vision.table import NINE_FOOT

MINIMAL = """
[[ball]]
id = "cue"
kind = "cue"
at = [700, 400]

[[ball]]
id = "3"
at = [1200, 600]

[[shot]]
ball = "cue"
aim = { rail = "top", diamond = 3.0 }
speed_mm_s = 1500
"""


def _parse(text: str):
    return parse_scene(tomllib.loads(text), source_text=text)


def test_minimal_scene_defaults():
    scene = _parse(MINIMAL)
    assert scene.table.length_mm == NINE_FOOT.length_mm
    assert scene.camera.image_size == (1280, 720)
    assert scene.film.fps == 60 and scene.film.shutter_s == pytest.approx(1 / 250)
    assert [b.ball for b in scene.balls] == ["cue", "3"]
    assert scene.balls[0].kind == "cue" and scene.balls[1].kind == "solid"
    shot = scene.shots[0]
    assert shot.aim.kind == "sight" and shot.aim.rail == "top" and shot.aim.diamond == 3.0
    assert shot.tip_side == 0 and shot.tip_height == 0


def test_full_scene_keys(tmp_path):
    text = MINIMAL.replace(
        "[[ball]]\nid = \"cue\"",
        """[table]
size = "2000x1000"
ball_mm = 52.5
[camera]
height_mm = 2100
resolution = [1920, 1080]
fps = 30
shutter_s = 0.03
distortion = [-0.2, 0.05]
[[camera.bump]]
t_s = 2.0
offset_mm = [5, -3]
roll_deg = 0.3
[look]
cloth = "#224466"
noise = 3.5
occluder = false
[physics]
mu_slide = 0.25
rail_factor = { top = 0.9 }
[[physics.dead_spot]]
rail = "top"
from_diamond = 2
to_diamond = 3
factor = 0.7
[[ball]]
id = "cue\"""",
        1,
    )
    path = tmp_path / "s.toml"
    path.write_text(text)
    scene = load_scene(path)
    assert scene.table.ball_diameter_mm == 52.5 and scene.table.length_mm == 2000
    assert scene.camera.image_size == (1920, 1080)
    assert scene.look.cloth_bgr == (0x66, 0x44, 0x22)  # "#rrggbb" read as BGR for OpenCV
    assert scene.occluder is False
    assert scene.physics.mu_slide == 0.25
    assert scene.physics.cushion.dead_spots[0].factor == 0.7
    assert scene.bumps[0].offset_mm == (5.0, -3.0, 0.0)
    assert scene.source_text == text


@pytest.mark.parametrize(
    "change, message",
    [
        (("speed_mm_s = 1500", "speed_mm_s = \"fast\""), "shot\\[0\\].speed_mm_s must be a number"),
        (("diamond = 3.0", "diamond = 9.0"), "shot\\[0\\].aim.diamond = 9.0 is outside"),
        (("rail = \"top\"", "rail = \"roof\""), "shot\\[0\\].aim.rail = 'roof'; use one of"),
        (("ball = \"cue\"\naim", "ball = \"8\"\naim"), "shot\\[0\\].ball '8' is not a \\[\\[ball\\]\\] id"),
        (("speed_mm_s = 1500", "speed_mm_s = 1500\nspin = { side = 0.5, height = 0.5 }"), "miscue"),
        (("at = [1200, 600]", "at = [1200]"), "ball\\[1\\].at must be two numbers"),
        (("id = \"3\"", "id = \"cue\""), "ball ids repeat"),
    ],
)
def test_bad_scenes_name_the_key(tmp_path, change, message):
    path = tmp_path / "bad.toml"
    path.write_text(MINIMAL.replace(*change, 1))
    with pytest.raises(SceneError, match=message) as err:
        load_scene(path)
    assert str(err.value).startswith(f"{path}: ")
    assert "\n" not in str(err.value)


def test_unreadable_scene_files(tmp_path):
    with pytest.raises(SceneError, match="does not exist"):
        load_scene(tmp_path / "missing.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[[ball]\n")
    with pytest.raises(SceneError, match="not valid TOML"):
        load_scene(bad)
    for text, msg in [
        ("", "at least one"),
        (MINIMAL + "\n[camera]\nresolution = [800, 600]\n", "resolution"),
        (MINIMAL + "\n[camera]\nfps = 60\nshutter_s = 0.05\n", "longer than one frame"),
        (MINIMAL + "\n[table]\npreset = \"6ft\"\n", "table"),
        (MINIMAL + "\n[look]\ncloth = \"green\"\n", "not a colour"),
    ]:
        with pytest.raises(SceneError, match=msg):
            _parse(text)


def test_sight_aim_points_through_the_rail_top_sight():
    from railtrace.filming import aim_heading

    scene = _parse(MINIMAL)
    heading = aim_heading(scene.table, scene.shots[0], {"cue": (700.0, 400.0), "3": (1200.0, 600.0)})
    # The sight at diamond 3 of the top rail sits 93.7 mm behind the nose (WPA set-back).
    sight = (3 * 317.5, 1270 + 93.7)
    assert heading == pytest.approx(math.atan2(sight[1] - 400, sight[0] - 700))


def test_ghost_ball_aim_sends_object_ball_to_target():
    from railtrace.filming import aim_heading

    text = MINIMAL.replace('aim = { rail = "top", diamond = 3.0 }', 'aim = { ball = "3", send_to = "top-right" }')
    scene = _parse(text)
    cue, obj = (700.0, 400.0), (1200.0, 600.0)
    heading = aim_heading(scene.table, scene.shots[0], {"cue": cue, "3": obj})
    # Ghost-ball geometry (common practice): the cue ball's centre must arrive one diameter behind
    # the object ball on the line from the target through the object ball.
    tx, ty = scene.table.pocket("top-right").mouth_centre
    d = math.hypot(tx - obj[0], ty - obj[1])
    ghost = (obj[0] - 57.15 * (tx - obj[0]) / d, obj[1] - 57.15 * (ty - obj[1]) / d)
    assert heading == pytest.approx(math.atan2(ghost[1] - cue[1], ghost[0] - cue[0]))
