"""Pinhole camera with lens distortion, looking at the table.

Frames, written down once:

* **table frame**: ``vision.table`` (mm, x along a long cushion, y along a short one, z up from
  the cloth);
* **camera frame**: OpenCV's, ``X_cam = R @ X_table + t`` (mm), z along the optical axis,
  x to the image's right, y down the image;
* **image pixels**: ``(u, v)`` with the origin at the centre of pixel (0, 0), u to the right
  (column), v down (row), as OpenCV's ``projectPoints`` returns them; numpy images index
  ``img[v, u]``.

Distortion is OpenCV's radial-tangential model with coefficients ``(k1, k2, p1, p2, k3)``
(Brown-Conrady; OpenCV documentation, "Camera Calibration and 3D Reconstruction").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from vision.table import TableSpec


def _rodrigues(rvec: np.ndarray) -> np.ndarray:
    """Rotation matrix from an axis-angle vector (Rodrigues' formula)."""
    rvec = np.asarray(rvec, dtype=float).reshape(3)
    angle = float(np.linalg.norm(rvec))
    if angle < 1e-15:
        return np.eye(3)
    k = rvec / angle
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(angle) * kx + (1 - math.cos(angle)) * kx @ kx


def _rotation_to_rvec(rot: np.ndarray) -> np.ndarray:
    """Axis-angle vector of a rotation matrix (inverse of Rodrigues' formula)."""
    rot = np.asarray(rot, dtype=float)
    cos_a = np.clip((np.trace(rot) - 1) / 2, -1.0, 1.0)
    angle = math.acos(cos_a)
    if angle < 1e-12:
        return np.zeros(3)
    if math.pi - angle < 1e-6:
        # Near 180 degrees the antisymmetric part vanishes; take the axis from R + I.
        m = (rot + np.eye(3)) / 2
        axis = m[:, int(np.argmax(np.diag(m)))]
        return axis / np.linalg.norm(axis) * angle
    w = np.array([rot[2, 1] - rot[1, 2], rot[0, 2] - rot[2, 0], rot[1, 0] - rot[0, 1]])
    return w / (2 * math.sin(angle)) * angle


@dataclass(frozen=True, eq=False)
class Camera:
    """A calibrated camera: intrinsics ``K`` (3, 3), distortion (5,), pose ``rvec``, ``tvec`` (mm).

    ``image_size`` is (width, height) in pixels.
    """

    K: np.ndarray
    dist: np.ndarray
    rvec: np.ndarray
    tvec: np.ndarray
    image_size: tuple[int, int]
    R: np.ndarray = field(init=False, repr=False)
    centre_mm: np.ndarray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        K = np.asarray(self.K, dtype=float).reshape(3, 3)
        dist = np.zeros(5)
        given = np.asarray(self.dist, dtype=float).ravel()
        if given.size > 5:
            raise ValueError(f"distortion takes at most 5 coefficients (k1,k2,p1,p2,k3), got {given.size}")
        dist[: given.size] = given
        if not (K[0, 0] > 0 and K[1, 1] > 0):
            raise ValueError(f"focal lengths must be positive, got fx={K[0, 0]}, fy={K[1, 1]}")
        object.__setattr__(self, "K", K)
        object.__setattr__(self, "dist", dist)
        object.__setattr__(self, "rvec", np.asarray(self.rvec, dtype=float).reshape(3))
        object.__setattr__(self, "tvec", np.asarray(self.tvec, dtype=float).reshape(3))
        object.__setattr__(self, "image_size", (int(self.image_size[0]), int(self.image_size[1])))
        rot = _rodrigues(self.rvec)
        object.__setattr__(self, "R", rot)
        # Camera centre C satisfies R C + t = 0.
        object.__setattr__(self, "centre_mm", -rot.T @ self.tvec)

    # --- construction -------------------------------------------------------------------
    @classmethod
    def look_at(
        cls,
        position_mm: tuple[float, float, float],
        target_mm: tuple[float, float, float],
        image_size: tuple[int, int],
        hfov_deg: float,
        dist: tuple[float, ...] = (0.0, 0.0, 0.0, 0.0, 0.0),
        roll_deg: float = 0.0,
        principal_offset_px: tuple[float, float] = (0.0, 0.0),
    ) -> "Camera":
        """A camera at ``position_mm`` aimed at ``target_mm`` (table frame).

        With ``roll_deg`` 0 the table's +x runs to the image's right as nearly as the aim allows
        (image "down" is the table's -y); a positive roll turns the image anticlockwise about the
        optical axis. ``hfov_deg`` is the horizontal field of view of the undistorted pinhole.
        """
        pos = np.asarray(position_mm, dtype=float)
        fwd = np.asarray(target_mm, dtype=float) - pos
        if np.linalg.norm(fwd) < 1e-9:
            raise ValueError("camera position and target coincide; aim the camera at the table")
        z_c = fwd / np.linalg.norm(fwd)
        x_hint = np.array([1.0, 0.0, 0.0])
        if abs(z_c @ x_hint) > 0.99:
            raise ValueError("camera looks along the table's x axis; tilt it down at the table")
        x_c = x_hint - (x_hint @ z_c) * z_c
        x_c /= np.linalg.norm(x_c)
        y_c = np.cross(z_c, x_c)
        a = math.radians(roll_deg)
        x_r = math.cos(a) * x_c - math.sin(a) * y_c
        y_r = math.sin(a) * x_c + math.cos(a) * y_c
        rot = np.vstack([x_r, y_r, z_c])
        w, h = image_size
        if not (1.0 < hfov_deg < 170.0):
            raise ValueError(f"horizontal field of view {hfov_deg} deg is outside 1..170 deg")
        f = (w / 2) / math.tan(math.radians(hfov_deg) / 2)
        K = np.array(
            [
                [f, 0.0, (w - 1) / 2 + principal_offset_px[0]],
                [0.0, f, (h - 1) / 2 + principal_offset_px[1]],
                [0.0, 0.0, 1.0],
            ]
        )
        return cls(K, np.asarray(dist), _rotation_to_rvec(rot), -rot @ pos, (w, h))

    @classmethod
    def overhead(
        cls,
        table: TableSpec,
        height_mm: float,
        image_size: tuple[int, int] = (1280, 720),
        hfov_deg: float | None = None,
        offset_mm: tuple[float, float] = (0.0, 0.0),
        aim_offset_mm: tuple[float, float] = (0.0, 0.0),
        roll_deg: float = 0.0,
        dist: tuple[float, ...] = (0.0, 0.0, 0.0, 0.0, 0.0),
        margin: float = 1.08,
    ) -> "Camera":
        """A camera ``height_mm`` above the cloth, displaced ``offset_mm`` from above the table's
        centre and aimed at the centre plus ``aim_offset_mm``.

        Without ``hfov_deg`` the field of view is chosen so that the table with its rails fills
        the frame with ``margin`` to spare.
        """
        if height_mm <= table.rail_top_height_mm + 100:
            raise ValueError(f"camera height {height_mm} mm is too low; mount it at least 1 m above the cloth")
        cx, cy = table.length_mm / 2, table.width_mm / 2
        pos = (cx + offset_mm[0], cy + offset_mm[1], height_mm)
        target = (cx + aim_offset_mm[0], cy + aim_offset_mm[1], 0.0)
        if hfov_deg is None:
            probe = cls.look_at(pos, target, image_size, 60.0, (0, 0, 0, 0, 0), roll_deg)
            r = table.rail_width_mm
            outer = np.array(
                [
                    [-r, -r, 0],
                    [table.length_mm + r, -r, 0],
                    [table.length_mm + r, table.width_mm + r, 0],
                    [-r, table.width_mm + r, 0],
                ]
            )
            uv = probe.project(outer)
            w, h = image_size
            half = np.max(np.abs(uv - [(w - 1) / 2, (h - 1) / 2]) / [w / 2, h / 2])
            f60 = probe.K[0, 0]
            f = f60 / (half * margin)
            hfov_deg = math.degrees(2 * math.atan((w / 2) / f))
        return cls.look_at(pos, target, image_size, hfov_deg, dist, roll_deg)

    # --- projection ---------------------------------------------------------------------
    def distort_normalised(self, xy: np.ndarray) -> np.ndarray:
        """Apply the lens model to (N, 2) ideal normalised coordinates (x/z, y/z)."""
        k1, k2, p1, p2, k3 = self.dist
        x, y = xy[:, 0], xy[:, 1]
        r2 = x * x + y * y
        radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
        yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
        return np.stack([xd, yd], axis=1)

    def project(self, points_mm: np.ndarray) -> np.ndarray:
        """(N, 3) table-frame points (mm) -> (N, 2) pixels (u, v), distortion applied.

        Same model as OpenCV's ``projectPoints``; points behind the camera give NaN.
        """
        pts = np.asarray(points_mm, dtype=float).reshape(-1, 3)
        cam = pts @ self.R.T + self.tvec
        z = cam[:, 2]
        with np.errstate(divide="ignore", invalid="ignore"):
            xy = cam[:, :2] / z[:, None]
        xy[z <= 0] = np.nan
        d = self.distort_normalised(xy)
        K = self.K
        return np.stack([K[0, 0] * d[:, 0] + K[0, 1] * d[:, 1] + K[0, 2], K[1, 1] * d[:, 1] + K[1, 2]], axis=1)

    def undistort_normalised(self, uv_px: np.ndarray, iterations: int = 20) -> np.ndarray:
        """(N, 2) pixels -> (N, 2) ideal normalised coordinates, by Newton's method on the lens
        model (converges where the model is monotonic: within the image for real lenses)."""
        return self.undistort_normalised_parts([uv_px], iterations)[0]

    def undistort_normalised_parts(self, parts: list[np.ndarray], iterations: int = 20) -> list[np.ndarray]:
        """:meth:`undistort_normalised` of each (N_k, 2) array of pixels in ``parts``, bit for bit
        what separate calls give, in one Newton iteration over all their points: a part stops
        where its own call would (when its own points' largest model residual is under 1e-13),
        and each step evaluates :meth:`distort_normalised`'s expressions in the same order on
        the coordinate columns (sharing the radial factor with the Jacobian). Calibration's
        fit undistorts the four rails' nose points thousands of times, a few dozen points
        each, where the count of numpy calls, not the arithmetic, is the cost."""
        uvs = [np.asarray(p, dtype=float).reshape(-1, 2) for p in parts]
        ends = np.cumsum([0] + [len(u) for u in uvs])
        uv = np.concatenate(uvs) if uvs else np.zeros((0, 2))
        K = self.K
        yd = (uv[:, 1] - K[1, 2]) / K[1, 1]
        xd = (uv[:, 0] - K[0, 2] - K[0, 1] * yd) / K[0, 0]
        if not np.any(self.dist):
            target = np.stack([xd, yd], axis=1)
            return [target[i:j] for i, j in zip(ends[:-1], ends[1:])]
        x, y = xd.copy(), yd.copy()
        k1, k2, p1, p2, k3 = self.dist
        active = [k for k in range(len(uvs)) if ends[k + 1] > ends[k]]  # parts still iterating
        for _ in range(iterations):
            if not active:
                break
            if len(active) == len(uvs):
                sel = slice(None)
                spans = [(ends[k], ends[k + 1]) for k in active]
            else:
                sel = np.concatenate([np.arange(ends[k], ends[k + 1]) for k in active])
                sizes = np.cumsum([0] + [ends[k + 1] - ends[k] for k in active])
                spans = list(zip(sizes[:-1], sizes[1:]))
            xs, ys = x[sel], y[sel]
            r2 = xs * xs + ys * ys
            radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
            dradial = k1 + r2 * (2 * k2 + 3 * k3 * r2)  # d(radial)/d(r2)
            # distort_normalised(x, y) - target, written out as there.
            res = np.empty((len(xs), 2))
            res[:, 0] = xs * radial + 2 * p1 * xs * ys + p2 * (r2 + 2 * xs * xs) - xd[sel]
            res[:, 1] = ys * radial + p1 * (r2 + 2 * ys * ys) + 2 * p2 * xs * ys - yd[sel]
            # Jacobian of the lens model, d(xd, yd)/d(x, y) (symmetric).
            j11 = radial + 2 * xs * xs * dradial + 2 * p1 * ys + 6 * p2 * xs
            j12 = 2 * xs * ys * dradial + 2 * p1 * xs + 2 * p2 * ys
            j22 = radial + 2 * ys * ys * dradial + 6 * p1 * ys + 2 * p2 * xs
            det = j11 * j22 - j12 * j12
            x[sel] = xs - (j22 * res[:, 0] - j12 * res[:, 1]) / det
            y[sel] = ys - (-j12 * res[:, 0] + j11 * res[:, 1]) / det
            done = []
            for k, (i, j) in zip(active, spans):
                # np.nanmax's own cost is that of the step; it is needed only where a point is NaN.
                part = np.abs(res[i:j])
                worst = part.max()
                if worst < 1e-13 or (worst != worst and np.nanmax(part) < 1e-13):
                    done.append(k)
            active = [k for k in active if k not in done]
        xy = np.stack([x, y], axis=1)
        return [xy[i:j] for i, j in zip(ends[:-1], ends[1:])]

    def rays(self, uv_px: np.ndarray) -> np.ndarray:
        """(N, 2) pixels -> (N, 3) unit ray directions in the table frame, from ``centre_mm``."""
        return self.rays_normalised(self.undistort_normalised(uv_px))

    def rays_normalised(self, xy: np.ndarray) -> np.ndarray:
        """(N, 2) ideal normalised coordinates (:meth:`undistort_normalised`) -> (N, 3) unit ray
        directions in the table frame, from ``centre_mm``."""
        d_cam = np.column_stack([xy, np.ones(len(xy))])
        d = d_cam @ self.R  # R^T d_cam, row-wise
        return d / np.linalg.norm(d, axis=1, keepdims=True)

    def backproject(self, uv_px: np.ndarray, z_mm: float | np.ndarray = 0.0) -> np.ndarray:
        """(N, 2) pixels -> (N, 3) table-frame points where their rays meet the plane ``z = z_mm``.

        ``z_mm`` is a height above the cloth (0 for the cloth, the ball radius for ball centres,
        the nose height for cushion noses); scalar or (N,).
        """
        return self.backproject_normalised(self.undistort_normalised(uv_px), z_mm)

    def backproject_normalised(self, xy: np.ndarray, z_mm: float | np.ndarray = 0.0) -> np.ndarray:
        """:meth:`backproject` of (N, 2) ideal normalised coordinates (:meth:`undistort_normalised`)."""
        d = self.rays_normalised(xy)
        c = self.centre_mm
        s = (np.asarray(z_mm, dtype=float) - c[2]) / d[:, 2]
        return c + s[:, None] * d

    def cloth_homography(self, z_mm: float = 0.0) -> np.ndarray:
        """3x3 H mapping undistorted pixels (``K @ [x/z, y/z, 1]``) to table (x, y) on ``z = z_mm``.

        Plane-induced homography (Hartley & Zisserman, Multiple View Geometry, 2nd ed., sec. 13.1):
        a point (x, y, z0) images at ``K [r1 r2 (z0 r3 + t)] (x, y, 1)``; this is its inverse.
        """
        r = self.R
        forward = self.K @ np.column_stack([r[:, 0], r[:, 1], z_mm * r[:, 2] + self.tvec])
        H = np.linalg.inv(forward)
        return H / H[2, 2]

    # --- files --------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain-JSON description in OpenCV's conventions (K, dist k1 k2 p1 p2 k3, rvec, tvec mm)."""
        return {
            "model": "pinhole-radial-tangential",
            "image_size": list(self.image_size),
            "K": self.K.tolist(),
            "dist": self.dist.tolist(),
            "rvec": self.rvec.tolist(),
            "tvec_mm": self.tvec.tolist(),
            "centre_mm": self.centre_mm.tolist(),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Camera":
        """Inverse of :meth:`to_dict`; ValueError naming a missing key."""
        try:
            return cls(d["K"], d["dist"], d["rvec"], d["tvec_mm"], tuple(d["image_size"]))
        except KeyError as exc:
            raise ValueError(f"camera description lacks {exc.args[0]!r}") from None
