"""Tracks in, measured contacts out: :func:`analyze_tracks`.

Stages: raw samples per ball -> contact candidates with geometric and kinematic evidence
(:mod:`physics.events`) -> one motion-model chain per ball broken at its strikes and contacts
(:mod:`physics.segments`) -> contact quantities with propagated uncertainties
(:mod:`physics.contacts`). Table frame, mm, s, kg; impulses N·s; energies J.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import partial

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from feltlab.errors import FeltlabError
from feltlab.standards import TablePreset
from physics.compound import annotate_groups
from physics.cushion_geometry import contact_distance_mm
from physics.contacts import (
    ball_ball_core,
    cushion_core,
    derived,
    hidden_slide_dv,
    propagate,
    propagate_cov,
    touch_time_weights,
)
from physics.pair_cov import implied_shift, joint_cov
from physics.events import (
    CUSHION_NORMALS,
    BallSamples,
    ContactCandidate,
    _local_minima,
    ball_samples,
    cushion_distance,
    find_contacts,
    gap_step,
    motion_onset,
)
from physics.segments import (
    ChainFit,
    ChainLayout,
    _link_state,
    break_slip,
    fit_chain,
    restart_after_breaks,
    segment_starts,
    slide_into_breaks,
    slip_link_chi2,
    unpack_segment,
    widened_cov,
)
from physics.settings import PhysicsSettings
from physics.slide_profile import conditional_cov, widen_for_short_slides

CONTACT_COLUMNS = [
    "contact", "t_s", "t_sigma_s", "kind", "ball_a", "ball_b", "cushion", "nx", "ny",
    "va_in_x_mm_s", "va_in_y_mm_s", "va_out_x_mm_s", "va_out_y_mm_s",
    "vb_in_x_mm_s", "vb_in_y_mm_s", "vb_out_x_mm_s", "vb_out_y_mm_s",
    "speed_in_mm_s", "e", "e_sigma", "impulse_Ns", "impulse_n_Ns", "impulse_t_Ns",
    "momentum_residual_pct", "ke_before_J", "ke_after_J", "ke_loss_frac",
    "ke_total_before_J", "ke_total_after_J",
    "cut_angle_deg", "throw_deg", "a_departure_deg", "b_departure_deg", "separation_deg",
    "incidence_deg", "rebound_deg", "a_phase_in", "b_phase_in", "a_phase_out", "b_phase_out",
    "x_mm", "y_mm",
]
SEGMENT_COLUMNS = [
    "ball", "segment", "t0_s", "t1_s", "phase", "x0_mm", "y0_mm", "vx0_mm_s", "vy0_mm_s",
    "ax_mm_s2", "ay_mm_s2", "x0_sigma_mm", "y0_sigma_mm", "vx0_sigma_mm_s", "vy0_sigma_mm_s",
    "ax_sigma_mm_s2", "ay_sigma_mm_s2", "t_roll_s", "mu", "mu_sigma", "rms_mm", "n_points",
]
EVENT_COLUMNS = ["event", "t_s", "t_sigma_s", "kind", "ball", "other", "contact"]


@dataclass
class ShotPhysics:
    """Physics of one shot: ``events``, ``segments`` and ``contacts`` tables (columns above),
    per-shot cloth friction ``mu_s`` (sliding) and ``mu_r`` (rolling, deceleration / g) with
    sigmas (NaN where no phase was long enough), and the fitted chains."""

    events: pd.DataFrame
    segments: pd.DataFrame
    contacts: pd.DataFrame
    mu_s: float
    mu_s_sigma: float
    mu_r: float
    mu_r_sigma: float
    fits: dict[str, ChainFit] = field(default_factory=dict, repr=False)
    rest_xy: dict[str, np.ndarray] = field(default_factory=dict, repr=False)

    def state(self, ball: str, t_s):
        """Fitted position (mm) and velocity (mm/s) of ``ball`` at ``t_s`` (scalar -> (2,),
        array -> (T,2)). Raises FeltlabError for an unknown ball."""
        if ball not in self.fits:
            raise FeltlabError(f"no fitted motion for ball {ball!r}; known: {sorted(self.fits)}")
        t = np.asarray(t_s, dtype=float)
        P, V = self.fits[ball].state(np.atleast_1d(t))
        if t.ndim == 0:
            return P[0], V[0]
        return P, V


def _check_inputs(table, radius, mass, fps):
    if not (np.isfinite(fps) and fps > 0):
        raise FeltlabError(f"frame rate {fps!r} is not positive; pass the clip's fps (e.g. --fps 120)")
    if not (np.isfinite(radius) and 5 < radius < 100):
        raise FeltlabError(f"ball radius {radius!r} mm is implausible; pass the radius in mm (pool: 28.575)")
    if not (np.isfinite(mass) and 0.01 < mass < 2):
        raise FeltlabError(f"ball mass {mass!r} kg is implausible; pass the mass in kg (pool: 0.163)")
    if table.length_mm <= 0 or table.width_mm <= 0:
        raise FeltlabError("table size must be positive; check the table preset or calibration")


@dataclass
class _Break:
    t: float
    kind: str
    contact: int  # index into the candidate list, -1 for a strike
    mixed: bool = False  # other kinds of contact were merged into this break


def _layouts(samples, cands, onsets, dt, s, touch=None):
    """Per ball: chain layout and the map contact index -> break index. ``touch``: (table length
    mm, width mm, centre-to-nose distance at first touch mm) for the cushion touch prior."""
    layouts, maps = {}, {}
    for name, b in samples.items():
        brs = [_Break(c.t_init_s, c.kind, i) for i, c in enumerate(cands) if name in (c.ball_a, c.ball_b)]
        brs.sort(key=lambda x: x.t)
        on = onsets[name]
        rest_first = on.rest_first
        if rest_first and on.t_onset is not None:
            first_contact = brs[0].t if brs else np.inf
            if on.t_onset < first_contact - 3 * dt:
                brs.insert(0, _Break(on.t_onset, "strike", -1))
        # breaks within one frame share a break (the fit cannot split them)
        merged: list[_Break] = []
        cmap: dict[int, int] = {}
        for br in brs:
            if merged and br.t - merged[-1].t < 1.0 * dt:
                merged[-1].mixed |= br.kind != merged[-1].kind
                if br.contact >= 0:
                    cmap[br.contact] = len(merged) - 1
                continue
            merged.append(br)
            if br.contact >= 0:
                cmap[br.contact] = len(merged) - 1
        # drop breaks outside the samples
        merged = [m for m in merged if b.t[0] < m.t < b.t[-1]]
        cmap = {c: i for i, m in enumerate(merged) for c in [m.contact] if c >= 0}
        for i, c in enumerate(cands):
            if name in (c.ball_a, c.ball_b) and i not in cmap:
                for j, m in enumerate(merged):
                    if abs(m.t - c.t_init_s) < 1.0 * dt:
                        cmap[i] = j
        guards = np.array([
            s.guard_ball_s if m.kind == "ball-ball" else
            s.guard_cushion_s if m.kind == "ball-cushion" else s.guard_strike_s
            for m in merged
        ])
        half = np.array([max(1.0 * dt, s.contact_time_floor_s) if m.kind != "strike" else 2.5 * dt
                         for m in merged])
        lines = None
        if touch is not None:
            L, W, D = touch
            off = {"x0": 0.0, "xL": -L, "y0": 0.0, "yW": -W}  # n . (a point of the nose line)
            lines = [[] for _ in merged]
            held = np.bincount(list(cmap.values()), minlength=len(merged))
            for ci, j in cmap.items():
                c = cands[ci]
                # only a break that stands for this one contact: where several contacts share a
                # break (within a frame) the break may fall before the later touch
                if held[j] == 1 and c.kind == "ball-cushion" and c.ball_a == name and c.cushion in off:
                    n = np.asarray(c.normal, float)
                    lines[j].append((float(n[0]), float(n[1]), off[c.cushion] + D))
            lines = [tuple(v) for v in lines]
        layouts[name] = ChainLayout(
            name, float(b.t[0]), bool(rest_first and (merged or on.t_onset is None)),
            [m.kind for m in merged], np.array([m.t for m in merged]), half, guards,
            slip_link=np.array([m.kind == "ball-ball" and not m.mixed for m in merged], dtype=bool),
            touch_lines=lines,
        )
        maps[name] = (cmap, merged)
    return layouts, maps


def analyze_tracks(
    tracks: pd.DataFrame,
    detections: pd.DataFrame | None,
    table: TablePreset,
    ball_radius_mm: float,
    ball_mass_kg: float,
    fps: float,
    settings: PhysicsSettings = PhysicsSettings(),
) -> ShotPhysics:
    """Events, motion segments and measured contacts of one shot.

    tracks / detections: tables as in DEVELOPERS.md (table frame, mm, s); raw detections are
    fitted where a ball has them, else its visible track rows. ball_radius_mm, ball_mass_kg:
    the ball set; fps: frame rate (Hz).
    """
    # The fits solve many small dense problems; multi-threaded BLAS only adds overhead there (and
    # thrashes on a busy machine), so BLAS runs single-threaded inside this stage.
    with threadpool_limits(limits=1, user_api="blas"):
        return _analyze(tracks, detections, table, ball_radius_mm, ball_mass_kg, fps, settings)


def _analyze(tracks, detections, table, ball_radius_mm, ball_mass_kg, fps, settings) -> ShotPhysics:
    s = settings
    _check_inputs(table, ball_radius_mm, ball_mass_kg, fps)
    dt = 1.0 / fps
    samples = ball_samples(tracks, detections, s)
    if not samples:
        raise FeltlabError("no ball has 3 or more samples; check the tracking output")
    R, m = float(ball_radius_mm), float(ball_mass_kg)
    onsets = {k: motion_onset(b, dt, s) for k, b in samples.items()}
    cands = find_contacts(samples, table.length_mm, table.width_mm, R, dt, s, onsets)
    touch = (table.length_mm, table.width_mm, contact_distance_mm(R, table.cushion_nose_height_mm))
    layouts, maps = _layouts(samples, cands, onsets, dt, s, touch)
    fits: dict[str, ChainFit] = {}
    for name, b in samples.items():
        lay = layouts[name]
        if lay.rest_first and lay.n_seg == 1:
            fits[name] = _rest_fit(b, lay)
        else:
            # pass 1 measures the cloth; the cloth-slip prior waits for its sliding friction
            fits[name] = fit_chain(b.t, b.xy, b.sig, lay, replace(s, slip_prior=False))
    # pass 2: one cloth -> each segment's friction prior is the shot estimate from the OTHER
    # segments (leave-one-out, so no data count twice); pass-1 shot estimates are reported
    pass1 = dict(fits)
    _, mu = _segments_table(fits, samples, s)
    _, (mus, mur) = _segments_table(fits, samples, s, per_segment=True)
    alternates: dict[str, ChainFit] = {}
    s2 = _shot_priors(s, mu)
    if not np.isfinite(mu[0]):
        # no slide phase showed the cloth's friction (e.g. a frictionless surface): the slip
        # prior, which assumes cloth friction ends every slide, is not applied
        s2 = replace(s2, slip_prior=False)
    if s2.slip_prior:
        layouts = _with_slip_shifts(layouts, cands, fits, maps, R, dt, s)
    for name, b in samples.items():
        lay = layouts[name]
        if not (lay.rest_first and lay.n_seg == 1):
            pri = {k: _loo_prior(s, mus, mur, (name, k)) for k in range(lay.n_seg)}
            x1 = _plausible_start(fits[name].x, lay, s2)
            fa = fit_chain(b.t, b.xy, b.sig, lay, s2, x_init=x1, seg_priors=pri)
            # second start: breaks back at the change-point estimates, and each segment after a
            # break restarted with the slide a spin carried through the contact would give
            x2 = x1.copy()
            x2[lay.break_offset : lay.break_offset + lay.n_seg - 1] = lay.break_init
            x2 = restart_after_breaks(x2, lay, b.t, b.xy, b.sig, s2, pri)
            fb = fit_chain(b.t, b.xy, b.sig, lay, s2, x_init=x2, seg_priors=pri)
            fits[name], other = (fb, fa) if fb.cost < fa.cost - 1e-9 else (fa, fb)
            # third start: a ball fitted as rolling into a contact whose slip link says it slid
            fits[name], other = _slide_into(fits[name], other, b, lay, s2, pri)
            if other.cost - fits[name].cost < s.ambiguity_dcost:
                alternates[name] = other
    if s2.slip_prior and s2.slip_share_shift:
        # pass 3: both balls of a contact get the same slip shift X n; each ball's prior on X
        # adds what the OTHER ball's pass-2 fit says about it (leave-one-out, no data twice)
        layouts3 = _shared_slip_shifts(layouts, fits)
        for name, lay3 in layouts3.items():
            b = samples[name]
            pri = {k: _loo_prior(s, mus, mur, (name, k)) for k in range(lay3.n_seg)}
            f3 = fit_chain(b.t, b.xy, b.sig, lay3, s2, x_init=fits[name].x, seg_priors=pri)
            fits[name] = f3
            alt = alternates.pop(name, None)
            if alt is not None and s.alternates_pass3:
                # the runner-up is refitted with the same shared-shift priors: where the samples
                # still cannot choose between the two (a slow ball's slide after a contact
                # decelerating or accelerating), the choice stays an uncertainty of e
                a3 = fit_chain(b.t, b.xy, b.sig, lay3, s2, x_init=alt.x, seg_priors=pri)
                best, other = (a3, f3) if a3.cost < f3.cost - 1e-9 else (f3, a3)
                fits[name] = best
                if other.cost - best.cost < s.ambiguity_dcost:
                    alternates[name] = other
    if s2.slip_prior:
        # a link whose prior the final fit still contradicts is a model error on that side: that
        # ball is refitted without it, from its final and its prior-free pass-1 parameters
        for name, f in list(fits.items()):
            lay = f.layout
            if lay.rest_first and lay.n_seg == 1:
                continue
            bad = slip_link_chi2(f.x, lay, s2) > s.slip_reject_chi2
            if not bad.any():
                continue
            b = samples[name]
            pri = {k: _loo_prior(s, mus, mur, (name, k)) for k in range(lay.n_seg)}
            f, _ = _slide_into(f, None, b, lay, s2, pri)
            fits[name] = f
            bad = slip_link_chi2(f.x, lay, s2) > s.slip_reject_chi2
            if not bad.any():
                alternates.pop(name, None)
                continue
            lay_u = replace(lay, slip_link=lay.links & ~bad)
            pri = {k: _loo_prior(s, mus, mur, (name, k)) for k in range(lay_u.n_seg)}
            tries = [fit_chain(b.t, b.xy, b.sig, lay_u, s2, x_init=x0, seg_priors=pri)
                     for x0 in (f.x, _plausible_start(pass1[name].x, lay_u, s2))]
            fits[name] = min(tries, key=lambda q: q.cost)
            alternates.pop(name, None)
    if s.split_hidden:
        before_split = dict(fits)
        cands, fits, maps = _split_hidden(samples, cands, onsets, fits, maps, table, R, dt, s, s2, mus, mur)
        for name in fits:
            if fits[name] is not before_split[name]:
                alternates.pop(name, None)  # its runner-up has the old breaks
    hid = dict(sig={k: float(np.median(b.sig)) for k, b in samples.items()},
               mu_s=s2.mu_s_prior if np.isfinite(mu[0]) else s.mu_s_prior)
    contacts = _contacts_table(cands, fits, maps, table, R, m, dt, s, hid)
    if alternates:
        # two fits that explain the samples about equally well: the spread of their restitution
        # is a model-choice uncertainty, added to the propagated sigma
        alt = _contacts_table(cands, {**fits, **alternates}, maps, table, R, m, dt, s, hid)
        both = contacts.merge(alt[["_cand", "e"]], on="_cand", how="left", suffixes=("", "_alt"))
        d = np.nan_to_num(both["e_alt"].to_numpy(float) - both["e"].to_numpy(float))
        contacts["e_sigma"] = np.sqrt(contacts["e_sigma"].to_numpy(float) ** 2 + d**2)
        if s.e_sigma_parts:
            for p, dd in zip(contacts["_e_var_parts"], d):
                if isinstance(p, dict):
                    p["alt"] = float(dd**2)
    if s.slide_profile:
        contact_mm = contact_distance_mm(R, table.cushion_nose_height_mm)

        def _e_of(fs, ci):
            c = cands[ci]
            if c.kind != "ball-ball":
                f, i = fs[c.ball_a], maps[c.ball_a][0][ci]
                return float(cushion_core(f, i, f.x, c.cushion, c.normal, table.length_mm, table.width_mm,
                                          contact_mm, dt)["e"])
            ia, ib = maps[c.ball_a][0][ci], maps[c.ball_b][0][ci]
            own = _own_pair_breaks(maps, c, ia, ib)
            return float(ball_ball_values(fs[c.ball_a], ia, fs[c.ball_b], ib, R, dt, s, fuse=own)[0]["e"])

        def _e_var_of(ci, hold_a, hold_b):
            c = cands[ci]
            if c.kind != "ball-ball":
                # as in _contacts_table (the model terms added there do not depend on the fit)
                f, i = fits[c.ball_a], maps[c.ball_a][0][ci]
                cz = widened_cov(f.cov, f.misfit_sd())
                if hold_a:
                    cz = conditional_cov(cz, list(hold_a))
                return float(propagate(lambda z: _e_t(cushion_core(f, i, z, c.cushion, c.normal, table.length_mm,
                                                                    table.width_mm, contact_mm, dt)), f.x, cz)[0])
            fa, fb = fits[c.ball_a], fits[c.ball_b]
            ia, ib = maps[c.ball_a][0][ci], maps[c.ball_b][0][ci]
            hold = tuple(hold_a) + tuple(len(fa.x) + k for k in hold_b)
            return float(ball_ball_values(fa, ia, fb, ib, R, dt, s, fuse=_own_pair_breaks(maps, c, ia, ib),
                                          hold=hold)[1][0])

        contacts = widen_for_short_slides(
            contacts, cands, fits, maps, samples, _e_of, _e_var_of, s2,
            lambda name, lay: {k: _loo_prior(s, mus, mur, (name, k)) for k in range(lay.n_seg)}, dt)
    contacts = _drop_non_separating(contacts, cands, s)
    # compound events (several balls touching within one frame): group columns, e NaN per link
    contacts = annotate_groups(contacts, cands, fits, maps, m)
    contacts = _blank_unmeasurable_e(contacts, fits, maps, s)
    segments, _ = _segments_table(fits, samples, s2)
    events = _events_table(samples, fits, layouts, maps, contacts, segments, dt, s)
    return ShotPhysics(events, segments, contacts, *mu, fits=fits,
                       rest_xy={k: o.rest_xy for k, o in onsets.items() if o.rest_xy is not None})


def _slide_into(best: ChainFit, other: ChainFit | None, b: BallSamples, lay: ChainLayout,
                s: PhysicsSettings, pri: dict) -> tuple[ChainFit, ChainFit | None]:
    """(best, runner-up) after up to two more starts in which the ball slides through linked
    contacts as their slip links say: into them where ``best`` rolls in, then out of them where
    its slide after disagrees (physics.segments.slide_into_breaks); a start that fits worse
    (robust cost with priors) is kept only as the runner-up."""
    for side in ("before", "after"):
        x3 = slide_into_breaks(best.x, lay, s, pri, side)
        if x3 is None:
            continue
        fc = fit_chain(b.t, b.xy, b.sig, lay, s, x_init=x3, seg_priors=pri)
        if fc.cost < best.cost - 1e-9:
            best, other = fc, best
        elif other is None or fc.cost < other.cost:
            other = fc
    return best, other


def samples_around_break(f: ChainFit, i: int) -> tuple[int, int]:
    """(used samples in the segment before break ``i``, used samples in the segment after it)."""
    br = np.asarray(f.breaks(), float)
    tu = f.t[f.used]
    lo = br[i - 1] if i > 0 else -np.inf
    hi = br[i + 1] if i + 1 < len(br) else np.inf
    return int(((tu > lo) & (tu < br[i])).sum()), int(((tu > br[i]) & (tu < hi)).sum())


def _blank_unmeasurable_e(contacts: pd.DataFrame, fits: dict, maps: dict, s: PhysicsSettings) -> pd.DataFrame:
    """e and e_sigma left empty, with a note, where e's sigma is above
    ``s.e_sigma_no_information`` (a one-sigma interval wider than 0 <= e <= 1; PhysicsSettings); the note
    gives the fewest samples any ball of the contact has on either side of its break."""
    if not len(contacts):
        return contacts
    df = contacts
    for r in df.index:
        e, sg = float(df.at[r, "e"]), float(df.at[r, "e_sigma"])
        if not np.isfinite(e) or (np.isfinite(sg) and sg <= s.e_sigma_no_information):
            continue
        fewest = None
        for ball in (df.at[r, "ball_a"], df.at[r, "ball_b"]):
            if not isinstance(ball, str) or not ball or ball not in fits or ball not in maps:
                continue
            i = maps[ball][0].get(int(df.at[r, "_cand"]))
            if i is None:
                continue
            for n, side in zip(samples_around_break(fits[ball], i), ("before", "after")):
                if fewest is None or n < fewest[0]:
                    fewest = (n, ball, side)
        df.at[r, "e"] = np.nan
        df.at[r, "e_sigma"] = np.nan
        note = (f"e not measured: its sigma ({sg:.2g}) is above {s.e_sigma_no_information:.2f}, a one-sigma "
                "interval wider than the whole range 0 <= e <= 1")
        if fewest is not None:
            n, ball, side = fewest
            note += f" ({ball} has {n} frame{'s' if n != 1 else ''} {side} the contact)"
        old = str(df.at[r, "note"] or "") if "note" in df.columns else ""
        df.at[r, "note"] = f"{old}; {note}" if old else note
    return df


def _own_pair_breaks(maps: dict, c, ia: int, ib: int) -> bool:
    """Whether both balls' breaks ``ia``/``ib`` of ball-ball candidate ``c`` belong to that pair alone:
    a break shared with another contact (within one frame) times that group, not this pair."""
    return all(list(maps[bn][0].values()).count(j) == 1 and not maps[bn][1][j].mixed
               for bn, j in ((c.ball_a, ia), (c.ball_b, ib)))


def _drop_non_separating(contacts: pd.DataFrame, cands, s: PhysicsSettings) -> pd.DataFrame:
    """Contacts whose fitted motion still approaches after the break (e below 0 by more than
    ``s.e_reject_z`` sigmas) have lost their kinematic evidence in the fit and are not reported:
    a contact needs both kinds of evidence (module docstring of physics.events). Links of
    compound events are kept (their pairwise e is not used)."""
    if not len(contacts):
        return contacts
    grouped = np.array([getattr(cands[int(k)], "group", 0) > 0 for k in contacts["_cand"]], bool)
    e = contacts["e"].to_numpy(float)
    sig = np.nan_to_num(contacts["e_sigma"].to_numpy(float), nan=np.inf)
    bad = ~grouped & np.isfinite(e) & (e + s.e_reject_z * sig < 0)
    if not bad.any():
        return contacts
    out = contacts[~bad].reset_index(drop=True)
    out["contact"] = np.arange(len(out))
    return out


def _with_slip_shifts(layouts, cands, fits, maps, R, dt, s: PhysicsSettings):
    """Pass-2 layouts whose linked ball-ball breaks carry the expected slip shift from vertical
    friction at the contact point, estimated from the pass-1 fits of both balls.

    The friction impulse's vertical part p_z (|p_z| <= mu_bb J_n, opposing the vertical slip of
    a's contact point relative to b's, s_z = (u_a - v_a).n + (u_b - v_b).n for slips u and
    velocities v just before) turns both balls about the horizontal axis z x n and shifts both
    slips by the same X n, X = (5/2) p_z / m (I = 2/5 m R^2); sticking caps |X| at |s_z| / 2
    (equal balls). The unknown friction (0..slip_mu_bb_max, and the share the tangential throw
    takes of the friction cone) puts X anywhere between 0 and that bound: the prior is its
    middle, with half the bound as sigma.
    """
    out = {k: replace(v) for k, v in layouts.items()}
    shifts = {k: np.full((v.n_seg - 1, 3), np.nan) for k, v in layouts.items()}
    sigmas = {k: np.full(v.n_seg - 1, np.nan) for k, v in layouts.items()}
    count: dict[tuple[str, int], int] = {}
    for ci, c in enumerate(cands):
        if c.kind != "ball-ball":
            continue
        for b in (c.ball_a, c.ball_b):
            j = maps[b][0].get(ci)
            if j is not None:
                count[(b, j)] = count.get((b, j), 0) + 1
    for ci, c in enumerate(cands):
        if c.kind != "ball-ball" or c.ball_a not in fits or c.ball_b not in fits:
            continue
        fa, fb = fits[c.ball_a], fits[c.ball_b]
        ia, ib = maps[c.ball_a][0].get(ci), maps[c.ball_b][0].get(ci)
        if ia is None or ib is None or count[(c.ball_a, ia)] > 1 or count[(c.ball_b, ib)] > 1:
            continue
        if not (layouts[c.ball_a].links[ia] and layouts[c.ball_b].links[ib]):
            continue
        try:
            core = ball_ball_core(fa, ia, fa.x, fb, ib, fb.x, R, dt)
        except (IndexError, ValueError):
            continue
        n = core["n"]
        jn = 0.5 * float(((core["vb1"] - core["vb0"]) - (core["va1"] - core["va0"])) @ n)
        bound_x = 2.5 * s.slip_mu_bb_max * max(jn, 0.0)
        sz = sum(_vertical_slip(f, j, n, bound_x, s.slip_roll_check_z, s.slip_roll_min_samples)
                 for f, j in ((fa, ia), (fb, ib)))
        if not (np.isfinite(jn) and np.isfinite(sz) and np.all(np.isfinite(n))):
            continue
        bound = min(bound_x, 0.5 * abs(sz))
        X = -np.sign(sz) * 0.5 * bound
        for b, j in ((c.ball_a, ia), (c.ball_b, ib)):
            shifts[b][j] = (X, n[0], n[1])
            sigmas[b][j] = 0.5 * bound
    for k, lay in out.items():
        if np.isfinite(shifts[k]).any():
            lay.slip_shift = shifts[k]
            lay.slip_shift_sigma = sigmas[k]
    return out


def _vertical_slip(f: ChainFit, j: int, n: np.ndarray, x_max: float, z_consistent: float,
                   min_roll_samples: int) -> float:
    """Vertical velocity (mm/s) of a ball's contact point just before linked break j, seen from
    the pass-1 chain: ``(u - v) . n`` with cloth slip u and velocity v (see
    :func:`_with_slip_shifts`); 0 for a ball at rest.

    Normally the segment before gives it (its slip at the break). Over the last frames before a
    contact a slide and a roll hardly differ in position, so a fit may roll over there although
    the ball slides into the contact; rolling, the slip is 0 with no error bar, and for a
    drawing ball the sign of ``(u - v) . n`` comes out wrong. When the fitted roll phase before
    the break holds fewer than ``min_roll_samples`` used samples, the segment after is asked
    too, through slip continuity ``u_before = u_after - dv - X n`` (true up to the unknown shift
    ``|X| <= x_max``); its estimate replaces the roll's when they differ by more than ``x_max``
    plus ``z_consistent`` of its propagated sigmas."""
    lay = f.layout
    prev = unpack_segment(f.x, lay, j)
    if prev is None:
        return 0.0
    u_end, v_end = break_slip(f.x, lay, j)
    b = float((u_end - v_end) @ n)
    starts, _ = segment_starts(f.x, lay)
    tb = float(f.breaks()[j])
    t_roll_abs = starts[j] + prev[2]
    if t_roll_abs >= tb:
        return b  # sliding at the break: the slip has a gradient there
    tu = f.t[f.used]
    if int(((tu > t_roll_abs) & (tu < tb)).sum()) >= min_roll_samples:
        return b  # a roll the samples show

    def after(z):
        st = _link_state(z, lay, j)
        if st is None:
            return np.array([np.nan])
        _, _, v_e, _, _, u_start, dv = st
        return np.array([float((u_start - dv - v_e) @ n)])

    a = float(after(f.x)[0])
    if not np.isfinite(a):
        return b
    va = float(propagate(after, f.x, f.cov)[0])
    if abs(a - b) <= x_max + z_consistent * np.sqrt(max(va, 0.0)):
        return b
    return a


def _implied_shift(z: np.ndarray, lay: ChainLayout, j: int, n: np.ndarray) -> float:
    """(u_start - u_end - dv) . n at break j of a chain with parameters z (mm/s)."""
    u_end, v_end = break_slip(z, lay, j)
    v1, a1, tr1, _ = unpack_segment(z, lay, j + 1)
    return float((-3.5 * a1 * max(tr1, 0.0) - u_end - (v1 - v_end)) @ n)


def _shared_slip_shifts(layouts, fits, s_share_z: float = 3.0) -> dict[str, ChainLayout]:
    """Pass-3 layouts: for each linked ball-ball break with a pass-2 shift prior (X0, s0), the
    other ball's data-only estimate of X (its pass-2 posterior with the prior's information
    taken out) is combined into the prior, unless the two balls' estimates differ by more than
    ``s_share_z`` combined sigmas. Only balls whose prior changes are returned."""
    est = {}
    for name, lay in layouts.items():
        f = fits.get(name)
        if lay.slip_shift is None or f is None or f.layout is not lay:
            continue
        for j in range(lay.n_seg - 1):
            X0, nx, ny = lay.slip_shift[j]
            s0 = float(lay.slip_shift_sigma[j])
            if not (np.isfinite(X0) and s0 > 0) or unpack_segment(f.x, lay, j + 1) is None:
                continue
            n = np.array([nx, ny])
            Xp = _implied_shift(f.x, lay, j, n)
            vp = float(propagate(lambda z: np.array([_implied_shift(z, lay, j, n)]), f.x, f.cov)[0])
            w = 1.0 / max(vp, 1e-12) - 1.0 / s0**2
            if not np.isfinite(Xp) or w <= 0.25 / s0**2:
                continue  # the data add little to the prior
            Xd = (Xp / max(vp, 1e-12) - X0 / s0**2) / w
            est[(name, j)] = (Xd, 1.0 / w, (round(nx, 9), round(ny, 9)))
    out = {}
    for name, lay in layouts.items():
        if lay.slip_shift is None:
            continue
        new_shift, new_sig, changed = lay.slip_shift.copy(), lay.slip_shift_sigma.copy(), False
        s0_shared = np.full(lay.n_seg - 1, np.nan)
        for j in range(lay.n_seg - 1):
            X0, nx, ny = lay.slip_shift[j]
            if not np.isfinite(X0):
                continue
            key_n = (round(nx, 9), round(ny, 9))
            other = [v for (nm, jj), v in est.items() if nm != name and v[2] == key_n]
            if len(other) != 1:
                continue
            Xd, vd, _ = other[0]
            own = est.get((name, j))
            if own is not None and abs(own[0] - Xd) > s_share_z * np.sqrt(own[1] + vd):
                continue  # the two balls disagree: a model error on one side, do not spread it
            s0 = float(lay.slip_shift_sigma[j])
            wt = 1 / s0**2 + 1 / vd
            Xc = (X0 / s0**2 + Xd / vd) / wt
            # |X| lies between 0 and the bound 2 |X0| on the side of X0 (friction opposes slip)
            lo, hi = sorted((0.0, 2.0 * X0))
            new_shift[j, 0] = float(np.clip(Xc, lo, hi))
            new_sig[j] = float(1 / np.sqrt(wt))
            if lo < Xc < hi:  # the prior follows the other ball's data (physics.pair_cov)
                s0_shared[j] = s0
            changed = True
        if changed:
            out[name] = replace(lay, slip_shift=new_shift, slip_shift_sigma=new_sig,
                                slip_shift_s0=s0_shared)
    return out


def _plausible_start(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings) -> np.ndarray:
    """Pass-2 start: a slide phase whose deceleration is far below the shot's sliding friction is
    really rolling, so start that segment rolling (t_roll = 0, slide deceleration = mu_s g)."""
    x = x.copy()
    g = s.g_mm_s2
    for k in range(lay.n_seg):
        o = lay.move_offset(k)
        if o is None:
            continue
        a = x[o + 2 : o + 4]
        if np.hypot(*a) < 0.5 * s.mu_s_prior * g and x[o + 4] > 0:
            v = x[o : o + 2]
            sp = np.hypot(*v)
            x[o + 2 : o + 4] = -s.mu_s_prior * g * (v / sp if sp > 1e-9 else np.array([1.0, 0.0]))
            x[o + 4] = 0.0
    return x


def _loo_prior(s: PhysicsSettings, mus, mur, key) -> tuple[float, float, float, float]:
    """(mu_s, sigma, mu_r, sigma) prior for one segment from the other segments' estimates."""
    ms, ss = _combine([m for m in mus if m[2] != key])
    mr, sr = _combine([m for m in mur if m[2] != key])
    if np.isfinite(ms):
        ss = max(ss, s.shot_mu_s_rel_sigma * ms)
    else:
        ms, ss = s.mu_s_prior, s.fallback_mu_s_sigma
    if np.isfinite(mr) and mr > 0:
        sr = max(sr, s.shot_mu_r_rel_sigma * mr)
    else:
        mr, sr = s.mu_r_prior, s.fallback_mu_r_sigma
    return ms, ss, mr, sr


def _shot_priors(s: PhysicsSettings, mu) -> PhysicsSettings:
    """Settings whose friction priors are the shot's pass-1 estimates (see PhysicsSettings)."""
    mu_s, sd_s, mu_r, sd_r = mu
    kw = {}
    if np.isfinite(mu_s) and 0.05 < mu_s < s.mu_s_max:
        kw.update(mu_s_prior=mu_s, mu_s_prior_sigma=max(sd_s, s.shot_mu_s_rel_sigma * mu_s))
    else:
        kw.update(mu_s_prior_sigma=s.fallback_mu_s_sigma)
    if np.isfinite(mu_r) and 0.0 < mu_r < s.mu_r_max:
        kw.update(mu_r_prior=mu_r, mu_r_prior_sigma=max(sd_r, s.shot_mu_r_rel_sigma * mu_r))
    else:
        kw.update(mu_r_prior_sigma=s.fallback_mu_r_sigma)
    return replace(s, **kw)


def _rest_fit(b: BallSamples, lay: ChainLayout) -> ChainFit:
    """A ball that never moves: weighted mean position and its covariance."""
    w = 1.0 / b.sig**2
    p = (b.xy * w).sum(0) / w.sum(0)
    r = b.xy - p
    chi2 = max(float(np.sum(r**2 * w)) / max(2 * len(b.t) - 2, 1), 0.5)
    cov = np.diag(1.0 / w.sum(0)) * chi2
    x = p.copy()
    rms = float(np.sqrt(np.mean(np.sum(r**2, axis=1))))
    return ChainFit(lay, x, cov, rms, len(b.t), chi2, b.t, b.xy, np.ones(len(b.t), bool))


def _split_hidden(samples, cands, onsets, fits, maps, table, R, dt, s, s2, mus, mur):
    """A segment whose fit is far worse than the noise (reduced chi^2 above ``s.split_chi2``) holds
    a change the contact finder missed. Each cushion the ball comes near inside it (a local minimum
    of the sampled gap below the touching margin of physics.events: geometric evidence) is tried
    as an extra break (free to move 1.5 frame periods, as the sampled minimum may be a frame off
    the touch); the refitted chain is kept when its robust cost falls by more than dv_z^2 / 2 (the
    chi^2 gain of a change at dv_z sigmas) and it shows the velocity jump
    a cushion contact needs at the break (reverses the approach along the normal, larger than
    ``dv_min_mm_s`` and ``dv_z`` of its propagated sigmas: kinematic evidence). Never a contact
    without both. Returns (cands, fits, maps), with any new contacts appended to ``cands``."""
    L, W = table.length_mm, table.width_mm
    cands = list(cands)
    for name in list(fits):
        f = fits[name]
        lay = f.layout
        if lay.rest_first and lay.n_seg == 1:
            continue
        b = samples[name]
        starts, _ = segment_starts(f.x, lay)
        ends = np.concatenate([starts[1:], [b.t[-1] + 1e-9]])
        P, _ = f.state(b.t)
        r2 = np.sum(((P - b.xy) / b.sig) ** 2, axis=1)
        tried = []
        for k in range(lay.n_seg):
            if lay.move_offset(k) is None:
                continue
            m = f.used & (b.t > starts[k] + 2 * dt) & (b.t < ends[k] - 2 * dt)
            n = int(m.sum())
            if n < s.split_min_samples or r2[m].sum() / max(2 * n - 6, 1) < s.split_chi2:
                continue
            idx = np.flatnonzero(m)
            for c, nrm in CUSHION_NORMALS.items():
                g = cushion_distance(b.xy[idx], c, L, W) - R
                margin = (s.gap_margin_mm + s.gap_margin_sigma * b.sig[idx].mean(axis=1)
                          + s.gap_margin_frames * gap_step(g))
                for j in _local_minima(g):
                    if g[j] < margin[j]:
                        tried.append((float(g[j]), float(b.t[idx[j]]), c, nrm))
        best = None
        for gap, t_m, c, nrm in sorted(tried):
            cand = ContactCandidate("ball-cushion", name, "", c, t_m, nrm, gap, 0.0)
            trial = cands + [cand]
            lays, mps = _layouts({name: b}, trial, {name: onsets[name]}, dt, s,
                                 (L, W, contact_distance_mm(R, table.cushion_nose_height_mm)))
            lay_n = lays[name]
            ci = len(trial) - 1
            if ci not in mps[name][0]:
                continue
            lay_n = replace(lay_n, break_halfwidth=np.where(
                np.isclose(lay_n.break_init, t_m), 1.5 * dt, lay_n.break_halfwidth))
            pri = {kk: _loo_prior(s, mus, mur, (name, kk)) for kk in range(lay_n.n_seg)}
            fn = fit_chain(b.t, b.xy, b.sig, lay_n, s2, seg_priors=pri)
            if not (fn.cost < f.cost - 0.5 * s.dv_z**2):
                continue
            i = mps[name][0][ci]

            def jump(z, i=i, nrm=nrm):
                _, _, v0, v1 = fn.at_break(i, z)
                return np.array([float((v1 - v0) @ nrm)])

            _, _, v0, v1 = fn.at_break(i)
            dvn = float((v1 - v0) @ nrm)
            sd = float(np.sqrt(max(propagate(jump, fn.x, fn.cov)[0], 0.0)))
            if not (v0 @ nrm < 0 and v1 @ nrm > -sd and dvn > s.dv_min_mm_s and dvn > s.dv_z * sd):
                continue
            if best is None or fn.cost < best[0].cost:
                cand.t_init_s = float(fn.breaks()[i])
                cand.z = dvn / max(sd, 1e-9)
                best = (fn, cand, mps[name])
        if best is not None:
            fits[name] = best[0]
            cands.append(best[1])
            maps = {**maps, name: best[2]}
    return cands, fits, maps


def _slide_samples_after(f: ChainFit, i: int) -> int:
    """Used samples inside the slide phase of the segment after break ``i`` (0: rolls from it)."""
    par = unpack_segment(f.x, f.layout, i + 1)
    if par is None:
        return 0
    tb = float(f.breaks()[i])
    tu = f.t[f.used]
    return int(((tu > tb) & (tu < tb + par[2])).sum())


def _roll_flags(f: ChainFit, i: int, x=None) -> tuple[bool, bool]:
    """(rolling or resting before break i, rolling or resting after break i)."""
    tb = float(f.breaks(x)[i])
    ph0 = f.phase_at(i, tb - 1e-6, x)
    ph1 = f.phase_at(i + 1, tb + 1e-6, x)
    return ph0 in ("roll", "rest"), ph1 in ("roll", "rest")


def _slide_along(f: ChainFit, i: int, n: np.ndarray) -> float:
    """|a_hat . n| of the slide that starts at break ``i`` (its fitted acceleration's direction
    along the unit normal ``n``), 0 where the ball does not slide after the break."""
    tb = float(f.breaks()[i])
    par = unpack_segment(f.x, f.layout, i + 1)
    if par is None or f.phase_at(i + 1, tb + 1e-6) != "slide":
        return 0.0
    a = np.asarray(par[1], dtype=float)
    na = float(np.hypot(*a))
    return abs(float(a @ n)) / na if na > 1e-9 else 0.0


def _contacts_table(cands, fits, maps, table, R, m, dt, s, hidden=None) -> pd.DataFrame:
    """Contact rows; ``hidden``: {"sig": ball -> median sample sigma (mm), "mu_s": shot sliding
    friction} for the hidden-slide term after cushions (PhysicsSettings.hidden_slide_sigma)."""
    rows = []
    for ci, c in enumerate(cands):
        if c.kind == "ball-ball":
            fa, fb = fits.get(c.ball_a), fits.get(c.ball_b)
            if fa is None or fb is None:
                continue
            ia, ib = maps[c.ball_a][0].get(ci), maps[c.ball_b][0].get(ci)
            if ia is None or ib is None:
                continue
            own = _own_pair_breaks(maps, c, ia, ib)
            parts = {} if s.e_sigma_parts else None
            core, var = ball_ball_values(fa, ia, fb, ib, R, dt, s, fuse=own, parts=parts)
            rolls_a, rolls_b = _roll_flags(fa, ia), _roll_flags(fb, ib)
            dvm = s.mu_s_prior * s.g_mm_s2 * s.model_time_ball_s
            den = abs((core["vb0"] - core["va0"]) @ core["n"])
            n_slide = (not rolls_a[1]) + (not rolls_b[1])
            _add_part(var, parts, "model", n_slide * (dvm / max(den, 1e-9)) ** 2)
            if s.hop_sigma and n_slide:
                dvh = hop_dv(fa, ia, fb, ib, hidden["mu_s"] if hidden else s.mu_s_prior, s, parts)
                if s.hop_along_normal:
                    w = sum(_slide_along(f, j, core["n"]) ** 2 for f, j in ((fa, ia), (fb, ib)))
                else:
                    w = float(n_slide)
                _add_part(var, parts, "hop", w * (dvh / max(den, 1e-9)) ** 2 / 3.0)
                if parts is not None:  # diagnostics: the term before hop_shift_debias / hop_along_normal
                    x_old = 0.8 * (hidden["mu_s"] if hidden else s.mu_s_prior) * abs(parts.get("X", 0.0))
                    parts["hop_old"] = float(n_slide * (x_old / max(den, 1e-9)) ** 2 / 3.0)
            d = derived(core, m, True, rolls_a, rolls_b)
            pt = core["pa"] + R * core["n"]
            phase_a = fa.phase_at(ia, float(fa.breaks()[ia]) - 1e-6)
            phase_b = fb.phase_at(ib, float(fb.breaks()[ib]) - 1e-6)
            out_a = fa.phase_at(ia + 1, float(fa.breaks()[ia]) + 1e-6)
            out_b = fb.phase_at(ib + 1, float(fb.breaks()[ib]) + 1e-6)
            vb0, vb1 = core["vb0"], core["vb1"]
            cushion = ""
        else:
            f = fits.get(c.ball_a)
            i = maps[c.ball_a][0].get(ci) if f is not None else None
            if i is None:
                continue

            def core_of(z, f=f, i=i, c=c):
                return cushion_core(f, i, z, c.cushion, c.normal, table.length_mm, table.width_mm,
                                    contact_distance_mm(R, table.cushion_nose_height_mm), dt)

            core = core_of(f.x)
            var = propagate(lambda z: _e_t(core_of(z)), f.x, widened_cov(f.cov, f.misfit_sd()))
            parts = None
            if s.e_sigma_parts:
                parts = _fit_parts(lambda z: _e_t(core_of(z)), f.x, f.cov, f.cov @ f.info_data @ f.cov
                                   if f.info_data is not None else None, float(var[0]))
            flags = _roll_flags(f, i)
            d = derived(core, m, False, flags, (False, False))
            dvm = s.mu_s_prior * s.g_mm_s2 * s.model_time_cushion_s
            _add_part(var, parts, "model", (not flags[1]) * (dvm / max(abs(core["va0"] @ core["n"]), 1e-9)) ** 2)
            # other cushion contacts sharing this break (within one frame): their friction may
            # have changed this contact's incoming velocity before it (settings)
            for cj, j in maps[c.ball_a][0].items():
                if cj != ci and j == i and cands[cj].kind == "ball-cushion":
                    n_o = cands[cj].normal
                    dvo = abs(float((core["va1"] - core["va0"]) @ n_o))
                    _add_part(var, parts, "shared",
                              (s.shared_cushion_mu * dvo / max(abs(core["va0"] @ core["n"]), 1e-9)) ** 2)
            if s.hidden_slide_sigma and hidden is not None and c.ball_a in hidden["sig"]:
                n_sl = _slide_samples_after(f, i)
                if n_sl < s.hidden_slide_min_samples:
                    dvh = hidden_slide_dv(hidden["sig"][c.ball_a], 1.0 / dt, hidden["mu_s"], s.g_mm_s2,
                                          s.guard_cushion_s, s.hidden_slide_z)
                    _add_part(var, parts, "hidden", (dvh / max(abs(core["va0"] @ core["n"]), 1e-9)) ** 2)
            pt = core["pa"] - R * core["n"]
            phase_a = f.phase_at(i, float(f.breaks()[i]) - 1e-6)
            phase_b = ""
            out_a = f.phase_at(i + 1, float(f.breaks()[i]) + 1e-6)
            out_b = ""
            vb0 = vb1 = np.full(2, np.nan)
            cushion = c.cushion
        row = dict(
            contact=len(rows), t_s=core["t"], t_sigma_s=float(np.sqrt(var[1])), kind=c.kind,
            ball_a=c.ball_a, ball_b=c.ball_b, cushion=cushion, nx=core["n"][0], ny=core["n"][1],
            va_in_x_mm_s=core["va0"][0], va_in_y_mm_s=core["va0"][1],
            va_out_x_mm_s=core["va1"][0], va_out_y_mm_s=core["va1"][1],
            vb_in_x_mm_s=vb0[0], vb_in_y_mm_s=vb0[1], vb_out_x_mm_s=vb1[0], vb_out_y_mm_s=vb1[1],
            e=float(core["e"]), e_sigma=float(np.sqrt(var[0])),
            a_phase_in=phase_a, b_phase_in=phase_b, a_phase_out=out_a, b_phase_out=out_b, x_mm=pt[0], y_mm=pt[1], _cand=ci,
        )
        row.update(d)
        if parts is not None:
            row["_e_var_parts"] = parts
        rows.append(row)
    df = pd.DataFrame(rows, columns=CONTACT_COLUMNS + ["_cand"] + (["_e_var_parts"] if s.e_sigma_parts else []))
    df = df.sort_values("t_s").reset_index(drop=True)
    df["contact"] = np.arange(len(df))
    return df


def _add_part(var: np.ndarray, parts: dict | None, name: str, v: float) -> None:
    """Add a model-error variance ``v`` to e's variance ``var[0]`` (and to ``parts`` when kept)."""
    var[0] += v
    if parts is not None:
        parts[name] = parts.get(name, 0.0) + float(v)


def _fit_parts(fn, x: np.ndarray, cov: np.ndarray, cov_noise: np.ndarray | None, var_widened: float) -> dict:
    """e's variance parts from the fit (PhysicsSettings.e_sigma_parts): ``fit`` the propagated
    fit covariance, ``noise`` its samples-only part (priors' centres held), ``widen`` what the
    lack-of-fit widening adds."""
    v = float(propagate(fn, x, cov)[0])
    vn = float(propagate(fn, x, cov_noise)[0]) if cov_noise is not None else float("nan")
    return dict(fit=v, noise=vn, widen=var_widened - v)


def hop_dv(fa: ChainFit, ia: int, fb: ChainFit, ib: int, mu_s: float, s: PhysicsSettings | None = None,
           parts: dict | None = None) -> float:
    """Largest post-contact velocity error (mm/s) from a ball leaving the cloth after a ball-ball
    contact (PhysicsSettings.hop_sigma): ``(4/5) mu_s |X|`` with X (mm/s) the fitted slip shift
    along n (mean of the two balls' implied shifts, physics.pair_cov.implied_shift); 0 without a
    linked slip shift. With ``s.hop_shift_debias`` |X| is estimated by sqrt(max(X^2 - var X, 0)),
    var X propagated from the two fits' joint covariance (physics.pair_cov): the square of a
    noisy estimate overstates X^2 by its variance (E[X_hat^2] = X^2 + var), so a shift the
    samples cannot tell from 0 adds no hop. ``parts`` (diagnostics): gets ``X`` and ``X_sd``."""
    na = len(fa.x)
    terms = []
    for f, j, sl in ((fa, ia, slice(0, na)), (fb, ib, slice(na, None))):
        lay = f.layout
        if lay.slip_shift is None or not lay.links[j] or not np.all(np.isfinite(lay.slip_shift[j])):
            continue
        n = np.asarray(lay.slip_shift[j][1:], dtype=float)
        if np.isfinite(implied_shift(f.x, lay, j, n)):
            terms.append((f, j, sl, n))
    if not terms:
        return 0.0

    def mean_shift(z):
        return np.array([np.mean([implied_shift(z[sl], f.layout, j, n) for f, j, sl, n in terms])])

    xz = np.concatenate([fa.x, fb.x])
    X = float(mean_shift(xz)[0])
    x2 = X**2
    if s is not None and (s.hop_shift_debias or parts is not None):
        var = float(propagate(mean_shift, xz, joint_cov(fa, ia, fb, ib, s))[0])
        if parts is not None:
            parts.update(X=X, X_sd=float(np.sqrt(max(var, 0.0))))
        if s.hop_shift_debias and np.isfinite(var):
            x2 = max(x2 - var, 0.0)
    return 0.8 * float(mu_s) * float(np.sqrt(x2))


def ball_ball_values(fa: ChainFit, ia: int, fb: ChainFit, ib: int, R: float, dt: float,
                     s: PhysicsSettings, fuse: bool = True, sampling: bool = False,
                     parts: dict | None = None, hold: tuple[int, ...] = ()) -> tuple[dict, np.ndarray]:
    """(core values, variances (2,) of e and of the touch time in s^2) of the ball-ball contact at
    breaks ``ia`` / ``ib`` of two fitted chains (R mm, dt s). The variances come from one Jacobian
    over both balls' parameters with their joint covariance (physics.pair_cov: the two fits share
    the slip shift, hence the touch time and normal enter both). ``fuse``: touch time from the gap
    and both velocity breaks (settings.touch_time_fuse). ``sampling``: only the samples' noise
    part of the variance (what noise draws of one shot show; priors held fixed). ``parts``: filled
    with e's variance parts (:func:`_fit_parts`). ``hold``: indices into the stacked (xa, xb)
    parameters held fixed, i.e. the variances conditional on them (Gaussian conditioning;
    physics.slide_profile replaces a slide end's linearised part by its profile)."""
    na = len(fa.x)

    def core_of(z, w=None):
        return ball_ball_core(fa, ia, z[:na], fb, ib, z[na:], R, dt, w)

    xz = np.concatenate([fa.x, fb.x])
    if s.touch_time_fuse and fuse:
        # touch time from the gap and from both velocity breaks, combined by their
        # covariance: the normal's direction follows the touch time (see settings). The weights
        # use the balls' own blocks: with the joint covariance they moved e by up to a few
        # 0.001 and the median ball-ball error at 60 fps rose 0.0068 -> 0.0084 (bench seed 193)
        cb = np.zeros((len(xz), len(xz)))
        cb[:na, :na] = fa.cov
        cb[na:, na:] = fb.cov
        c3 = propagate_cov(lambda z: _touch_times(core_of(z)), xz, cb)
        core_of = partial(core_of, w=touch_time_weights(c3))
    cz = joint_cov(fa, ia, fb, ib, s, sampling=sampling)
    cz0 = cz
    if not sampling:
        # a segment whose samples misfit the model widens its parameters' errors (lack of fit,
        # physics.segments.misfit_scales); the noise-only part is left as the samples make it
        cz = widened_cov(cz, np.concatenate([fa.misfit_sd(), fb.misfit_sd()]))
    if hold:
        cz = conditional_cov(cz, list(hold))
    var = propagate(lambda z: _e_t(core_of(z)), xz, cz)
    if parts is not None:
        parts.update(_fit_parts(lambda z: _e_t(core_of(z)), xz, cz0,
                                joint_cov(fa, ia, fb, ib, s, sampling=True), float(var[0])))
    return core_of(xz), var


def _segments_table(fits: dict[str, ChainFit], samples, s: PhysicsSettings, per_segment: bool = False):
    rows = []
    g = s.g_mm_s2
    mus, mur = [], []
    for name, f in fits.items():
        lay = f.layout
        if lay.rest_first and lay.n_seg == 1:
            sd = np.sqrt(np.clip(np.diag(f.cov), 0, None))
            rows.append(dict(ball=name, segment=0, t0_s=f.t[0], t1_s=f.t[-1], phase="rest",
                             x0_mm=f.x[0], y0_mm=f.x[1], vx0_mm_s=0.0, vy0_mm_s=0.0,
                             ax_mm_s2=0.0, ay_mm_s2=0.0, x0_sigma_mm=sd[0], y0_sigma_mm=sd[1],
                             vx0_sigma_mm_s=0.0, vy0_sigma_mm_s=0.0, ax_sigma_mm_s2=0.0,
                             ay_sigma_mm_s2=0.0, t_roll_s=np.nan, mu=np.nan, mu_sigma=np.nan,
                             rms_mm=f.rms_mm, n_points=f.n_points))
            continue
        starts, _ = segment_starts(f.x, lay)
        ends = np.concatenate([starts[1:], [f.t[-1]]])
        tu = f.t[f.used]
        for k in range(lay.n_seg):
            t0, t1 = float(starts[k]), float(ends[k])
            npts = int(((tu >= t0) & (tu < t1)).sum())
            P, V = f.state(np.array([t0 + 1e-9]))
            par = unpack_segment(f.x, lay, k)
            base = dict(ball=name, segment=k, rms_mm=f.rms_mm, n_points=npts)
            if par is None:
                sd = np.sqrt(np.clip(np.diag(f.cov), 0, None))[:2]
                rows.append(dict(base, t0_s=t0, t1_s=t1, phase="rest", x0_mm=P[0, 0], y0_mm=P[0, 1],
                                 vx0_mm_s=0.0, vy0_mm_s=0.0, ax_mm_s2=0.0, ay_mm_s2=0.0,
                                 x0_sigma_mm=sd[0], y0_sigma_mm=sd[1], t_roll_s=np.nan, mu=np.nan,
                                 mu_sigma=np.nan))
                continue
            v0, a, t_roll, a_r = par
            o = lay.move_offset(k)
            t_r = t0 + t_roll
            vr = v0 + a * t_roll
            sp = float(np.hypot(*vr))
            t_stop = t_r + (sp / a_r if a_r > 0 else np.inf)
            # sigmas of the segment-start state and accelerations by propagation
            def vals(z, k=k):
                Pz, Vz, _ = chain_eval_pos(f, z, float(segment_starts(z, lay)[0][k]))
                pz = unpack_segment(z, lay, k)
                vrz = pz[0] + pz[1] * pz[2]
                u = vrz / max(np.hypot(*vrz), 1e-12)
                return np.array([Pz[0], Pz[1], Vz[0], Vz[1], pz[1][0], pz[1][1],
                                 np.hypot(*pz[1]) / g, pz[3] / g, *(-pz[3] * u)])
            var = propagate(vals, f.x, f.cov)
            sd = np.sqrt(np.clip(var, 0, None))
            if t_roll > 0 and t0 < min(t_r, t1):
                rows.append(dict(base, t0_s=t0, t1_s=min(t_r, t1), phase="slide",
                                 x0_mm=P[0, 0], y0_mm=P[0, 1], vx0_mm_s=v0[0], vy0_mm_s=v0[1],
                                 ax_mm_s2=a[0], ay_mm_s2=a[1], x0_sigma_mm=sd[0], y0_sigma_mm=sd[1],
                                 vx0_sigma_mm_s=sd[2], vy0_sigma_mm_s=sd[3], ax_sigma_mm_s2=sd[4],
                                 ay_sigma_mm_s2=sd[5], t_roll_s=t_r if t_r < t1 else np.nan,
                                 mu=float(np.hypot(*a) / g), mu_sigma=sd[6]))
                n_slide = int(((tu >= t0) & (tu < min(t_r, t1))).sum())
                mu_k = float(np.hypot(*a) / g)
                lo_mu, hi_mu = s.mu_s_plausible
                if n_slide >= 6 and lo_mu < mu_k < hi_mu and np.isfinite(sd[6]) and sd[6] > 0:
                    # linearised sigmas of short slides are optimistic (curved t_roll-a ridge)
                    mus.append((mu_k, max(sd[6], s.mu_s_single_rel_sigma * mu_k), (name, k)))
            if t_r < t1:
                Pr, Vr = f.state(np.array([max(t_r, t0) + 1e-9]))
                u = vr / max(sp, 1e-12)
                rows.append(dict(base, t0_s=max(t_r, t0), t1_s=min(t_stop, t1), phase="roll",
                                 x0_mm=Pr[0, 0], y0_mm=Pr[0, 1], vx0_mm_s=Vr[0, 0], vy0_mm_s=Vr[0, 1],
                                 ax_mm_s2=-a_r * u[0], ay_mm_s2=-a_r * u[1],
                                 ax_sigma_mm_s2=sd[8], ay_sigma_mm_s2=sd[9],
                                 t_roll_s=t_r, mu=a_r / g, mu_sigma=sd[7]))
                n_roll = int(((tu >= max(t_r, t0)) & (tu < min(t_stop, t1))).sum())
                hi = s.mu_r_max * g
                if n_roll >= 10 and 0 < a_r < 0.999 * hi and np.isfinite(sd[7]) and sd[7] > 0:
                    mur.append((a_r / g, sd[7], (name, k)))
            if t_stop < t1:
                Ps, _ = f.state(np.array([t_stop + 1e-9]))
                rows.append(dict(base, t0_s=t_stop, t1_s=t1, phase="rest", x0_mm=Ps[0, 0],
                                 y0_mm=Ps[0, 1], vx0_mm_s=0.0, vy0_mm_s=0.0, ax_mm_s2=0.0,
                                 ay_mm_s2=0.0, t_roll_s=t_r, mu=np.nan, mu_sigma=np.nan))
    seg = pd.DataFrame(rows, columns=SEGMENT_COLUMNS)
    if not per_segment:
        return seg, (*_combine(mus), *_combine(mur))
    return seg, (mus, mur)


def chain_eval_pos(f: ChainFit, z: np.ndarray, t0: float):
    P, V = f.state(np.array([t0 + 1e-9]), z)
    return P[0], V[0], None


def _combine(vals) -> tuple[float, float]:
    """Weighted mean and its sigma (inflated by the scatter when estimates disagree)."""
    if not vals:
        return float("nan"), float("nan")
    v = np.array([x[0] for x in vals])
    sg = np.array([x[1] for x in vals])
    w = 1 / sg**2
    mean = float((v * w).sum() / w.sum())
    se = float(1 / np.sqrt(w.sum()))
    if len(v) > 1:
        chi2 = float(((v - mean) ** 2 * w).sum() / (len(v) - 1))
        se *= max(1.0, np.sqrt(chi2))
    return mean, se


def _events_table(samples, fits, layouts, maps, contacts, segments, dt, s) -> pd.DataFrame:
    rows = []
    t_end = max(float(b.t[-1]) for b in samples.values())
    for name, f in fits.items():
        lay = f.layout
        merged = maps[name][1]
        for i, br in enumerate(merged):
            if br.kind == "strike":
                k = lay.break_offset + i
                rows.append(dict(t_s=float(f.x[k]), t_sigma_s=float(np.sqrt(max(f.cov[k, k], 0))),
                                 kind="strike", ball=name, other="", contact=-1))
        b = samples[name]
        if b.t[-1] < t_end - s.leave_frames * dt:
            rows.append(dict(t_s=float(b.t[-1] + 0.5 * dt), t_sigma_s=0.5 * dt, kind="leave",
                             ball=name, other="", contact=-1))
    seg_rest = []
    for _, r in segments.iterrows():
        if r.phase == "rest" and r.segment > 0 and r.t0_s > samples[r.ball].t[0] + dt:
            seg_rest.append(dict(t_s=r.t0_s, t_sigma_s=np.nan, kind="rest", ball=r.ball, other="",
                                 contact=-1))
    for _, c in contacts.iterrows():
        for ball, other in ((c.ball_a, c.ball_b or c.cushion), (c.ball_b, c.ball_a)):
            if ball:
                rows.append(dict(t_s=c.t_s, t_sigma_s=c.t_sigma_s, kind=c.kind, ball=ball,
                                 other=other, contact=int(c.contact)))
    ev = pd.DataFrame(rows, columns=[c for c in EVENT_COLUMNS if c != "event"])
    if seg_rest:
        ev = pd.concat([ev, pd.DataFrame(seg_rest, columns=ev.columns)], ignore_index=True)
    ev = ev.sort_values(["t_s", "ball"]).reset_index(drop=True)
    ev.insert(0, "event", np.arange(len(ev)))
    return ev


def tables_from_positions(
    times: np.ndarray,
    positions: dict[str, np.ndarray],
    sigma_mm: float,
    rng: np.random.Generator,
    fps: float | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Tracks and detections tables from known centres (for simulations, tests, benchmarks).

    times (T,) s; positions: ball -> (T,2) mm (NaN rows = not seen); Gaussian noise of
    ``sigma_mm`` per coordinate is added, and ``sx_mm``/``sy_mm`` say so. The tracks table is the
    same samples (velocities NaN): a stand-in for the tracker's smoothed output.
    """
    rows = []
    times = np.asarray(times, dtype=float)
    frames = np.round(times * fps).astype(int) if fps else np.arange(len(times))
    for ball, p in positions.items():
        p = np.asarray(p, dtype=float)
        ok = np.isfinite(p).all(axis=1)
        noisy = p + rng.normal(0.0, sigma_mm, size=p.shape)
        for k in np.flatnonzero(ok):
            rows.append((int(frames[k]), float(times[k]), str(ball), noisy[k, 0], noisy[k, 1]))
    det = pd.DataFrame(rows, columns=["frame", "t_s", "ball", "x_mm", "y_mm"])
    det["sx_mm"] = sigma_mm
    det["sy_mm"] = sigma_mm
    tracks = det.assign(vx_mm_s=np.nan, vy_mm_s=np.nan, visible=1)
    tracks = tracks[["frame", "t_s", "ball", "x_mm", "y_mm", "vx_mm_s", "vy_mm_s", "sx_mm", "sy_mm", "visible"]]
    return tracks, det


def _e_t(core: dict) -> np.ndarray:
    return np.array([core["e"], core["t"]])


def _touch_times(core: dict) -> np.ndarray:
    return np.array([core["t_geo"], core["tba"], core["tbb"]])
