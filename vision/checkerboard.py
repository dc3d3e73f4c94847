"""A checkerboard lying on the cloth, imaged through a :class:`~vision.camera.Camera` by ray casting:
the reference target for checking calibration against OpenCV's ``cv2.calibrateCamera`` (Zhang
2000's planar-target method as OpenCV implements it).

Frames as in :mod:`vision.camera`: table mm (board on ``z = 0``), pixels ``(u, v)`` with the origin
at the centre of pixel (0, 0).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vision.camera import Camera


@dataclass(frozen=True)
class Checkerboard:
    """``squares`` (columns, rows) of side ``square_mm``, lower-left corner at ``origin_mm`` (table
    x, y), edges along the table axes, on the cloth (z = 0)."""

    squares: tuple[int, int]
    square_mm: float
    origin_mm: tuple[float, float]

    def __post_init__(self) -> None:
        if min(self.squares) < 3 or self.square_mm <= 0:
            raise ValueError(f"checkerboard needs at least 3x3 squares of positive size, got {self.squares} x {self.square_mm} mm")

    @property
    def pattern_size(self) -> tuple[int, int]:
        """Inner corners (per row, per column), as OpenCV's ``findChessboardCorners`` wants them."""
        return (self.squares[0] - 1, self.squares[1] - 1)

    def inner_corners_mm(self) -> np.ndarray:
        """(N, 3) inner corners (x, y, 0) mm, row by row (x fastest)."""
        nx, ny = self.pattern_size
        gx, gy = np.meshgrid(np.arange(1, nx + 1), np.arange(1, ny + 1))
        x = self.origin_mm[0] + gx.ravel() * self.square_mm
        y = self.origin_mm[1] + gy.ravel() * self.square_mm
        return np.column_stack([x, y, np.zeros(len(x))])


def render_checkerboard(camera: Camera, board: Checkerboard, supersample: int = 3, dark: float = 30.0, light: float = 220.0) -> np.ndarray:
    """(H, W) uint8 image of ``board`` on a mid-grey cloth seen by ``camera``: each pixel is the
    mean of ``supersample`` x ``supersample`` rays (``Camera.rays``, so distortion and perspective
    are exact) meeting the plane z = 0.

    Only pixels on a boundary need more than one ray: a pixel whose centre value matches all eight
    neighbours' lies inside one square (squares are many pixels wide, so a square edge crossing
    the pixel separates its centre from a neighbour's), so its ray at the centre is its value;
    the rest are supersampled. Same image as supersampling everywhere, a fraction of the rays."""
    w, h = camera.image_size
    s = int(supersample)

    def value(uv: np.ndarray) -> np.ndarray:
        X = camera.backproject(uv, 0.0)
        cx = (X[:, 0] - board.origin_mm[0]) / board.square_mm
        cy = (X[:, 1] - board.origin_mm[1]) / board.square_mm
        inside = (cx >= 0) & (cx < board.squares[0]) & (cy >= 0) & (cy < board.squares[1])
        parity = (np.floor(cx).astype(np.int64) + np.floor(cy).astype(np.int64)) % 2 == 0
        return np.where(inside, np.where(parity, dark, light), 128.0)

    uu, vv = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    centre = value(np.column_stack([uu.ravel(), vv.ravel()])).reshape(h, w)
    pad = np.pad(centre, 1, mode="edge")
    edge = np.zeros((h, w), bool)
    for dv in (-1, 0, 1):
        for du in (-1, 0, 1):
            edge |= pad[1 + dv : 1 + dv + h, 1 + du : 1 + du + w] != centre
    ev, eu = np.nonzero(edge)
    offs = (np.arange(s) + 0.5) / s - 0.5
    ou, ov = np.meshgrid(offs, offs)
    sub = np.column_stack([(eu[:, None] + ou.ravel()[None]).ravel(), (ev[:, None] + ov.ravel()[None]).ravel()])
    out = centre.copy()
    out[ev, eu] = value(sub).reshape(len(ev), s * s).mean(axis=1)
    return np.clip(out, 0, 255).round().astype(np.uint8)
