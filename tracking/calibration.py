"""The image <-> table mapping that every later stage uses.

A :class:`Calibration` couples a :class:`~tracking.camera.CameraModel` with the
table preset and the ball size. Ball centres are mapped through the plane
z = R (one ball radius above the cloth), never through the cloth plane.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from feltlab.standards import TablePreset, table_preset
from tracking.camera import CameraModel


@dataclass
class Calibration:
    """Camera and table geometry for one clip.

    camera: the fitted camera (table frame, mm). table: the preset whose
    playing surface (length_mm x width_mm) defines the table frame.
    ball_diameter_mm: diameter used for the ball-centre plane and for the
    expected radius in pixels. residual_px / residual_mm: RMS distance of the
    observed cushion-nose edge points (or manual corners) from the fitted model.
    method: "auto", "manual" or "truth" (from a render's truth file).
    """

    camera: CameraModel
    table: TablePreset
    ball_diameter_mm: float
    residual_px: float = float("nan")
    residual_mm: float = float("nan")
    method: str = "auto"
    notes: list[str] = field(default_factory=list)

    @property
    def ball_radius_mm(self) -> float:
        return self.ball_diameter_mm / 2.0

    @property
    def px_per_mm(self) -> float:
        """Scale at the table centre, in the ball-centre plane (px/mm)."""
        c = [self.table.length_mm / 2, self.table.width_mm / 2, self.ball_radius_mm]
        return 1.0 / self.camera.mm_per_px(c)

    def table_to_px(self, xy_mm: np.ndarray, z_mm: float | None = None) -> np.ndarray:
        """Table points (N,2) mm at height z (default: ball-centre plane) -> pixels (N,2)."""
        xy = np.asarray(xy_mm, dtype=float).reshape(-1, 2)
        z = self.ball_radius_mm if z_mm is None else z_mm
        return self.camera.project(np.column_stack([xy, np.full(len(xy), z)]))

    def px_to_table(self, px: np.ndarray, z_mm: float | None = None) -> np.ndarray:
        """Pixels (N,2) -> table points (N,2) mm on the plane z (default: ball-centre plane)."""
        z = self.ball_radius_mm if z_mm is None else z_mm
        return self.camera.backproject(px, z)[:, :2]

    def ball_radius_px(self, xy_mm: np.ndarray, n: int = 24) -> np.ndarray:
        """Apparent ball radius (px) at table points (N,2): radius of the circle fitted to the ball's silhouette.

        The silhouette (:meth:`CameraModel.sphere_silhouette`, the tangent
        cone through the full camera model) is fitted by least squares
        (Kasa 1976). Off the optical axis by theta the
        silhouette is an ellipse stretched radially by ~1/cos(theta), so this
        is up to several per cent larger than R times the local scale of the
        ball-centre plane, which a wide-angle lens close to the table shows.
        """
        xy = np.asarray(xy_mm, dtype=float).reshape(-1, 2)
        R = self.ball_radius_mm
        out = np.empty(len(xy))
        for i, (x, y) in enumerate(xy):
            sil = self.camera.sphere_silhouette([x, y, R], R, n)
            # Kasa algebraic circle fit: x^2 + y^2 = 2 a x + 2 b y + c
            A = np.column_stack([2 * sil[:, 0], 2 * sil[:, 1], np.ones(len(sil))])
            a, b, c = np.linalg.lstsq(A, (sil ** 2).sum(axis=1), rcond=None)[0]
            out[i] = float(np.sqrt(max(c + a * a + b * b, 0.0)))
        return out

    def to_dict(self) -> dict:
        return {
            "table": self.table.name,
            "ball_diameter_mm": self.ball_diameter_mm,
            "residual_px": self.residual_px,
            "residual_mm": self.residual_mm,
            "px_per_mm": self.px_per_mm,
            "method": self.method,
            "camera": self.camera.to_dict(),
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Calibration":
        return cls(
            camera=CameraModel.from_dict(d["camera"]),
            table=table_preset(d["table"]),
            ball_diameter_mm=float(d["ball_diameter_mm"]),
            residual_px=float(d.get("residual_px", float("nan"))),
            residual_mm=float(d.get("residual_mm", float("nan"))),
            method=d.get("method", "auto"),
            notes=list(d.get("notes", [])),
        )
