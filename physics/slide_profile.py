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
replaces the t_roll part of e's linearised variance: that part (e's variance minus its variance
with t_roll held, Gaussian conditioning) is taken out and the square of the largest such ratio
over refits within ``slide_profile_dchi2_max`` put in. The linearised part can be far too wide
as well as too narrow: where the slide lies between two samples the profile is flat to fourth
order at its best point (dchi2 ~ 0.05 at 8 ms, 0.9 at 16 ms, 3.3 at 24 ms on one 120 fps stun
shot), its curvature there near 0, and the linearised sigma of t_roll ran to 0.29 s, of e to
0.87, where the refits moved e by 0.03 within dchi2 <= 1.

The slide's direction is not fixed by the samples either: a ball that slid into the contact
has a free slip there, so the slip link says nothing of the slip after it, and a slide that
speeds the ball up (forward spin) or slows it down (none or back spin) to the same roll
velocity fits the few samples after it alike. Each grid point with t_roll > 0 is therefore
refitted from both starts, the fitted slide acceleration and its reverse (roll velocity kept),
and both count in the half-width.

Before a contact (cushion or ball-ball) the same question arises the other way round: a ball
that reaches the contact still sliding (a draw bank ~85 ms after the strike) fits a slide that
rolls over a few frames before the contact about as well (dchi2 ~3 at 120 fps), and the roll
phase then carries the velocity at the contact almost unchanged where the slide would have
taken another mu_s g dt off it per frame. With the slide end held the linearised sigma says
nothing of that choice, and e was 5.5 sigma off on such banks. Where ``slide_profile_pre`` is
set, the segment that ends at the contact is refitted with its slide end held on a grid from
a few frames before the earlier of (fitted slide end, contact) to one frame past the later
(past the contact: the ball slides into it), every other parameter free. This profile is not
flat-topped: it rises from the best fit to a plateau (every slide end past the contact is one
model), so its part is the largest |e_k - e| / sqrt(max(dchi2_k, 1)) among refits within
``slide_profile_dchi2_max`` (the profile likelihood's one-sigma reach, Wilks; a flat prior
over the slide end would weigh the plateau by an arbitrary span). It replaces the linearised
part of that slide end as above; both ends of a ball-ball contact can count at once.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

from physics.segments import ChainFit, _bounds, _residuals, segment_starts, unpack_segment
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


def _pre_contact_slide(f: ChainFit, j: int, dt: float, s: PhysicsSettings) -> tuple[int, np.ndarray, float] | None:
    """(parameter index of t_roll, grid of t_roll values s, the grid's far end) of the segment that
    ENDS at break ``j`` (module docstring), or None for a rest segment. The far end is the other
    model: sliding into the contact where the fit rolls there, else rolling a few frames before."""
    o = f.layout.move_offset(j)
    if o is None or unpack_segment(f.x, f.layout, j) is None:
        return None
    starts, _ = segment_starts(f.x, f.layout)
    tau_b = float(f.breaks()[j]) - float(starts[j])
    t_hat = float(f.x[o + 4])
    lo = max(min(t_hat, tau_b) - s.slide_profile_frames * dt, 0.0)
    hi = max(t_hat, tau_b) + dt
    grid = np.unique(np.concatenate([np.linspace(lo, hi, s.slide_profile_points), [t_hat]]))
    return o + 4, grid, (hi if t_hat < tau_b else lo)


def profile_t_roll(f: ChainFit, sig: np.ndarray, k: int, grid: np.ndarray, s: PhysicsSettings,
                   seg_priors: dict | None, flip: bool = False) -> tuple[np.ndarray, list[np.ndarray]]:
    """Costs (len(grid),) and refitted parameters of chain ``f`` with parameter ``k`` (a t_roll)
    held at each grid value; ``sig``: the samples' sigmas (T, 2) mm. ``flip``: start each refit
    from the reversed slide acceleration (parameters k-2, k-1), with the start velocity moved so
    the roll velocity v0 + a t_roll stays the fit's."""
    lay = f.layout
    tu, xyu, sgu = f.t[f.used], f.xy[f.used], sig[f.used]
    lo, hi = _bounds(lay, f.t[-1], s)
    free = np.ones(len(f.x), bool)
    free[k] = False
    o = k - 4  # the segment's offset: v0 (2), a (2), t_roll, a_r (physics.segments.unpack_segment)
    v_roll = f.x[o : o + 2] + f.x[o + 2 : o + 4] * f.x[k]

    def res(q, val):
        z = f.x.copy()
        z[free] = q
        z[k] = val
        return _residuals(z, lay, tu, xyu, sgu, s, seg_priors)

    costs, xs = [], []
    q0 = np.clip(f.x[free], lo[free], hi[free])
    for val in grid:
        if flip:
            z0 = f.x.copy()
            z0[o + 2 : o + 4] = -f.x[o + 2 : o + 4]
            z0[o : o + 2] = v_roll - z0[o + 2 : o + 4] * val
            q0 = np.clip(z0[free], lo[free], hi[free])
        r = least_squares(res, q0, bounds=(lo[free], hi[free]), args=(float(val),), x_scale="jac",
                          max_nfev=200)
        z = f.x.copy()
        z[free] = r.x
        z[k] = val
        costs.append(float(r.cost))
        xs.append(z)
    return np.asarray(costs), xs


def conditional_cov(cov: np.ndarray, hold: list[int]) -> np.ndarray:
    """Covariance of a Gaussian with parameters ``hold`` known: ``C - C[:, h] C[h, h]^+ C[h, :]``
    (conditioning a multivariate normal; standard statistics, from memory).

    >>> import numpy as np
    >>> C = np.array([[4.0, 2.0], [2.0, 2.0]])
    >>> conditional_cov(C, [1]).round(6).tolist()  # var x0 | x1 = 4 - 2 * 2 / 2
    [[2.0, 0.0], [0.0, 0.0]]
    """
    h = np.asarray(hold, dtype=int)
    if len(h) == 0:
        return cov
    chh = cov[np.ix_(h, h)]
    out = cov - cov[:, h] @ np.linalg.pinv(chh) @ cov[h, :]
    return 0.5 * (out + out.T)


def _profile_mse(t: np.ndarray, dchi2: np.ndarray, e: list, e0: float) -> float:
    """Mean squared difference of e from ``e0`` under the profile likelihood exp(-dchi2 / 2) over
    the signed slide end ``t`` (s; < 0: the reversed slide), flat prior on ``t`` (trapezoid
    weights over the sorted grid): the spread of e the samples leave, about the reported value.
    NaN e_k are left out.

    >>> import numpy as np
    >>> t = np.linspace(-1.0, 1.0, 201)
    >>> round(_profile_mse(t, np.zeros_like(t), list(t), 0.0), 3)  # flat: uniform on [-1, 1], 1/3
    0.333
    """
    e = np.asarray(e, dtype=float)
    ok = np.isfinite(e) & np.isfinite(dchi2)
    if ok.sum() < 2:
        return 0.0
    t, d, e = np.asarray(t, float)[ok], np.asarray(dchi2, float)[ok], e[ok]
    order = np.argsort(t, kind="stable")
    t, d, e = t[order], d[order], e[order]
    dt = np.diff(t)
    w_t = np.zeros(len(t))
    w_t[:-1] += 0.5 * dt
    w_t[1:] += 0.5 * dt
    w = w_t * np.exp(-0.5 * (d - d.min()))
    if not np.sum(w) > 0:
        return 0.0
    return float(np.sum(w * (e - e0) ** 2) / np.sum(w))


def _dchi2(f: ChainFit, costs: np.ndarray, sig: np.ndarray, s: PhysicsSettings, pri) -> np.ndarray:
    """Refits' chi^2 above the best of (fit, refits), scaled like the fit's covariance."""
    base = float(np.sum(_residuals(f.x, f.layout, f.t[f.used], f.xy[f.used], sig[f.used], s, pri) ** 2) / 2.0)
    best = min(base, float(np.min(costs)))
    scale = f.cov_scale if np.isfinite(f.cov_scale) and f.cov_scale > 0 else 1.0
    return 2.0 * (costs - best) / scale


def _largest_ratio(es: list, dchi2: np.ndarray, e0: float, d_max: float) -> float:
    """Largest |e_k - e0| / sqrt(max(dchi2_k, 1)) over refits with dchi2_k <= ``d_max`` (0 if none):
    the one-sigma reach of a profile likelihood (Wilks, delta chi^2 = z^2; from memory).

    >>> import numpy as np
    >>> round(_largest_ratio([0.0, 0.1, 0.4, 0.9], np.array([0.0, 0.25, 4.0, 16.0]), 0.0, 9.0), 3)
    0.2
    """
    half = 0.0
    for e_k, d in zip(es, dchi2):
        if d <= d_max and np.isfinite(e_k):
            half = max(half, float(abs(e_k - e0) / np.sqrt(max(float(d), 1.0))))
    return half


def widen_for_short_slides(contacts: pd.DataFrame, cands, fits: dict, maps: dict, samples: dict,
                           e_of, e_var_of, s: PhysicsSettings, pri_of, dt: float) -> pd.DataFrame:
    """``contacts`` with the t_roll part of e_sigma replaced by the t_roll profile's part where a
    ball's slide after a ball-ball contact is short, and (``s.slide_profile_pre``) for the slide
    end of the segment each ball ends at a contact of either kind (module docstring).
    ``e_of(fits, ci)``: e of candidate ``ci`` from the given fits; ``e_var_of(ci, hold_a,
    hold_b)``: e's propagated fit variance with the given parameter indices of ball a and ball b
    held (hold_b empty for a cushion); ``pri_of(name, lay)``: that ball's segment priors."""
    if not s.slide_profile or contacts.empty:
        return contacts
    df = contacts.copy()
    for r in df.index:
        ci = int(df.at[r, "_cand"])
        c = cands[ci]
        bb = c.kind == "ball-ball"
        if not (bb or s.slide_profile_pre) or not np.isfinite(df.at[r, "e"]):
            continue
        e0 = float(df.at[r, "e"])
        half2 = 0.0
        names = (c.ball_a, c.ball_b) if bb else (c.ball_a,)
        hold: dict[str, list[int]] = {name: [] for name in names}
        for name in names if bb else ():
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
                if s.slide_profile_flip:
                    pos = grid[grid > 0]
                    c2, x2 = profile_t_roll(f, samples[name].sig, k, pos, s, pri, flip=True)
                    costs, xs = np.concatenate([costs, c2]), xs + x2
            except (ValueError, np.linalg.LinAlgError):
                continue  # a degenerate refit: the linearised sigma stands (never a failed analysis)
            dchi2 = _dchi2(f, costs, samples[name].sig, s, pri)
            es = [e_of({**fits, name: replace(f, x=z)}, ci) for z in xs]
            if s.slide_profile_moments:
                signed = np.concatenate([grid, -grid[grid > 0]]) if len(xs) > len(grid) else grid
                half2 += _profile_mse(signed, dchi2, es, e0)
            else:
                half2 += _largest_ratio(es, dchi2, e0, s.slide_profile_dchi2_max) ** 2
            hold[name].append(k)
        for name in names if s.slide_profile_pre else ():
            f = fits.get(name)
            j = maps[name][0].get(ci) if f is not None else None
            if j is None or name not in samples:
                continue
            got = _pre_contact_slide(f, j, dt, s)
            if got is None or got[0] in hold[name]:
                continue
            k, grid, t_far = got
            pri = pri_of(name, f.layout)
            try:
                # the other model first: where it lies beyond slide_profile_dchi2_max the samples
                # have chosen and the linearised part stands (saves the grid's refits at most contacts)
                c_far, x_far = profile_t_roll(f, samples[name].sig, k, np.array([t_far]), s, pri)
                if _dchi2(f, c_far, samples[name].sig, s, pri)[0] > s.slide_profile_dchi2_max:
                    continue
                rest = grid[grid != t_far]
                costs, xs = profile_t_roll(f, samples[name].sig, k, rest, s, pri)
                costs, xs = np.concatenate([costs, c_far]), xs + x_far
            except (ValueError, np.linalg.LinAlgError):
                continue
            dchi2 = _dchi2(f, costs, samples[name].sig, s, pri)
            es = [e_of({**fits, name: replace(f, x=z)}, ci) for z in xs]
            half2 += _largest_ratio(es, dchi2, e0, s.slide_profile_dchi2_max) ** 2
            hold[name].append(k)
        if not any(hold.values()):
            continue
        sg = float(df.at[r, "e_sigma"])
        if not np.isfinite(sg):
            continue
        ha, hb = hold[c.ball_a], (hold[c.ball_b] if bb else [])
        if s.slide_profile_replace:
            try:
                v_all = e_var_of(ci, [], [])
                v_held = e_var_of(ci, ha, hb)
                lin = max(v_all - v_held, 0.0) if np.isfinite(v_all) and np.isfinite(v_held) else 0.0
            except (ValueError, np.linalg.LinAlgError):
                lin = 0.0  # the linearised part stands; the profile can only widen
            var = max(sg**2 - lin, 0.0) + half2
        else:  # session 14: the larger of the two, never narrower
            var = max(sg**2, half2)
        if abs(var - sg**2) > 1e-15:
            df.at[r, "e_sigma"] = float(np.sqrt(var))
            p = df.at[r, "_e_var_parts"] if "_e_var_parts" in df.columns else None
            if isinstance(p, dict):  # PhysicsSettings.e_sigma_parts: what the profile changed
                p["profile"] = float(var - sg**2)
    return df
