"""Equipment model checked against the published equipment specification.

Source for every figure unless said otherwise: WPA Tournament Table & Equipment Specifications
(world governing body for pool), as listed in ../shared/spec/references.md.
"""

import math

import numpy as np
import pytest

from vision.table import EIGHT_FOOT, NINE_FOOT, PRESETS, SEVEN_FOOT, TableSpec, parse_table

INCH = 25.4


@pytest.mark.parametrize(
    "table, length_in, width_in",
    [(NINE_FOOT, 100, 50), (EIGHT_FOOT, 92, 46)],  # WPA: 9 ft 100 x 50 in, 8 ft 92 x 46 in
)
def test_playing_area_matches_wpa(table, length_in, width_in):
    # WPA tolerance on the playing surface: 1/8 in (3.2 mm).
    assert abs(table.length_mm - length_in * INCH) <= 3.2
    assert abs(table.width_mm - width_in * INCH) <= 3.2
    assert table.length_mm == pytest.approx(2 * table.width_mm, rel=1e-9)  # WPA: 2:1 playing area


@pytest.mark.parametrize("table", list(PRESETS.values()))
def test_ball_nose_sights_and_pockets(table):
    # WPA: ball 2 1/4 in, tolerance 0.005 in (0.127 mm).
    assert abs(table.ball_diameter_mm - 2.25 * INCH) <= 0.127
    # WPA [secondary]: cushion nose at 62.5 to 64.5 % of the ball diameter (35.7 to 36.9 mm).
    assert 35.7 <= table.nose_height_mm <= 36.9
    # WPA: sight centres 3 11/16 in (93.7 mm, +-3.2 mm) back from the nose.
    assert abs(table.sight_setback_mm - (3 + 11 / 16) * INCH) <= 3.2
    sights = table.sights()
    assert len(sights) == 18  # WPA: 18 sights
    # WPA: sight spacing one eighth of the long side (12 1/2 in on a 9 ft table).
    bottom = sorted(xy[0] for rail, _, xy in sights if rail == "bottom")
    assert np.diff(bottom)[:2] == pytest.approx([table.length_mm / 8] * 2)
    pockets = {p.name: p for p in table.pockets()}
    assert len(pockets) == 6
    for name, p in pockets.items():
        if name.endswith("side"):
            # WPA: side mouth 5 to 5.125 in (127 to 130.2 mm).
            assert 127.0 <= p.mouth_mm <= 130.2
        else:
            # WPA: corner mouth 4.5 to 4.625 in (114.3 to 117.5 mm).
            assert 114.3 <= p.mouth_mm <= 117.5


def test_nine_foot_diamond_is_317_5_mm():
    # WPA: 12 1/2 in between sights on a 9 ft table = 317.5 mm; short rail W/4 is the same.
    assert NINE_FOOT.diamond_mm("bottom") == pytest.approx(12.5 * INCH)
    assert NINE_FOOT.diamond_mm("left") == pytest.approx(12.5 * INCH)
    assert NINE_FOOT.to_diamonds("top", 635.0) == pytest.approx(2.0)
    assert NINE_FOOT.from_diamonds("right", 3.0) == pytest.approx(952.5)
    assert np.allclose(NINE_FOOT.to_diamonds("bottom", [0, 2540]), [0, 8])


def test_seven_foot_is_a_common_bar_size():
    # Common practice: "7 ft" bar tables are about 78 x 39 in (76 x 38 also occurs).
    assert SEVEN_FOOT.length_mm == pytest.approx(78 * INCH)
    assert SEVEN_FOOT.width_mm == pytest.approx(39 * INCH)


def test_reversal_line_from_contact_geometry():
    # Geometry (references.md, derived): nose at 63.5 % of the diameter puts the contact
    # sin(theta) = 0.27 above the equator and the centre R cos(theta) = 27.5 mm from the nose.
    t = NINE_FOOT
    assert math.sin(t.contact_angle_rad) == pytest.approx(0.27, abs=0.001)
    assert t.reversal_offset_mm == pytest.approx(27.5, abs=0.05)
    assert t.reversal_line("bottom") == pytest.approx(t.reversal_offset_mm)
    assert t.reversal_line("right") == pytest.approx(t.length_mm - t.reversal_offset_mm)
    # The reversal line is closer to the nose than one radius (the nose is above the equator).
    assert t.reversal_offset_mm < t.radius_mm


def test_rail_points_and_sight_offsets():
    t = NINE_FOOT
    assert t.rail_point("top", 2, t.sight_setback_mm) == pytest.approx((635.0, 1270 + 93.7))
    assert t.rail_point("left", 1, -t.reversal_offset_mm) == pytest.approx((t.reversal_offset_mm, 317.5))


def test_parse_table_forms_and_errors():
    assert parse_table("9ft") is NINE_FOOT
    custom = parse_table("2000x1000", ball_mm=52.5)
    assert (custom.length_mm, custom.width_mm, custom.ball_diameter_mm) == (2000, 1000, 52.5)
    # The nose follows the ball at the WPA fraction.
    assert custom.nose_height_mm / custom.ball_diameter_mm == pytest.approx(0.635)
    for bad in ("10ft", "2540", "2540x", "x1270", "90000x1270"):
        with pytest.raises(ValueError, match="table"):
            parse_table(bad)
    with pytest.raises(ValueError, match="ball diameter"):
        parse_table("9ft", ball_mm=5)
    with pytest.raises(ValueError, match="long side first"):
        TableSpec("bad", length_mm=1000, width_mm=2000)
    with pytest.raises(ValueError, match="rail"):
        NINE_FOOT.reversal_line("middle")
    with pytest.raises(ValueError, match="pocket"):
        NINE_FOOT.pocket("centre")


@pytest.mark.parametrize("rail", ["bottom", "right", "top", "left"])
def test_cushion_angle_sign_rule(rail):
    # results-format.md: 0 is square into the rail; positive when the along-rail component points
    # toward increasing rail coordinate; a mirror bounce has angle_out == angle_in.
    from vision.table import cushion_angles, rail_direction, rail_inward_normal

    n = np.array(rail_inward_normal(rail))
    a = np.array(rail_direction(rail))
    v_in = -1000 * np.cos(np.radians(30)) * n + 1000 * np.sin(np.radians(30)) * a
    v_out = 800 * np.cos(np.radians(30)) * n + 1000 * np.sin(np.radians(30)) * a
    ang_in, ang_out, e = cushion_angles(rail, v_in, v_out)
    assert ang_in == pytest.approx(30.0)
    assert e == pytest.approx(0.8)
    assert ang_out == pytest.approx(np.degrees(np.arctan2(500, 800 * np.cos(np.radians(30)))))
    mirror = v_in - 2 * (v_in @ n) * n
    assert cushion_angles(rail, v_in, mirror)[1] == pytest.approx(ang_in)
