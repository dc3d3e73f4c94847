"""Shared fixtures: small clips filmed once per test session."""

from __future__ import annotations

import pytest
import tomllib

from railtrace.filming import film_scene
from railtrace.scene import parse_scene

SMALL_SCENE = """
name = "small test scene"
lead_s = 0.4
tail_s = 0.3
max_duration_s = 3.0
seed = 11

[table]
preset = "9ft"

[camera]
height_mm = 2400
offset_mm = [120, -90]
roll_deg = 1.0
resolution = [960, 540]
fps = 60
shutter_s = 0.004
distortion = [-0.15, 0.03, 0.0005, -0.0003, 0.0]
quality = 18

[look]
noise = 1.5
occluder = true

[[ball]]
id = "cue"
kind = "cue"
at = [600, 420]

[[ball]]
id = "5"
kind = "solid"
colour = "#d07018"
at = [1500, 700]

[[ball]]
id = "12"
kind = "stripe"
colour = "#2050c0"
at = [2100, 300]

[[shot]]
ball = "cue"
aim = { ball = "5", send_to = { rail = "top", diamond = 6.0 } }
speed_mm_s = 1600
spin = { height = 0.2 }
"""


@pytest.fixture(scope="session")
def small_scene():
    """The parsed small scene (a cut that banks ball 5 off the top rail)."""
    return parse_scene(tomllib.loads(SMALL_SCENE), source_text=SMALL_SCENE)


@pytest.fixture(scope="session")
def small_clip(tmp_path_factory, small_scene):
    """(clip path, truth folder) of the small scene, filmed once per session."""
    out = tmp_path_factory.mktemp("small") / "small.mp4"
    truth = film_scene(small_scene, out)
    return out, truth
