"""A stripe ball whose band is the cloth's colour: its outline from the lit rim, seeded at its dark ring.

A stripe ball is white at both caps and coloured in a band round its
middle. When the band is the cloth's colour (a green stripe on green
cloth) only the white cap differs clearly from the cloth; where the band
fills the rim, the colour fit of :func:`tracking.detect.refine_centre`
traces the cap's edge instead of the ball's outline. That edge is a plane
section of the sphere, seen as an ellipse smaller than the ball (its
centre is not the ball's), and the fit either accepts it as a small free
radius or, with the radius pinned, slides the disc off the ball; both
give centres a third to a half of a radius off with a confident sigma.

What still marks the outline where the band fills the rim:

* the dark limb ring of any lit sphere (:mod:`tracking.dark_ring`): its
  centre is a coarse but unbiased-by-the-cap seed (the cap lies inside the
  ring, not on it);
* the band's lit limb, a thin rim a few units brighter than the cloth or
  off the cloth's hue, while the ball's own cast shadow and its unlit
  limb are darker along the cloth's own colour. On a map that keeps
  colour across the cloth's and brightening only (:func:`lit_difference`:
  no darkening of any kind counts), the cast shadow vanishes and the lit
  band limb stays. The silhouette is the outermost edge on that map that is
  clear of the noise, however much stronger the cap's inner edge is
  (``stripe_outer_frac`` of the ray's strongest drop instead of the
  colour fit's ``edge_outer_frac``).

For every circle-fit detection with clear colour contrast (the weak ones
are :func:`tracking.dark_ring.recentre_by_ring`'s) the circle fit is
redone on that map from the ring's centre. The refit replaces the colour
fit only when it is the outline of a ball: its free radius within
``stripe_radius_tol`` of the expected one (a cap's edge is smaller), its
disc holding the ball's clearly-not-cloth pixels as well as the colour
fit's (:func:`tracking.dark_ring._outline_holds`), and it lies more than
``stripe_min_shift`` radii from the colour fit (closer, the colour fit
stands: the two agree). When no refit passes, the colour fit looks like a
cap's edge (its radius pinned, or free but more than ``stripe_radius_tol``
below the expected one) and the ring lies more than ``stripe_min_shift``
radii from it, the colour fit stays with its sigma widened to that
distance: the evidence does not say where the ball is to better than that.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from tracking.calibration import Calibration
from tracking.detect import Background, refine_centre, to_lab
from tracking.settings import DetectionSettings


def lit_difference(lab: np.ndarray, bg_lab: np.ndarray) -> np.ndarray:
    """Colour difference (Delta-E*ab units) from the background that ignores ANY darkening along its colour.

    With v = (L* + 16, a*, b*) of the pixel and c the same of the background
    (as :func:`tracking.detect.shade_free_de`): the part of v across c, combined
    (root sum of squares) with brightening past |c| only. A shadow, the unlit
    limb of a ball of the cloth's colour and its contact shadow all darken the
    cloth's colour and read 0; a lit limb, a white cap or another hue do not.
    """
    v = np.asarray(lab, np.float32) + np.float32([16.0, 0.0, 0.0])
    c = np.asarray(bg_lab, np.float32) + np.float32([16.0, 0.0, 0.0])
    cn = np.sqrt(np.einsum("...k,...k->...", c, c)) + np.float32(1e-6)
    along = np.einsum("...k,...k->...", v, c) / cn
    perp2 = np.maximum(np.einsum("...k,...k->...", v, v) - along * along, 0.0)
    over = np.maximum(along - cn, 0.0)
    return np.sqrt(perp2 + over * over).astype(np.float32)


def outline_refit(image: np.ndarray, background: Background, seed: tuple[float, float], r_exp: float,
                  box: tuple[int, int, int, int], settings: DetectionSettings) -> dict | None:
    """The circle fit on :func:`lit_difference` from ``seed`` (image px) in the image box (xa, ya, xb, yb).

    Returns :func:`tracking.detect.refine_centre`'s dict in image px, or None.
    """
    xa, ya, xb, yb = box
    lab = to_lab(image[ya:yb, xa:xb])
    m = lit_difference(lab, background.lab_image()[ya:yb, xa:xb]) * background.weight_map()[ya:yb, xa:xb]
    ds = dataclasses.replace(settings, edge_outer_frac=settings.stripe_outer_frac,
                             radius_tol=settings.stripe_radius_tol)
    fit = refine_centre(m, seed[0] - xa, seed[1] - ya, r_exp, ds, image[ya:yb, xa:xb], background.threshold_dn, None)
    if fit is None:
        return None
    return {**fit, "x": fit["x"] + xa, "y": fit["y"] + ya}


def recentre_stripes(det: pd.DataFrame, image: np.ndarray, calibration: Calibration, background: Background,
                     settings: DetectionSettings = DetectionSettings()) -> pd.DataFrame:
    """Detections whose colour fit traced a stripe's cap, re-fitted on the ball's outline (a new DataFrame).

    See the module docstring. Streak fits, detections below
    ``ring_recentre_contrast`` thresholds (the dark ring's own job) and
    balls with another ball's disc reaching into their ring's outer annulus
    (a rack) are left as they are.
    """
    if det.empty or not settings.stripe_refit:
        return det
    from tracking.dark_ring import (_outline_holds, ball_centres_px, ring_centre, ring_crowded, ring_patch,
                                    ring_refine)

    thr = background.threshold_dn
    todo = (det["contrast_dn"].to_numpy(float) >= settings.ring_recentre_contrast * thr) \
        & (np.nan_to_num(det["streak_px"].to_numpy(float)) <= 0)
    if not todo.any():
        return det
    cal = calibration
    cen, rad = ball_centres_px(det, background)
    out = det.copy()
    for i in np.nonzero(todo)[0]:
        gx, gy = cen[i]
        r_exp = rad[i]
        if ring_crowded(cen, rad, i, settings):
            continue
        got = ring_patch(image, background, cal, cen, rad, i, settings)
        if got is None:
            continue
        xa, ya, xb, yb, lp, wp = got
        tx, ty, contrast = ring_centre(lp, wp, gx - xa, gy - ya, r_exp, settings)
        if not contrast > 0:
            continue
        ref = ring_refine(lp, wp, tx, ty, r_exp, settings) if settings.ring_refine else None
        rx, ry = (ref[0] + xa, ref[1] + ya) if ref is not None else (tx + xa, ty + ya)
        ring_shift = float(np.hypot(rx - gx, ry - gy))
        if ring_shift > settings.ring_recentre_max_shift * r_exp:
            continue  # the ring there is another thing's
        fit = outline_refit(image, background, (rx, ry), r_exp, (xa, ya, xb, yb), settings)
        j = out.index[i]
        if fit is not None and not fit["fixed_radius"]:
            shift = float(np.hypot(fit["x"] - gx, fit["y"] - gy))
            if shift <= settings.stripe_min_shift * r_exp:
                continue  # from the ring's seed the outline comes back to the colour fit: it stands
            if _outline_holds(image[ya:yb, xa:xb], background, xa, ya, wp, (gx, gy), (fit["x"], fit["y"]), r_exp,
                              settings):
                r_new, ox, oy = background.lookup(fit["x"], fit["y"])
                p = np.array([[fit["x"] - ox, fit["y"] - oy]])
                xy = cal.px_to_table(p)[0]
                mmpp = cal.ball_radius_mm / r_new
                sig = max(float(fit["sigma_px"]), float(out.at[j, "sigma_px"]))
                out.loc[j, ["x_px", "y_px", "x_mm", "y_mm"]] = [p[0, 0], p[0, 1], xy[0], xy[1]]
                out.loc[j, ["sx_mm", "sy_mm", "sigma_px", "radius_px", "support"]] = [
                    sig * mmpp, sig * mmpp, sig, float(fit["radius"]), float(fit["support"])]
                continue
        ratio = float(out.at[j, "radius_px"]) / r_exp
        cap_like = abs(ratio - 1.0) < 2e-3 or ratio < 1.0 - settings.stripe_radius_tol  # pinned, or a cap's size
        if cap_like and ring_shift > settings.stripe_min_shift * r_exp:
            # the colour fit looks like a cap's edge, its ring lies elsewhere and no outline settles it:
            # say so in the sigma
            mmpp = cal.ball_radius_mm / r_exp
            sig = max(ring_shift, float(out.at[j, "sigma_px"]))
            out.loc[j, ["sx_mm", "sy_mm", "sigma_px"]] = [sig * mmpp, sig * mmpp, sig]
    return out
