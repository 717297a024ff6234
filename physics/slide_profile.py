"""Profile of e over the end of a short slide after a ball-ball contact.

A ball that leaves a contact slowly (the cue ball of a stun shot, 15-60 mm/s) slides for a few
ms, often less than a frame; where it also slid INTO the contact its slip there is free, so
nothing but the few samples after the contact fixes how long that slide lasts. e's linearised
sigma then follows the curvature at the best fit only, while fits with the slide's end (t_roll)
elsewhere are about as good and give a different outgoing velocity. The profile is far from
quadratic: t_roll >= 0 bounds it, and towards 0 the chi^2 rises by only 2-5 over 30 ms.

For such a ball the chain is refitted with t_roll held at each point of a grid (every other
parameter free, same samples, priors and bounds) and e is recomputed with each refit. Each refit
k, whose chi^2 (scaled like the fit's covariance) lies dchi2_k above the best, says e may be
off by |e_k - e| at dchi2_k, i.e. by |e_k - e| / sqrt(max(dchi2_k, 1)) at one sigma (profile
likelihood, Wilks: delta chi^2 = z^2 for one parameter; standard statistics, from memory). For
a quadratic profile this ratio is the same at every k, the t_roll part of e's sigma. e_sigma
becomes the larger of its linearised value and the largest such ratio over refits within
``slide_profile_dchi2_max`` (never narrower).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

from physics.segments import ChainFit, _bounds, _residuals, unpack_segment
from physics.settings import PhysicsSettings


def _short_slide(f: ChainFit, j: int, s: PhysicsSettings) -> tuple[int, float] | None:
    """(parameter index of t_roll, fitted t_roll s) of the segment after break ``j`` when its slide
    holds at most ``s.slide_profile_max_samples`` used samples, else None."""
    seg = j + 1
    o = f.layout.move_offset(seg)
    if o is None or unpack_segment(f.x, f.layout, seg) is None:
        return None
    tb = float(f.breaks()[j])
    t_roll = float(f.x[o + 4])
    tu = f.t[f.used]
    if int(((tu > tb) & (tu < tb + t_roll)).sum()) > s.slide_profile_max_samples:
        return None
    return o + 4, t_roll


def profile_t_roll(f: ChainFit, sig: np.ndarray, k: int, grid: np.ndarray, s: PhysicsSettings,
                   seg_priors: dict | None) -> tuple[np.ndarray, list[np.ndarray]]:
    """Costs (len(grid),) and refitted parameters of chain ``f`` with parameter ``k`` (a t_roll)
    held at each grid value; ``sig``: the samples' sigmas (T, 2) mm."""
    lay = f.layout
    tu, xyu, sgu = f.t[f.used], f.xy[f.used], sig[f.used]
    lo, hi = _bounds(lay, f.t[-1], s)
    free = np.ones(len(f.x), bool)
    free[k] = False

    def res(q, val):
        z = f.x.copy()
        z[free] = q
        z[k] = val
        return _residuals(z, lay, tu, xyu, sgu, s, seg_priors)

    costs, xs = [], []
    q0 = np.clip(f.x[free], lo[free], hi[free])
    for val in grid:
        r = least_squares(res, q0, bounds=(lo[free], hi[free]), args=(float(val),), x_scale="jac",
                          max_nfev=200)
        z = f.x.copy()
        z[free] = r.x
        z[k] = val
        costs.append(float(r.cost))
        xs.append(z)
    return np.asarray(costs), xs


def widen_for_short_slides(contacts: pd.DataFrame, cands, fits: dict, maps: dict, samples: dict,
                           e_of, s: PhysicsSettings, pri_of, dt: float) -> pd.DataFrame:
    """``contacts`` with e_sigma of ball-ball rows widened to the t_roll profile half-width where a
    ball's slide after the contact is short (module docstring). ``e_of(fits, ci)``: e of candidate
    ``ci`` from the given fits; ``pri_of(name, lay)``: that ball's segment priors."""
    if not s.slide_profile or contacts.empty:
        return contacts
    df = contacts.copy()
    for r in df.index:
        ci = int(df.at[r, "_cand"])
        c = cands[ci]
        if c.kind != "ball-ball" or not np.isfinite(df.at[r, "e"]):
            continue
        e0 = float(df.at[r, "e"])
        half = 0.0
        for name in (c.ball_a, c.ball_b):
            f = fits.get(name)
            j = maps[name][0].get(ci) if f is not None else None
            if j is None or name not in samples:
                continue
            got = _short_slide(f, j, s)
            if got is None:
                continue
            k, t_hat = got
            t_max = max(2.0 * t_hat, t_hat + s.slide_profile_frames * dt)
            grid = np.unique(np.concatenate([np.linspace(0.0, t_max, s.slide_profile_points), [t_hat]]))
            pri = pri_of(name, f.layout)
            try:
                costs, xs = profile_t_roll(f, samples[name].sig, k, grid, s, pri)
            except (ValueError, np.linalg.LinAlgError):
                continue  # a degenerate refit: the linearised sigma stands (never a failed analysis)
            base = float(np.sum(_residuals(f.x, f.layout, f.t[f.used], f.xy[f.used],
                                           samples[name].sig[f.used], s, pri) ** 2) / 2.0)
            best = min(base, float(np.min(costs)))
            scale = f.cov_scale if np.isfinite(f.cov_scale) and f.cov_scale > 0 else 1.0
            dchi2 = 2.0 * (costs - best) / scale
            for z, d in zip(xs, dchi2):
                if d > s.slide_profile_dchi2_max:
                    continue
                e_k = e_of({**fits, name: replace(f, x=z)}, ci)
                if np.isfinite(e_k):
                    half = max(half, abs(e_k - e0) / np.sqrt(max(d, 1.0)))
        sg = float(df.at[r, "e_sigma"])
        if np.isfinite(sg) and half > sg:
            df.at[r, "e_sigma"] = half
            p = df.at[r, "_e_var_parts"] if "_e_var_parts" in df.columns else None
            if isinstance(p, dict):  # PhysicsSettings.e_sigma_parts: what the profile added
                p["profile"] = float(half**2 - sg**2)
    return df
