"""Camera model checked against OpenCV's own functions as the reference implementation
(cv2.projectPoints, cv2.undistortPoints, cv2.findHomography, cv2.solvePnP, cv2.Rodrigues)."""

import cv2
import numpy as np
import pytest

from vision.camera import Camera
from vision.table import EIGHT_FOOT, NINE_FOOT

DISTORTIONS = [
    (0.0, 0.0, 0.0, 0.0, 0.0),
    (-0.12, 0.03, 0.0, 0.0, 0.0),  # mild barrel
    (-0.32, 0.11, 0.0012, -0.0008, -0.015),  # wide phone lens with decentring
]


def _cameras():
    yield Camera.overhead(NINE_FOOT, 2600, (1280, 720))
    for k, dist in enumerate(DISTORTIONS):
        yield Camera.overhead(
            NINE_FOOT, 2200 + 300 * k, (1920, 1080), offset_mm=(150 * k, -250 * k),
            roll_deg=3 * k - 2, dist=dist,
        )
    yield Camera.overhead(EIGHT_FOOT, 1900, (1280, 720), offset_mm=(-600, 400), aim_offset_mm=(-100, 0), dist=DISTORTIONS[2])


@pytest.fixture(scope="module")
def points():
    rng = np.random.default_rng(7)
    n = 300
    return np.column_stack(
        [rng.uniform(-140, 2680, n), rng.uniform(-140, 1410, n), rng.uniform(0, 60, n)]
    )


@pytest.mark.parametrize("cam", list(_cameras()))
def test_project_matches_opencv(cam, points):
    ref, _ = cv2.projectPoints(points, cam.rvec, cam.tvec, cam.K, cam.dist)
    assert np.max(np.abs(cam.project(points) - ref[:, 0])) < 1e-8


@pytest.mark.parametrize("cam", list(_cameras()))
def test_undistort_matches_opencv_and_round_trips(cam, points):
    uv = cam.project(points)
    w, h = cam.image_size
    inside = (uv[:, 0] > 0) & (uv[:, 0] < w) & (uv[:, 1] > 0) & (uv[:, 1] < h)
    uv = uv[inside]
    criteria = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 200, 1e-14)
    ref = cv2.undistortPoints(uv.reshape(-1, 1, 2), cam.K, cam.dist, criteria=criteria)[:, 0]
    assert np.max(np.abs(cam.undistort_normalised(uv) - ref)) < 1e-9
    # Back-projection onto each point's own height returns the point (round trip, mm).
    back = cam.backproject(uv, points[inside, 2])
    assert np.max(np.abs(back - points[inside])) < 1e-6


@pytest.mark.parametrize("cam", list(_cameras())[2:])
def test_undistort_in_parts_is_each_part_undistorted_alone(cam, points):
    # Parts that converge after different numbers of Newton steps (near the centre, out at
    # the corners), a part holding a NaN pixel and an empty part, undistorted together: each
    # must be bit for bit what its own call gives (two forms of one computation, filterpy's
    # procedure-form test in style.md), and match OpenCV's undistortPoints (the reference).
    uv = cam.project(points)
    w, h = cam.image_size
    uv = uv[(uv[:, 0] > 0) & (uv[:, 0] < w) & (uv[:, 1] > 0) & (uv[:, 1] < h)]
    off = np.hypot(uv[:, 0] - w / 2, uv[:, 1] - h / 2)
    parts = [uv[off < 0.1 * w], uv[off > 0.45 * w], np.array([[np.nan, 3.0], [10.0, 20.0]]), np.zeros((0, 2)), uv[::7]]
    together = cam.undistort_normalised_parts(parts)
    assert len(together) == len(parts)
    for part, got in zip(parts, together):
        if len(part) == 0:
            assert got.shape == (0, 2)
            continue
        alone = cam.undistort_normalised(part)
        assert np.array_equal(got, alone, equal_nan=True)
        ok = np.all(np.isfinite(part), axis=1)
        criteria = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 200, 1e-14)
        ref = cv2.undistortPoints(part[ok].reshape(-1, 1, 2), cam.K, cam.dist, criteria=criteria)[:, 0]
        assert np.max(np.abs(got[ok] - ref)) < 1e-9


def test_rotation_matches_cv2_rodrigues():
    cam = list(_cameras())[3]
    rot, _ = cv2.Rodrigues(cam.rvec)
    assert np.allclose(rot, cam.R, atol=1e-12)
    assert np.allclose(cam.R @ cam.R.T, np.eye(3), atol=1e-12)


@pytest.mark.parametrize("z_mm", [0.0, NINE_FOOT.radius_mm, NINE_FOOT.nose_height_mm])
def test_plane_homography_matches_findhomography(z_mm):
    cam = list(_cameras())[2]
    rng = np.random.default_rng(3)
    xy = np.column_stack([rng.uniform(0, 2540, 50), rng.uniform(0, 1270, 50)])
    uv = cam.project(np.column_stack([xy, np.full(50, z_mm)]))
    und = cam.undistort_normalised(uv)
    und_px = np.column_stack([und, np.ones(50)]) @ cam.K.T
    H_ref, _ = cv2.findHomography(und_px[:, :2], xy, 0)
    H = cam.cloth_homography(z_mm)
    assert np.allclose(H / H[2, 2], H_ref / H_ref[2, 2], rtol=1e-6, atol=1e-9)


def test_pose_recovered_by_solvepnp():
    # A planar target (the nose rectangle) seen through the true camera: OpenCV's solvePnP must
    # return our pose, confirming the rvec/tvec convention is OpenCV's.
    cam = list(_cameras())[3]
    corners = np.column_stack([NINE_FOOT.outline(), np.full(4, NINE_FOOT.nose_height_mm)])
    image = cam.project(corners)
    ok, rvec, tvec = cv2.solvePnP(corners, image, cam.K, cam.dist, flags=cv2.SOLVEPNP_IPPE)
    assert ok
    rvec, tvec = cv2.solvePnPRefineLM(corners, image, cam.K, cam.dist, rvec, tvec)
    assert np.allclose(tvec.ravel(), cam.tvec, atol=1e-3)
    assert np.allclose(cv2.Rodrigues(rvec)[0], cam.R, atol=1e-6)


def test_overhead_camera_sees_the_whole_table_right_way_up():
    cam = Camera.overhead(NINE_FOOT, 2500, (1280, 720))
    uv = cam.project(np.column_stack([NINE_FOOT.outline(), np.zeros(4)]))
    assert np.all((uv > 0) & (uv < [1280, 720]))
    # +x runs to the image's right and +y up the image (v decreasing).
    assert uv[1, 0] > uv[0, 0] and uv[3, 1] < uv[0, 1]
    assert cam.centre_mm == pytest.approx([1270, 635, 2500])


def test_parallax_of_ball_centre_matches_formula():
    # references.md: a cloth-plane homography shifts a ball centre (R above the cloth) by about
    # R d / (H - R) at distance d from the nadir (about 19 mm for H = 2 m, d = 1.3 m).
    cam = Camera.overhead(NINE_FOOT, 2000, (1280, 720))
    R = NINE_FOOT.radius_mm
    centre = np.array([[1270 + 1300.0, 635.0, R]])
    on_cloth = cam.backproject(cam.project(centre), 0.0)
    shift = np.linalg.norm(on_cloth[0, :2] - centre[0, :2])
    assert shift == pytest.approx(R * 1300 / (2000 - R), rel=1e-9)
    assert 18.0 < shift < 20.0


def test_bad_camera_input():
    with pytest.raises(ValueError, match="too low"):
        Camera.overhead(NINE_FOOT, 50)
    with pytest.raises(ValueError, match="field of view"):
        Camera.look_at((0, 0, 2000), (100, 0, 0), (640, 480), 200)
    with pytest.raises(ValueError, match="focal"):
        Camera(np.zeros((3, 3)), np.zeros(5), np.zeros(3), np.zeros(3), (640, 480))


def test_dict_round_trip():
    cam = list(_cameras())[2]
    again = Camera.from_dict(cam.to_dict())
    assert np.allclose(again.project(np.array([[100.0, 200.0, 10.0]])), cam.project(np.array([[100.0, 200.0, 10.0]])))
    with pytest.raises(ValueError, match="lacks"):
        Camera.from_dict({"K": cam.K.tolist()})
