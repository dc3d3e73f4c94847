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
    are exact) meeting the plane z = 0."""
    w, h = camera.image_size
    s = int(supersample)
    offs = (np.arange(s) + 0.5) / s - 0.5
    acc = np.zeros((h, w))
    uu, vv = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    for du in offs:
        for dv in offs:
            uv = np.column_stack([(uu + du).ravel(), (vv + dv).ravel()])
            X = camera.backproject(uv, 0.0)
            cx = (X[:, 0] - board.origin_mm[0]) / board.square_mm
            cy = (X[:, 1] - board.origin_mm[1]) / board.square_mm
            inside = (cx >= 0) & (cx < board.squares[0]) & (cy >= 0) & (cy < board.squares[1])
            parity = (np.floor(cx).astype(np.int64) + np.floor(cy).astype(np.int64)) % 2 == 0
            val = np.where(inside, np.where(parity, dark, light), 128.0)
            acc += val.reshape(h, w)
    return np.clip(acc / (s * s), 0, 255).round().astype(np.uint8)
