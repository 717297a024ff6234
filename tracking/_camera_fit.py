"""Least-squares camera fits against the table: edge points on nose lines, or corner points.

Camera model: :class:`tracking.camera.CameraModel` (pinhole + OpenCV radial
distortion, see the OpenCV calib3d documentation). Unknowns: one focal length
(square pixels), the pose (Rodrigues rotation vector + translation, mm), and
radial k1 (optionally k2). The principal point is held at the image centre:
it cannot be separated from the pose with a single plane (Zhang, "A flexible
new technique for camera calibration", IEEE PAMI 22(11), 2000, needs several
plane orientations for it).
"""
from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np
from scipy.optimize import least_squares

from tracking.camera import CameraModel

#: side name -> (axis index of the coordinate that is fixed, which dimension)
SIDES = {"y0": (1, 0.0), "xL": (0, 1.0), "yW": (1, 1.0), "x0": (0, 0.0)}
SIDE_ORDER = ("y0", "xL", "yW", "x0")


def camera_from_params(p: np.ndarray, image_size: tuple[int, int], k1: float | None = None,
                       fit_k1: bool = True, fit_k2: bool = False) -> CameraModel:
    """Build a camera from the parameter vector [f, rvec(3), t(3), (q1), (q2)].

    q1 = k1 (w / f)^2 and q2 = k2 (w / f)^4 are the radial terms in image units
    (w: image width): the pixel displacement k1 r_px^3 / f^2 does not change
    when f does, so focal and distortion are not tied along a valley in
    which f is free (a near-overhead view).
    """
    w, h = image_size
    f = p[0]
    K = np.array([[f, 0, (w - 1) / 2.0], [0, f, (h - 1) / 2.0], [0, 0, 1]])
    R, _ = cv2.Rodrigues(np.asarray(p[1:4], float))
    i = 7
    kk1 = 0.0 if k1 is None else float(k1)
    kk2 = 0.0
    a = (f / w) ** 2
    if fit_k1:
        kk1 = p[i] * a
        i += 1
    if fit_k2:
        kk2 = p[i] * a * a
    return CameraModel(K=K, dist=[kk1, kk2, 0, 0, 0], R=R, t=p[4:7], image_size=(w, h))


def params_from_camera(cam: CameraModel, fit_k1: bool = True, fit_k2: bool = False) -> np.ndarray:
    rvec, _ = cv2.Rodrigues(cam.R)
    p = [cam.K[0, 0], *rvec.ravel(), *cam.t]
    a = (cam.image_size[0] / cam.K[0, 0]) ** 2
    if fit_k1:
        p.append(cam.dist[0] * a)
    if fit_k2:
        p.append(cam.dist[1] * a * a)
    return np.array(p, float)


def initial_camera(corners_px: np.ndarray, corners_mm: np.ndarray, image_size: tuple[int, int],
                   focal_px: float | None = None, k1: float = 0.0) -> CameraModel:
    """Camera from four (or more) coplanar point pairs, focal scanned if not given.

    corners_mm: (N, 3) table points (a common z). For each trial focal the pose
    comes from OpenCV's planar PnP (IPPE, Collins & Bartoli, IJCV 2014); the
    focal with the smallest reprojection error wins.
    """
    w, h = image_size
    obj = np.asarray(corners_mm, np.float64).reshape(-1, 3)
    img = np.asarray(corners_px, np.float64).reshape(-1, 2)
    focals = [focal_px] if focal_px else list(np.geomspace(0.3 * w, 5.0 * w, 40))
    best = None
    for f in focals:
        K = np.array([[f, 0, (w - 1) / 2.0], [0, f, (h - 1) / 2.0], [0, 0, 1]])
        dist = np.array([k1, 0, 0, 0, 0], float)
        try:
            ok, rvec, tvec = cv2.solvePnP(obj, img, K, dist, flags=cv2.SOLVEPNP_IPPE)
        except cv2.error:
            ok = False
        if not ok:
            continue
        proj, _ = cv2.projectPoints(obj, rvec, tvec, K, dist)
        err = float(np.sqrt(np.mean(np.sum((proj.reshape(-1, 2) - img) ** 2, axis=1))))
        R, _ = cv2.Rodrigues(rvec)
        cam = CameraModel(K=K, dist=dist, R=R, t=tvec.ravel(), image_size=(w, h))
        if cam.centre_mm[2] <= obj[0, 2]:
            continue  # camera under the table
        if best is None or err < best[0]:
            best = (err, cam)
    if best is None:
        raise ValueError("no camera pose fits the table corners")
    return best[1]


def backproject_radial(cam: CameraModel, px: np.ndarray, z_mm: float) -> np.ndarray:
    """Fast back-projection (N,3) onto the plane z for radial-only distortion (k1, k2).

    Inverts r_d = r_u (1 + k1 r_u^2 + k2 r_u^4) by Newton's method on the
    radius (same model as OpenCV's; CameraModel.undistort_pixels handles the
    general case).
    """
    k1, k2 = cam.dist[0], cam.dist[1]
    f, cx, cy = cam.K[0, 0], cam.K[0, 2], cam.K[1, 2]
    xd = (px[:, 0] - cx) / f
    yd = (px[:, 1] - cy) / cam.K[1, 1]
    rd = np.sqrt(xd * xd + yd * yd)
    ru = rd.copy()
    for _ in range(8):
        r2 = ru * ru
        g = ru * (1 + k1 * r2 + k2 * r2 * r2) - rd
        dg = 1 + 3 * k1 * r2 + 5 * k2 * r2 * r2
        ru = ru - g / np.where(np.abs(dg) < 1e-6, 1e-6, dg)
    ratio = np.where(rd > 1e-12, ru / np.maximum(rd, 1e-12), 1.0)
    d = np.column_stack([xd * ratio, yd * ratio, np.ones_like(xd)]) @ cam.R
    c = -cam.R.T @ cam.t
    s = (z_mm - c[2]) / d[:, 2]
    return c[None, :] + s[:, None] * d


#: A group of edge points: (side name, height z_mm of the line, (N, 2) pixels).
Group = tuple[str, float, np.ndarray]
#: An image point on a plane x = const: (pixel (2,), z_mm, x as a fraction of L, sigma px).
PointOnX = tuple[np.ndarray, float, float, float]


def _edge_resid_mm(cam: CameraModel, groups: list[Group], L: float, W: float, ls: float = 1.0) -> np.ndarray:
    out = []
    for side, z, p in groups:
        if len(p) == 0:
            continue
        xyz = backproject_radial(cam, p, z)
        ax, frac = SIDES[side]
        dim = (L * ls) if ax == 0 else W
        out.append(xyz[:, ax] - frac * dim)
    return np.concatenate(out) if out else np.empty(0)


@dataclass
class EdgeFit:
    """Result of :func:`fit_edges`: the camera and per-point residuals (mm on the line's plane, px)."""

    camera: CameraModel
    resid_mm: np.ndarray
    resid_px: np.ndarray
    length_scale: float = 1.0


def gaussian_under_soft_l1(c: np.ndarray | float, f_scale: float) -> np.ndarray:
    """A residual that costs what ``c`` would with no robust loss, under scipy's ``soft_l1`` with ``f_scale``.

    least_squares applies one robust loss to every residual; a prior term of
    c (sigma-weighted) would cost only ~f_scale * |c| there (linear, like an
    outlier), so many edge points sharing a systematic error outweigh it.
    scipy's cost is 0.5 * sum(f^2 rho((r / f)^2)) with rho(z) = 2 (sqrt(1 + z)
    - 1) for soft_l1 and rho(z) = z for no loss (scipy.optimize.least_squares
    docs); f^2 rho = c^2 gives r = f sqrt((1 + c^2 / (2 f^2))^2 - 1), with the
    sign of c. The prior stays Gaussian at every distance.

    >>> from scipy.optimize._lsq.least_squares import soft_l1
    >>> c = np.array([0.3, -4.0, 25.0])
    >>> r = gaussian_under_soft_l1(c, 0.5)
    >>> rho = np.empty((3, 3)); soft_l1((r / 0.5) ** 2, rho, cost_only=False)
    >>> np.allclose(0.25 * rho[0], c ** 2)
    True
    """
    c = np.asarray(c, float)
    z = (1.0 + c ** 2 / (2.0 * f_scale ** 2)) ** 2 - 1.0
    return np.sign(c) * f_scale * np.sqrt(z)


def fit_edges(cam0: CameraModel, groups: list[Group], L: float, W: float,
              fit_k2: bool = False, loss_scale_px: float = 0.5,
              hfov_prior: tuple[float, float] | None = None, free_length: bool = False,
              points: list[PointOnX] | None = None) -> EdgeFit:
    """Fit focal, pose and radial distortion so the table's lines pass through the edge points.

    groups: (side, z_mm, pixels): observed pixels on the line x = 0, x = L,
    y = 0 or y = W (side 'x0', 'xL', 'y0', 'yW') at height z_mm. Residual:
    distance (mm) along the table axis between the point back-projected onto
    the plane z and the line, times the nominal scale (px/mm) so the loss works
    in pixels. ``free_length`` also fits a factor on L (to check the aspect
    ratio). hfov_prior: (deg, sigma deg), a Gaussian prior on the
    horizontal field of view, weighted like one side's points (see below)
    and kept quadratic under the robust loss (:func:`gaussian_under_soft_l1`).
    points: (pixel (2,), z_mm, x fraction of L, sigma px): image points known
    to lie on the plane x = frac * L (a side pocket's centre, frac 0.5); each
    residual is the back-projected x minus frac * L, in px over sigma, and
    weighted like the prior: a sigma's error costs what one side's points
    all off by ``loss_scale_px`` cost (a side's systematic error), kept
    quadratic. They are not in the returned residuals.
    """
    w = cam0.image_size[0]
    z_ref = groups[0][1]
    scale = 1.0 / cam0.mm_per_px([L / 2, W / 2, z_ref])
    p0 = params_from_camera(cam0, True, fit_k2)
    if free_length:
        p0 = np.append(p0, 1.0)
    nk = 8 + int(fit_k2)
    # Edge points share systematic errors (a few tenths of a px per side), so
    # they do not average down as 1/sqrt(N) in the focal direction; the prior
    # is weighted as if it were one side's worth of points.
    n_pts = sum(len(g[2]) for g in groups)
    prior_w = loss_scale_px * np.sqrt(max(n_pts, 1) / 4.0)

    def fun(p):
        cam = camera_from_params(p[:nk], cam0.image_size, fit_k1=True, fit_k2=fit_k2)
        ls = p[nk] if free_length else 1.0
        r = _edge_resid_mm(cam, groups, L, W, ls) * scale
        if hfov_prior is not None:
            hfov = np.degrees(2 * np.arctan(w / 2.0 / p[0]))
            r = np.append(r, gaussian_under_soft_l1(prior_w * (hfov - hfov_prior[0]) / hfov_prior[1],
                                                    loss_scale_px))
        for px, zp, frac, sig in points or ():
            x = backproject_radial(cam, np.asarray(px, float).reshape(1, 2), zp)[0, 0]
            e = (x - frac * L * ls) * scale
            r = np.append(r, gaussian_under_soft_l1(prior_w * e / sig, loss_scale_px))
        return r

    lo = np.full_like(p0, -np.inf)
    hi = np.full_like(p0, np.inf)
    lo[0], hi[0] = 0.1 * w, 20.0 * w
    lo[7], hi[7] = -3.0, 3.0
    p0[0] = np.clip(p0[0], lo[0] * 1.01, hi[0] * 0.99)
    p0[7] = np.clip(p0[7], -2.99, 2.99)
    res = least_squares(fun, p0, bounds=(lo, hi), loss="soft_l1", f_scale=loss_scale_px,
                        x_scale="jac", max_nfev=200)
    cam = camera_from_params(res.x[:nk], cam0.image_size, fit_k1=True, fit_k2=fit_k2)
    ls = float(res.x[nk]) if free_length else 1.0
    r_mm = _edge_resid_mm(cam, groups, L, W, ls)
    r_px = []
    i = 0
    for side, z, p in groups:
        if len(p) == 0:
            continue
        xyz = backproject_radial(cam, p, z)
        k = np.mean([1.0 / cam.mm_per_px(q) for q in xyz[:: max(len(xyz) // 8, 1)]])
        r_px.append(r_mm[i: i + len(p)] * k)
        i += len(p)
    return EdgeFit(cam, r_mm, np.concatenate(r_px) if r_px else np.empty(0), ls)


def fit_points(cam0: CameraModel, px: np.ndarray, xyz_mm: np.ndarray, fit_focal: bool,
               fit_k1: bool, hfov_prior: tuple[float, float] | None = None,
               prior_px: float = 0.5) -> tuple[CameraModel, np.ndarray]:
    """Fit pose (and focal, k1 if asked) to point correspondences; returns (camera, residuals px).

    hfov_prior: (deg, sigma deg) weak prior on the horizontal field of view,
    weighted as ``prior_px`` of image residual per sigma.
    """
    w = cam0.image_size[0]
    k1_fixed = float(cam0.dist[0])
    f_fixed = float(cam0.K[0, 0])
    p_all = params_from_camera(cam0, True, False)
    free = [fit_focal, True, True, True, True, True, True, fit_k1]
    idx = [i for i, fr in enumerate(free) if fr]

    def build(q):
        p = p_all.copy()
        p[idx] = q
        if not fit_focal:
            p[0] = f_fixed
        if not fit_k1:
            return camera_from_params(p[:7], cam0.image_size, k1=k1_fixed, fit_k1=False)
        return camera_from_params(p, cam0.image_size, fit_k1=True)

    def fun(q):
        cam = build(q)
        r = (cam.project(xyz_mm) - px).ravel()
        if hfov_prior is not None and fit_focal:
            hfov = np.degrees(2 * np.arctan(w / 2.0 / cam.K[0, 0]))
            r = np.append(r, prior_px * (hfov - hfov_prior[0]) / hfov_prior[1])
        return r

    res = least_squares(fun, p_all[idx], x_scale="jac", max_nfev=400)
    cam = build(res.x)
    return cam, np.linalg.norm((cam.project(xyz_mm) - px), axis=1)
