"""Pinhole camera with radial/tangential lens distortion (OpenCV's model).

One camera model serves both the synthetic-footage renderer and calibration,
so a render's truth and an analysis use exactly the same geometry.

Frames
------
* Table frame (world): millimetres; origin at the playing-surface corner
  (where two cushion-nose lines meet) nearest the image's bottom-left when the
  long side runs left-right; x along the long side, y along the short side,
  z up from the cloth. A ball centre sits at z = R (ball radius).
* Camera frame: OpenCV convention (x right, y down, z forward along the
  optical axis), millimetres. ``X_cam = R @ X_world + t``.
* Image: pixels, origin at the centre of the top-left pixel, x right, y down.

Distortion follows OpenCV's ``(k1, k2, p1, p2, k3)`` (Brown-Conrady) model
applied to normalised coordinates; see the OpenCV ``calib3d`` documentation.

>>> cam = CameraModel.looking_down(table_centre_mm=(1270, 635), height_mm=3000,
...                                focal_px=1000, image_size=(1280, 720))
>>> px = cam.project([[1270.0, 635.0, 0.0]])
>>> [float(round(v, 3)) for v in px[0]]
[639.5, 359.5]
>>> xyz = cam.backproject(px, z_mm=0.0)
>>> [float(round(v, 6)) + 0.0 for v in xyz[0]]
[1270.0, 635.0, 0.0]
"""
from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

ArrayLike = np.ndarray | list | tuple


def rotation_from_euler(roll_deg: float, pitch_deg: float, yaw_deg: float) -> np.ndarray:
    """Rotation (world->camera) of a camera looking straight down, then tilted.

    The untilted camera has its image x along world +x and image y along
    world -y (so the table's origin corner appears bottom-left) and looks along
    world -z. ``yaw`` turns it about the world vertical, ``pitch`` tilts the
    optical axis towards +y (about the camera x axis) and ``roll`` turns the
    image about the optical axis. Angles in degrees.
    """
    down = np.array([[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]])
    r, p, y = np.radians([roll_deg, pitch_deg, yaw_deg])
    rz_world = np.array([[np.cos(y), -np.sin(y), 0], [np.sin(y), np.cos(y), 0], [0, 0, 1]])
    rx_cam = np.array([[1, 0, 0], [0, np.cos(p), -np.sin(p)], [0, np.sin(p), np.cos(p)]])
    rz_cam = np.array([[np.cos(r), -np.sin(r), 0], [np.sin(r), np.cos(r), 0], [0, 0, 1]])
    # world->camera: first undo yaw in the world, then the down-looking base,
    # then pitch and roll about camera axes.
    return rz_cam @ rx_cam @ down @ rz_world.T


@dataclass
class CameraModel:
    """Intrinsics, distortion and pose of one camera.

    K: 3x3 intrinsic matrix (px). dist: OpenCV distortion (k1, k2, p1, p2, k3).
    R: 3x3 rotation world->camera. t: translation (mm), X_cam = R X_world + t.
    image_size: (width, height) in px.
    """

    K: np.ndarray
    dist: np.ndarray
    R: np.ndarray
    t: np.ndarray
    image_size: tuple[int, int]
    meta: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.K = np.asarray(self.K, dtype=float).reshape(3, 3)
        d = np.zeros(5)
        dist = np.asarray(self.dist, dtype=float).ravel()
        d[: min(5, dist.size)] = dist[:5]
        self.dist = d
        self.R = np.asarray(self.R, dtype=float).reshape(3, 3)
        self.t = np.asarray(self.t, dtype=float).reshape(3)
        self.image_size = (int(self.image_size[0]), int(self.image_size[1]))

    # ------------------------------------------------------------------ build
    @classmethod
    def looking_down(
        cls,
        table_centre_mm: tuple[float, float],
        height_mm: float,
        focal_px: float,
        image_size: tuple[int, int],
        roll_deg: float = 0.0,
        pitch_deg: float = 0.0,
        yaw_deg: float = 0.0,
        k1: float = 0.0,
        k2: float = 0.0,
        offset_mm: tuple[float, float] = (0.0, 0.0),
    ) -> "CameraModel":
        """A camera above ``table_centre_mm`` (+ offset) at ``height_mm`` over the cloth.

        With zero angles and offset the table centre projects to the image
        centre ((w-1)/2, (h-1)/2).
        """
        w, h = image_size
        K = np.array([[focal_px, 0, (w - 1) / 2.0], [0, focal_px, (h - 1) / 2.0], [0, 0, 1]])
        R = rotation_from_euler(roll_deg, pitch_deg, yaw_deg)
        centre = np.array([table_centre_mm[0] + offset_mm[0], table_centre_mm[1] + offset_mm[1], height_mm])
        t = -R @ centre
        return cls(K=K, dist=np.array([k1, k2, 0, 0, 0]), R=R, t=t, image_size=(w, h))

    # --------------------------------------------------------------- queries
    @property
    def centre_mm(self) -> np.ndarray:
        """Camera centre in the table frame (mm)."""
        return -self.R.T @ self.t

    @property
    def has_distortion(self) -> bool:
        return bool(np.any(self.dist != 0))

    def to_camera(self, points_mm: ArrayLike) -> np.ndarray:
        """Table-frame points (N,3) mm -> camera-frame points (N,3) mm."""
        p = np.asarray(points_mm, dtype=float).reshape(-1, 3)
        return p @ self.R.T + self.t

    def distort_normalised(self, xy: np.ndarray) -> np.ndarray:
        """Apply the distortion model to normalised image coordinates (N,2)."""
        k1, k2, p1, p2, k3 = self.dist
        x, y = xy[:, 0], xy[:, 1]
        r2 = x * x + y * y
        radial = 1 + k1 * r2 + k2 * r2 * r2 + k3 * r2 * r2 * r2
        xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
        yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
        return np.stack([xd, yd], axis=1)

    def project(self, points_mm: ArrayLike) -> np.ndarray:
        """Table-frame points (N,3) mm -> distorted pixel coordinates (N,2)."""
        pc = self.to_camera(points_mm)
        xy = pc[:, :2] / pc[:, 2:3]
        xy = self.distort_normalised(xy)
        fx, fy, cx, cy = self.K[0, 0], self.K[1, 1], self.K[0, 2], self.K[1, 2]
        return np.stack([fx * xy[:, 0] + self.K[0, 1] * xy[:, 1] + cx, fy * xy[:, 1] + cy], axis=1)

    def undistort_pixels(self, px: ArrayLike) -> np.ndarray:
        """Distorted pixels (N,2) -> normalised undistorted coordinates (N,2)."""
        q = np.asarray(px, dtype=float).reshape(-1, 2)
        fx, fy, cx, cy = self.K[0, 0], self.K[1, 1], self.K[0, 2], self.K[1, 2]
        yd = (q[:, 1] - cy) / fy
        xd = (q[:, 0] - cx - self.K[0, 1] * yd) / fx
        target = np.stack([xd, yd], axis=1)
        if not self.has_distortion:
            return target
        # Fixed-point iteration (as OpenCV's undistortPoints), then Newton polish.
        k1, k2, p1, p2, k3 = self.dist
        xy = target.copy()
        for _ in range(40):
            x, y = xy[:, 0], xy[:, 1]
            r2 = x * x + y * y
            radial = 1 + k1 * r2 + k2 * r2 * r2 + k3 * r2 ** 3
            dx = 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
            dy = p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
            xy = np.stack([(xd - dx) / radial, (yd - dy) / radial], axis=1)
        for _ in range(3):
            f = self.distort_normalised(xy) - target
            h = 1e-7
            jx = (self.distort_normalised(xy + [h, 0]) - self.distort_normalised(xy)) / h
            jy = (self.distort_normalised(xy + [0, h]) - self.distort_normalised(xy)) / h
            det = jx[:, 0] * jy[:, 1] - jy[:, 0] * jx[:, 1]
            xy = xy - np.stack([(jy[:, 1] * f[:, 0] - jy[:, 0] * f[:, 1]) / det,
                                (-jx[:, 1] * f[:, 0] + jx[:, 0] * f[:, 1]) / det], axis=1)
        return xy

    def rays(self, px: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Pixels (N,2) -> (camera centre (3,), unit ray directions (N,3)) in the table frame."""
        xy = self.undistort_pixels(px)
        d_cam = np.concatenate([xy, np.ones((xy.shape[0], 1))], axis=1)
        d = d_cam @ self.R  # R.T @ d for each row
        d /= np.linalg.norm(d, axis=1, keepdims=True)
        return self.centre_mm, d

    def backproject(self, px: ArrayLike, z_mm: float = 0.0) -> np.ndarray:
        """Pixels (N,2) -> table-frame points (N,3) on the horizontal plane z = z_mm.

        Use ``z_mm = R`` (ball radius) for ball centres: a ball centre is one
        radius above the cloth, and mapping it through the cloth plane instead
        shifts it away from the camera's foot point by ``R * d / H``.
        """
        c, d = self.rays(px)
        s = (z_mm - c[2]) / d[:, 2]
        return c[None, :] + s[:, None] * d

    def plane_homography(self, z_mm: float = 0.0) -> np.ndarray:
        """3x3 homography from table (x, y) mm on plane z to *undistorted* pixels."""
        M = self.K @ np.column_stack([self.R[:, 0], self.R[:, 1], self.R[:, 2] * z_mm + self.t])
        return M / M[2, 2]

    def sphere_silhouette(self, centre_mm: ArrayLike, radius_mm: float, n: int = 24) -> np.ndarray:
        """Image (n, 2) px of the outline of a sphere (centre (3,) mm, table frame).

        The tangent cone from the camera centre O touches the sphere (centre
        C, radius R, distance d) along a circle of centre C + (R^2/d) u and
        radius R sqrt(1 - R^2/d^2), u = (O - C)/d; that circle is projected
        with the full model (distortion included).
        """
        C = np.asarray(centre_mm, dtype=float).reshape(3)
        R = float(radius_mm)
        v = self.centre_mm - C
        d = float(np.linalg.norm(v))
        u = v / d
        e1 = np.cross(u, [0.0, 0.0, 1.0])
        if np.linalg.norm(e1) < 1e-9:
            e1 = np.array([1.0, 0.0, 0.0])
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(u, e1)
        phi = np.linspace(0, 2 * np.pi, n, endpoint=False)
        rho = R * np.sqrt(max(1.0 - (R / d) ** 2, 0.0))
        pts = C + (R * R / d) * u + rho * (np.cos(phi)[:, None] * e1 + np.sin(phi)[:, None] * e2)
        return self.project(pts)

    def mm_per_px(self, point_mm: ArrayLike) -> float:
        """Approximate ground-sample distance (mm per pixel) at a table point (3,)."""
        p = np.asarray(point_mm, dtype=float).reshape(1, 3)
        eps = 1.0
        q = self.project(np.vstack([p, p + [eps, 0, 0], p + [0, eps, 0]]))
        jac = np.column_stack([q[1] - q[0], q[2] - q[0]]) / eps  # px per mm
        return float(1.0 / np.sqrt(abs(np.linalg.det(jac))))

    # ------------------------------------------------------------- serialise
    def to_dict(self) -> dict:
        return {
            "K": self.K.tolist(),
            "dist": self.dist.tolist(),
            "R": self.R.tolist(),
            "t_mm": self.t.tolist(),
            "image_size": list(self.image_size),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "CameraModel":
        return cls(K=d["K"], dist=d["dist"], R=d["R"], t=d.get("t_mm", d.get("t")), image_size=d["image_size"])
