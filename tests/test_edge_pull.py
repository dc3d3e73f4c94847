"""``benchmarks/edge_pull.py``: the circle fit, and the share of a start error one local-edge
round keeps on a disc whose edge is blurred narrow and wide, against a one-dimensional
analytic model of the same edge."""

import math

import cv2
import numpy as np
import pytest
from scipy.special import ndtr, ndtri

from benchmarks.edge_pull import circle_centre, pull
from vision.camera import Camera
from vision.detect import _LOCAL_INNER, _LOCAL_OFF, _LOCAL_OUTER, _N_RAYS, BallDetector, sphere_outline_px
from vision.table import NINE_FOOT

R = NINE_FOOT.radius_mm
# The ball straight below the camera: its silhouette is a circle about its centre's image.
CAM = Camera.overhead(NINE_FOOT, 2500.0, (1280, 720))
AT = (NINE_FOOT.length_mm / 2, NINE_FOOT.width_mm / 2)


def test_circle_centre_is_exact_on_a_circle():
    # Analytic: points on a circle satisfy Kasa's (1976) linear equation exactly, so the fit
    # returns the centre to rounding, from an arc as from the whole circle.
    a = np.linspace(0.3, 2.2, 17)
    pts = np.column_stack([412.25 + 9.7 * np.cos(a), 87.5 + 9.7 * np.sin(a)])
    pts[3] = np.nan  # a ray without an edge is left out
    assert np.allclose(circle_centre(pts), [412.25, 87.5], atol=1e-9)


def _keep_1d(sigma_px: float) -> float:
    """Share of a 1 px start error kept by one round, for a straight edge blurred by a Gaussian
    of ``sigma_px`` after the pixel's box: the profile (ball 1 outside-in, cloth 0) is
    ``Phi(-s / sigma_eff)`` at ``s`` px outward of the edge, ``sigma_eff^2 = sigma^2 + 1/12``
    (the box's variance; common practice). A ray whose prediction lies ``x`` px out of the
    edge samples its rim and surround levels in the detector's bands about ``x``; its edge lies
    where the profile crosses their mean, solved exactly; rays at angle ``phi`` to the shift see
    ``x = cos(phi)``, and the circle's centre moves by twice the mean of ``edge(x) cos(phi)``."""
    se = math.sqrt(sigma_px**2 + 1.0 / 12.0)

    def edge(x: float) -> float:
        s = x + _LOCAL_OFF
        prof = ndtr(-s / se)
        level = 0.5 * (prof[_LOCAL_INNER].mean() + prof[_LOCAL_OUTER].mean())
        return float(-se * ndtri(level))

    phi = np.arange(_N_RAYS) * 2 * np.pi / _N_RAYS
    return float(2 * np.mean([edge(math.cos(p)) * math.cos(p) for p in phi]))


def _blurred_disc(sigma_px: float) -> tuple[np.ndarray, np.ndarray]:
    """An empty grey table frame and the same with a flat grey ball (same hue, so the detector's
    two-colour mixing edge places it) at ``AT``, its silhouette covered pixel by pixel (8 x 8
    samples) and blurred by a Gaussian of ``sigma_px``; both (H, W, 3) uint8."""
    w, h = CAM.image_size
    empty = np.full((h, w, 3), 90, np.uint8)
    out = sphere_outline_px(CAM, np.array([[AT[0], AT[1], R]]), R, 360)[0]
    c = CAM.project(np.array([[AT[0], AT[1], R]]))[0]
    r = float(np.mean(np.linalg.norm(out - c, axis=1)))
    u0, v0 = int(c[0]) - 40, int(c[1]) - 40
    ss = 8
    g = (np.arange(80 * ss) + 0.5) / ss - 0.5
    cov = ((g[None, :] + u0 - c[0]) ** 2 + (g[:, None] + v0 - c[1]) ** 2 <= r * r).reshape(80, ss, 80, ss).mean(axis=(1, 3))
    patch = 90.0 + (200.0 - 90.0) * cv2.GaussianBlur(cov, (0, 0), sigma_px)
    img = empty.copy()
    img[v0 : v0 + 80, u0 : u0 + 80] = np.clip(np.round(patch), 0, 255).astype(np.uint8)[..., None]
    return empty, img


@pytest.mark.parametrize("sigma_px", [0.7, 2.5])
def test_one_round_keeps_the_share_of_a_start_error_a_blurred_edge_gives(sigma_px):
    # Reference: the one-dimensional analytic model above (Gaussian-blurred step, exact
    # crossing), with none of the detector's code. A sharp edge is found where it is whatever
    # the prediction (keep near 0); a wide one is found about the prediction (keep well above
    # half), the mechanism benchmarks/edge_pull.py measures on encoded clips.
    empty, img = _blurred_disc(sigma_px)
    det = BallDetector(CAM, NINE_FOOT)
    det.process(0, 0.0, empty)
    b_px, keep = pull(det, img, *AT)
    want = _keep_1d(sigma_px)
    # 0.05: the disc's curvature (radius ~13 px against the straight edge), the detector's
    # 0.25 px sampling with linear interpolation and the 8-bit rounding; measured 0.03 and 0.01
    # (0.082 against 0.054, 0.682 against 0.672; not a published figure).
    assert abs(keep - want) <= 0.05, (keep, want)
    assert b_px <= 0.1  # a flat symmetric disc: one round from the truth stays there
    if sigma_px < 1.0:
        assert keep < 0.25
    else:
        assert keep > 0.5
