"""Event-driven shot simulator: exact ground truth for renders and checks.

Units: mm, s, mm/s, rad/s, kg; impulses N s. Table frame per DEVELOPERS.md
(x along the long side 0..L, y along the short side 0..W, z up; cushion nose
lines x=0 ``x0``, x=L ``xL``, y=0 ``y0``, y=W ``yW``; a ball touches a cushion
when its centre is sqrt(R^2 - (h - R)^2) from the line, h the nose height:
physics/cushion_geometry.py).

Model and sources
-----------------
* Cloth, sliding: Coulomb friction ``mu_slide`` at the contact point. The slip
  velocity ``u = v + w x (-R z)`` keeps its direction and decays at
  ``7/2 mu_s g``; the ball decelerates at ``mu_s g`` along ``-u_hat`` (so the
  path curves when u is not along v). Sliding ends exactly at
  ``2 |u0| / (7 mu_s g)`` with final velocity ``(5 v0 + 2 R w0 x z) / 7``
  (classical rigid-body result; the closed forms are listed in the shared
  REFERENCES.md and pinned by tests/test_simulate.py).
* Cloth, rolling: deceleration ``mu_roll g`` against the velocity (the
  "force / weight" definition; R. Cross, Am. J. Phys. 90(9):648 (2022) notes
  another definition differs by 7/5).
* Spin about the vertical: constant spinning-friction torque
  ``mu_spin m g R``, i.e. angular deceleration ``5 mu_spin g / (2 R)``,
  independent of the other motion (a point contact has no lever arm for it).
  Default ``mu_spin`` = 0.01: a flat contact patch of radius a under
  uniform pressure gives torque ``(2/3) mu_s a m g`` (handbook result for a
  flat disc clutch / thrust bearing), i.e. ``mu_spin = 2 mu_s a / (3 R)``;
  a ~ 2 mm (from memory) gives ~0.01. Order of magnitude only.
* Ball-ball: instantaneous; Newton restitution ``e_ball_ball`` on the line of
  centres; optional Coulomb friction ``mu_ball_ball`` at the contact point
  (throw, spin transfer; sticks if friction suffices). Contacts last
  ~0.3 ms (Hertz estimate in REFERENCES.md), far below a video frame.
* Ball-cushion: rigid cushion touching the ball at the nose height h, so the
  normal impulse is tilted down into the cloth; Coulomb friction
  ``mu_cushion`` at the cushion and ``mu_slide`` at the cloth (which carries
  the downward part of the impulse); the impact is integrated in small steps
  of normal impulse and ends by Stronge's energetic restitution
  ``e_cushion`` (W. J. Stronge, Impact Mechanics, CUP 2000). This follows
  the approach of Mathavan, Jackson & Parkin, Proc. IMechE C 224(9):1863
  (2010) (integration over the normal impulse with slip at the cushion and
  cloth contacts); the implementation is our own. Without friction the horizontal normal velocity
  is reversed times ``e_cushion`` exactly; with friction and spin the
  measured ratio differs (a rolling ball comes off at about ``e_cushion``,
  a stun ball lower). 1000 steps: within ~1e-3 of the continuous model.
  See :mod:`physics._sim_contacts`.
* Pockets are not simulated: every ball stays on the table.

Between events each ball's motion is a quadratic in time, so next-event
times are solved in closed form: quadratic for cushions, quartic (split at
the real roots of its derivative, Brent-polished) for ball pairs, linear for
phase ends. Simultaneous events are processed one after the other at the same
instant. A numerical floor (``min_bounce_mm_s``) stops endless micro-bounces
of balls pressed together (or into a cushion) by cloth friction; contacts it
touches are flagged ``micro``. See SimParams.

>>> p = SimParams(length_mm=2540.0, width_mm=1270.0)
>>> res = simulate([BallInit("cue", 500.0, 635.0, vx_mm_s=1000.0)], p, 1.0)
>>> st = res.state_at([0.0, 0.5])
>>> st.pos.shape, float(st.vel[0, 0, 0])
((2, 1, 2), 1000.0)
>>> [str(c) for c in res.phase_at([0.0, 0.5])[:, 0]]
['slide', 'roll']
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Sequence

import numpy as np

from feltlab.errors import FeltlabError
from feltlab.standards import (
    G_MM_S2,
    MU_CUSHION,
    MU_ROLL_TYPICAL,
    MU_SLIDE_CLOTH_TYPICAL,
    POOL_BALL,
    TablePreset,
)
from physics import _sim_contacts as contacts
from physics._sim_motion import PHASES, Segment, cushion_time, make_segment, pair_time
from physics.cushion_geometry import NOSE_HEIGHT_FRACTION, contact_distance_mm

__all__ = [
    "BallInit", "SimParams", "TrueContact", "SimEvent", "SimStates", "SimResult", "simulate",
    "CUSHIONS", "NOSE_HEIGHT_FRACTION",
]


#: Cushion name -> inward unit normal (from the cushion into the table).
CUSHIONS: dict[str, tuple[float, float]] = {
    "x0": (1.0, 0.0), "xL": (-1.0, 0.0), "y0": (0.0, 1.0), "yW": (0.0, -1.0),
}

_KG_MM_S_TO_NS = 1e-3


@dataclass
class BallInit:
    """A ball's state at t = 0: centre (mm), velocity (mm/s), spin (rad/s, table frame)."""

    id: str
    x_mm: float
    y_mm: float
    vx_mm_s: float = 0.0
    vy_mm_s: float = 0.0
    wx: float = 0.0
    wy: float = 0.0
    wz: float = 0.0
    radius_mm: float = POOL_BALL.diameter_mm / 2.0
    mass_kg: float = POOL_BALL.mass_kg

    @classmethod
    def struck(cls, id: str, x_mm: float, y_mm: float, speed_mm_s: float, heading_deg: float,
               top_rad_s: float = 0.0, side_rad_s: float = 0.0, **kw: Any) -> "BallInit":
        """A ball leaving the cue at ``speed_mm_s`` towards ``heading_deg`` (from +x, ccw).

        ``top_rad_s`` > 0 is topspin (follow), < 0 backspin (draw), about the
        horizontal axis perpendicular to the heading; ``side_rad_s`` > 0 spins
        the ball counter-clockwise seen from above (wz > 0).
        """
        h = math.radians(heading_deg)
        d = (math.cos(h), math.sin(h))
        # Topspin about z x d' ... rolling forward along d needs w = (-dy, dx) * v/R.
        return cls(id, x_mm, y_mm, speed_mm_s * d[0], speed_mm_s * d[1],
                   -d[1] * top_rad_s, d[0] * top_rad_s, side_rad_s, **kw)


@dataclass
class SimParams:
    """Table size and contact/cloth coefficients for :func:`simulate`.

    Defaults: e_ball_ball 0.95 and mu_ball_ball 0 (friction off unless asked;
    measured 0.03-0.08), e_cushion 0.8 (apparent 0.6-0.9), mu_cushion 0.14
    (Mathavan et al. 2010), mu_slide 0.2, mu_roll 0.01 -- all from
    :mod:`feltlab.standards` (Physics of Pool FAQ ranges unless stated).
    cushion_height_mm None -> 0.635 x each ball's diameter (from memory).
    mu_spin: see the module docstring. min_bounce_mm_s: separation-speed
    floor for ball-ball contacts and the cushion low-speed rule (2 mm/s:
    numerical, far below what video resolves; balls pressed together by cloth
    friction then bounce apart by ~1e-3 mm every few ms instead of endlessly). max_events: the simulation stops with an error beyond it.
    """

    length_mm: float
    width_mm: float
    e_ball_ball: float = 0.95
    mu_ball_ball: float = 0.0
    e_cushion: float = 0.8
    mu_cushion: float = MU_CUSHION
    cushion_height_mm: float | None = None
    mu_slide: float = MU_SLIDE_CLOTH_TYPICAL
    mu_roll: float = MU_ROLL_TYPICAL
    mu_spin: float = 0.01
    pockets: bool = False
    g_mm_s2: float = G_MM_S2
    min_bounce_mm_s: float = 2.0
    max_events: int = 20000

    @classmethod
    def for_table(cls, preset: TablePreset, **overrides: Any) -> "SimParams":
        """Parameters for a table preset (size, nose height); keywords override."""
        kw: dict[str, Any] = dict(
            length_mm=preset.length_mm,
            width_mm=preset.width_mm,
            cushion_height_mm=preset.cushion_nose_height_mm,
        )
        kw.update(overrides)
        return cls(**kw)

    def check(self) -> None:
        """Raise FeltlabError on an impossible setting."""
        for name in ("length_mm", "width_mm", "g_mm_s2"):
            val = getattr(self, name)
            if not (math.isfinite(val) and val > 0):
                raise FeltlabError(f"SimParams.{name} must be a positive number, got {val!r}")
        for name in ("e_ball_ball", "e_cushion"):
            val = getattr(self, name)
            if not (0.0 <= val <= 1.0):
                raise FeltlabError(f"SimParams.{name} must be within 0..1, got {val!r}")
        for name in ("mu_ball_ball", "mu_cushion", "mu_slide", "mu_roll", "mu_spin", "min_bounce_mm_s"):
            val = getattr(self, name)
            if not (math.isfinite(val) and val >= 0.0):
                raise FeltlabError(f"SimParams.{name} must be >= 0, got {val!r}")
        if self.pockets:
            raise FeltlabError("pockets are not simulated; set SimParams.pockets=False")
        if self.max_events < 1:
            raise FeltlabError("SimParams.max_events must be at least 1")


@dataclass
class TrueContact:
    """One simulated contact with its exact pre/post states.

    normal: ball-ball: unit a->b line of centres; cushion: unit normal from
    the cushion into the table. Velocities (2,) mm/s, spins (3,) rad/s.
    e_measured: separation over approach speed along the normal.
    impulse_a_Ns: horizontal impulse on ball a (N s). micro: approach speed
    below the numerical floor (not a real hit, see SimParams.min_bounce_mm_s).
    """

    t_s: float
    kind: str
    ball_a: str
    ball_b: str | None
    cushion: str | None
    normal: np.ndarray
    va_pre: np.ndarray
    va_post: np.ndarray
    vb_pre: np.ndarray | None
    vb_post: np.ndarray | None
    wa_pre: np.ndarray
    wa_post: np.ndarray
    wb_pre: np.ndarray | None
    wb_post: np.ndarray | None
    e_applied: float
    e_measured: float
    impulse_a_Ns: np.ndarray
    speed_in_mm_s: float = 0.0
    micro: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {k: _jsonable(v) for k, v in asdict(self).items()}


@dataclass
class SimEvent:
    """Anything that changes a ball's motion: 'ball-ball', 'ball-cushion',
    'slide-roll', 'roll-rest'. balls: ids involved; contact: index into
    SimResult.contacts or None."""

    t_s: float
    kind: str
    balls: tuple[str, ...]
    contact: int | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"t_s": self.t_s, "kind": self.kind, "balls": list(self.balls), "contact": self.contact}


@dataclass
class SimStates:
    """States at T times of N balls: pos (T,N,2) mm, vel (T,N,2) mm/s,
    omega (T,N,3) rad/s, on_table (T,N) bool."""

    times: np.ndarray
    pos: np.ndarray
    vel: np.ndarray
    omega: np.ndarray
    on_table: np.ndarray


@dataclass
class SimResult:
    """Outcome of :func:`simulate`: piecewise closed-form motion plus events."""

    ball_ids: list[str]
    params: SimParams
    balls: list[BallInit]
    t_end_s: float
    events: list[SimEvent]
    contacts: list[TrueContact]
    segments: list[list[Segment]] = field(repr=False)

    def __post_init__(self) -> None:
        self._packed = [_pack(segs) for segs in self.segments]

    def _index(self, times: np.ndarray, k: int) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray]:
        pk = self._packed[k]
        idx = np.searchsorted(pk["t0"], times, side="right") - 1
        idx = np.clip(idx, 0, None)
        tau = times - pk["t0"][idx]
        return pk, idx, tau

    def _times(self, times: Sequence[float] | np.ndarray) -> np.ndarray:
        t = np.atleast_1d(np.asarray(times, float))
        if t.ndim != 1:
            raise FeltlabError("state_at: times must be a 1-D sequence of seconds")
        tol = 1e-9 * max(1.0, self.t_end_s)
        if np.any(~np.isfinite(t)) or np.any(t < -tol) or np.any(t > self.t_end_s + tol):
            raise FeltlabError(
                f"state_at: times must lie within 0..{self.t_end_s} s (the simulated span)")
        return np.clip(t, 0.0, self.t_end_s)

    def state_at(self, times: Sequence[float] | np.ndarray) -> SimStates:
        """Exact states at the given times (s), vectorised over times and balls.

        At an event time the state is the post-event state.
        """
        t = self._times(times)
        T, N = t.size, len(self.ball_ids)
        pos = np.empty((T, N, 2))
        vel = np.empty((T, N, 2))
        om = np.empty((T, N, 3))
        on = np.empty((T, N), bool)
        for k in range(N):
            pk, idx, tau = self._index(t, k)
            tt = tau[:, None]
            pos[:, k] = pk["r0"][idx] + pk["v0"][idx] * tt + 0.5 * pk["a"][idx] * tt * tt
            vel[:, k] = pk["v0"][idx] + pk["a"][idx] * tt
            om[:, k, :2] = pk["w0"][idx, :2] + pk["alpha"][idx] * tt
            wz0 = pk["w0"][idx, 2]
            om[:, k, 2] = np.sign(wz0) * np.maximum(np.abs(wz0) - pk["wz_decel"][idx] * tau, 0.0)
            on[:, k] = pk["phase"][idx] != PHASES.index("off")
        return SimStates(t, pos, vel, om, on)

    def phase_at(self, times: Sequence[float] | np.ndarray) -> np.ndarray:
        """(T,N) array of 'slide' | 'roll' | 'rest' | 'off' at the given times (s)."""
        t = self._times(times)
        out = np.empty((t.size, len(self.ball_ids)), dtype=object)
        names = np.array(PHASES, dtype=object)
        for k in range(len(self.ball_ids)):
            pk, idx, _ = self._index(t, k)
            out[:, k] = names[pk["phase"][idx]]
        return out

    def kinetic_energy_J(self, times: Sequence[float] | np.ndarray) -> np.ndarray:
        """(T,) total kinetic energy (translation + rotation, I = 2/5 m R^2) in J."""
        st = self.state_at(times)
        m = np.array([b.mass_kg for b in self.balls])
        R = np.array([b.radius_mm for b in self.balls]) * 1e-3
        v2 = np.sum((st.vel * 1e-3) ** 2, axis=2)
        w2 = np.sum(st.omega**2, axis=2)
        return np.sum(0.5 * m * v2 + 0.5 * 0.4 * m * R * R * w2, axis=1)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready truth: params, initial balls, events, contacts, segments."""
        return {
            "units": {"length": "mm", "time": "s", "speed": "mm/s", "spin": "rad/s",
                      "mass": "kg", "impulse": "N s"},
            "frame": "table: x along the long side 0..L, y 0..W, z up; origin at a cushion-nose corner",
            "t_end_s": self.t_end_s,
            "params": {k: _jsonable(v) for k, v in asdict(self.params).items()},
            "balls": [asdict(b) for b in self.balls],
            "events": [e.to_dict() for e in self.events],
            "contacts": [c.to_dict() for c in self.contacts],
            "segments": {
                bid: [{"t0_s": s.t0, "t1_s": _jsonable(s.t1), "phase": s.phase,
                       "r0_mm": s.r0.tolist(), "v0_mm_s": s.v0.tolist(), "a_mm_s2": s.a.tolist(),
                       "w0_rad_s": s.w0.tolist(), "alpha_rad_s2": s.alpha.tolist(),
                       "wz_decel_rad_s2": s.wz_decel} for s in segs]
                for bid, segs in zip(self.ball_ids, self.segments)
            },
        }


def _jsonable(v: Any) -> Any:
    if isinstance(v, np.ndarray):
        return [_jsonable(x) for x in v.tolist()]
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else None
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.bool_):
        return bool(v)
    return v


def _pack(segs: list[Segment]) -> dict[str, np.ndarray]:
    return {
        "t0": np.array([s.t0 for s in segs]),
        "r0": np.array([s.r0 for s in segs]),
        "v0": np.array([s.v0 for s in segs]),
        "a": np.array([s.a for s in segs]),
        "w0": np.array([s.w0 for s in segs]),
        "alpha": np.array([s.alpha for s in segs]),
        "wz_decel": np.array([s.wz_decel for s in segs]),
        "phase": np.array([PHASES.index(s.phase) for s in segs]),
    }


def _check_balls(balls: list[BallInit], params: SimParams) -> None:
    if not balls:
        raise FeltlabError("simulate: no balls given; pass at least one BallInit")
    ids = [b.id for b in balls]
    if len(set(ids)) != len(ids):
        raise FeltlabError(f"simulate: ball ids must be unique, got {ids}")
    L, W = params.length_mm, params.width_mm
    tol = 1e-6
    for b in balls:
        vals = [b.x_mm, b.y_mm, b.vx_mm_s, b.vy_mm_s, b.wx, b.wy, b.wz, b.radius_mm, b.mass_kg]
        if not all(math.isfinite(float(v)) for v in vals):
            raise FeltlabError(f"simulate: ball {b.id!r} has a non-finite value; give finite numbers")
        if b.radius_mm <= 0 or b.mass_kg <= 0:
            raise FeltlabError(f"simulate: ball {b.id!r} needs positive radius_mm and mass_kg")
        R = b.radius_mm
        h = params.cushion_height_mm
        if h is not None and not (0.0 < h < 2.0 * R):
            raise FeltlabError(
                f"SimParams.cushion_height_mm={h} must lie between 0 and the ball diameter {2 * R} mm")
        dc = contact_distance_mm(R, h)
        if not (dc - tol <= b.x_mm <= L - dc + tol and dc - tol <= b.y_mm <= W - dc + tol):
            raise FeltlabError(
                f"simulate: ball {b.id!r} at ({b.x_mm}, {b.y_mm}) mm is not on the {L} x {W} mm "
                f"table (its centre must be at least {dc:.2f} mm from every cushion nose, where it "
                f"touches the nose)")
    for i, a in enumerate(balls):
        for b in balls[i + 1:]:
            d = math.hypot(a.x_mm - b.x_mm, a.y_mm - b.y_mm)
            if d < a.radius_mm + b.radius_mm - tol:
                raise FeltlabError(
                    f"simulate: balls {a.id!r} and {b.id!r} overlap ({d:.3f} mm apart, need "
                    f"{a.radius_mm + b.radius_mm:.3f}); move them apart")


class _Sim:
    """Mutable event loop state (internal)."""

    def __init__(self, balls: list[BallInit], params: SimParams, t_end: float) -> None:
        self.balls = balls
        self.p = params
        self.t_end = t_end
        self.N = len(balls)
        self.R = [b.radius_mm for b in balls]
        self.m = [b.mass_kg for b in balls]
        self.wz_dec = [2.5 * params.mu_spin * params.g_mm_s2 / r for r in self.R]
        self.normals = {k: np.array(v) for k, v in CUSHIONS.items()}
        L, W = params.length_mm, params.width_mm
        self.events: list[SimEvent] = []
        self.contacts: list[TrueContact] = []
        self.segs: list[list[Segment]] = []
        for i, b in enumerate(balls):
            seg = self._segment(i, 0.0, np.array([b.x_mm, b.y_mm]), np.array([b.vx_mm_s, b.vy_mm_s]),
                                np.array([b.wx, b.wy, b.wz]))
            self.segs.append([seg])
        # a ball touches a cushion when its centre is d from the nose line, d < R
        # because the nose is above the ball's centre (physics/cushion_geometry.py)
        dc = [contact_distance_mm(R, params.cushion_height_mm) for R in self.R]
        self.offsets = {i: {"x0": dc[i], "xL": dc[i] - L, "y0": dc[i], "yW": dc[i] - W}
                        for i in range(self.N)}
        self.next_cushion: list[tuple[float, str | None]] = [(np.inf, None)] * self.N
        self.next_pair: dict[tuple[int, int], float] = {}
        for i in range(self.N):
            self._refresh_cushion(i, 0.0)
        for i in range(self.N):
            for j in range(i + 1, self.N):
                self.next_pair[(i, j)] = self._pair(i, j, 0.0)

    def _segment(self, i: int, t: float, r, v, w, force: str | None = None) -> Segment:
        p = self.p
        return make_segment(t, r, v, w, self.R[i], p.mu_slide, p.mu_roll, self.wz_dec[i],
                            p.g_mm_s2, force)

    def cur(self, i: int) -> Segment:
        return self.segs[i][-1]

    def _refresh_cushion(self, i: int, t: float) -> None:
        seg = self.cur(i)
        best: tuple[float, str | None] = (np.inf, None)
        if seg.phase in ("rest", "off"):
            self.next_cushion[i] = best
            return
        r, v, _ = seg.state(t)
        horizon = min(seg.t1, self.t_end) - t
        for name, n in self.normals.items():
            tau = cushion_time(r, v, seg.a, n, self.offsets[i][name], horizon)
            if tau is not None and t + tau < best[0]:
                best = (float(t + tau), name)
        self.next_cushion[i] = best

    def _pair(self, i: int, j: int, t: float, states: dict | None = None) -> float:
        si, sj = self.cur(i), self.cur(j)
        if si.phase in ("rest", "off") and sj.phase in ("rest", "off"):
            return np.inf
        if "off" in (si.phase, sj.phase):
            return np.inf
        if states is None:
            states = {}
        for k in (i, j):
            if k not in states:
                states[k] = self.cur(k).state(t)
        ri, vi, _ = states[i]
        rj, vj, _ = states[j]
        horizon = min(si.t1, sj.t1, self.t_end) - t
        tau = pair_time(rj - ri, vj - vi, sj.a - si.a, self.R[i] + self.R[j], horizon)
        return np.inf if tau is None else float(t + tau)

    def _refresh(self, changed: set[int], t: float) -> None:
        states: dict[int, tuple] = {}
        for i in changed:
            self._refresh_cushion(i, t)
            for j in range(self.N):
                if j != i:
                    key = (min(i, j), max(i, j))
                    self.next_pair[key] = self._pair(key[0], key[1], t, states)

    def run(self) -> None:
        n_events = 0
        while True:
            t_phase, i_phase = np.inf, -1
            for i in range(self.N):
                if self.cur(i).t1 < t_phase:
                    t_phase, i_phase = self.cur(i).t1, i
            t_cush, i_cush = np.inf, -1
            for i in range(self.N):
                if self.next_cushion[i][0] < t_cush:
                    t_cush, i_cush = self.next_cushion[i][0], i
            t_pair, k_pair = np.inf, None
            for k, tp in self.next_pair.items():
                if tp < t_pair:
                    t_pair, k_pair = tp, k
            t_next = min(t_phase, t_cush, t_pair)
            if not t_next <= self.t_end:
                break
            n_events += 1
            if n_events > self.p.max_events:
                raise FeltlabError(
                    f"simulate: more than {self.p.max_events} events before t={t_next:.4f} s; "
                    "shorten t_end_s or raise SimParams.max_events")
            if t_pair == t_next:
                self._ball_ball(*k_pair, t_next)
            elif t_cush == t_next:
                self._ball_cushion(i_cush, self.next_cushion[i_cush][1], t_next)
            else:
                self._phase_end(i_phase, t_next)

    def _phase_end(self, i: int, t: float) -> None:
        seg = self.cur(i)
        r, v, w = seg.state(t)
        force = "roll" if seg.phase == "slide" else "rest"
        new = self._segment(i, t, r, v, w, force)
        self.segs[i].append(new)
        kind = "slide-roll" if new.phase == "roll" else f"{seg.phase}-rest"
        self.events.append(SimEvent(t, kind, (self.balls[i].id,)))
        self._refresh({i}, t)

    def _ball_cushion(self, i: int, name: str, t: float) -> None:
        p = self.p
        r, v, w = self.cur(i).state(t)
        n = self.normals[name]
        R, m = self.R[i], self.m[i]
        h = p.cushion_height_mm if p.cushion_height_mm is not None else NOSE_HEIGHT_FRACTION * 2 * R
        out = contacts.ball_cushion(v, w, m, R, n, h, p.e_cushion, p.mu_cushion, p.mu_slide,
                                    p.min_bounce_mm_s)
        v_in = -float(v @ n)
        e_meas = float(out.va @ n) / v_in if v_in > 0 else float("nan")
        self._record(TrueContact(
            t, "ball-cushion", self.balls[i].id, None, name, n.copy(), v.copy(), out.va.copy(),
            None, None, w.copy(), out.wa.copy(), None, None, p.e_cushion, e_meas,
            out.impulse_a * _KG_MM_S_TO_NS, v_in, out.resting), (self.balls[i].id,))
        self.segs[i].append(self._segment(i, t, r, out.va, out.wa))
        self._refresh({i}, t)

    def _ball_ball(self, i: int, j: int, t: float) -> None:
        p = self.p
        ri, vi, wi = self.cur(i).state(t)
        rj, vj, wj = self.cur(j).state(t)
        # Ball a is the striker (faster before contact); normal points a -> b.
        if np.hypot(*vj) > np.hypot(*vi):
            i, j, ri, vi, wi, rj, vj, wj = j, i, rj, vj, wj, ri, vi, wi
        d = rj - ri
        n = d / np.hypot(*d)
        out = contacts.ball_ball(vi, wi, self.m[i], self.R[i], vj, wj, self.m[j], self.R[j], n,
                                 p.e_ball_ball, p.mu_ball_ball, p.min_bounce_mm_s)
        w_app = float((vi - vj) @ n)
        e_meas = float((out.vb - out.va) @ n) / w_app if w_app > 0 else float("nan")
        ids = (self.balls[i].id, self.balls[j].id)
        self._record(TrueContact(
            t, "ball-ball", ids[0], ids[1], None, n, vi.copy(), out.va.copy(), vj.copy(),
            out.vb.copy(), wi.copy(), out.wa.copy(), wj.copy(), out.wb.copy(), p.e_ball_ball,
            e_meas, out.impulse_a * _KG_MM_S_TO_NS, w_app, p.e_ball_ball * w_app < p.min_bounce_mm_s),
            ids)
        self.segs[i].append(self._segment(i, t, ri, out.va, out.wa))
        self.segs[j].append(self._segment(j, t, rj, out.vb, out.wb))
        self._refresh({i, j}, t)

    def _record(self, c: TrueContact, ids: tuple[str, ...]) -> None:
        self.contacts.append(c)
        self.events.append(SimEvent(c.t_s, c.kind, ids, len(self.contacts) - 1))


def simulate(balls: list[BallInit], params: SimParams, t_end_s: float) -> SimResult:
    """Simulate the balls from t = 0 to ``t_end_s`` (s) on the table in ``params``.

    Raises FeltlabError on impossible input (ball off the table, overlapping
    balls, bad coefficients) or when ``params.max_events`` is exceeded.
    """
    params.check()
    try:
        t_end_s = float(t_end_s)
    except (TypeError, ValueError):
        raise FeltlabError(f"simulate: t_end_s must be a number of seconds, got {t_end_s!r}") from None
    if not (math.isfinite(t_end_s) and t_end_s > 0):
        raise FeltlabError(f"simulate: t_end_s must be a positive number of seconds, got {t_end_s!r}")
    balls = [replace(b) for b in balls]
    _check_balls(balls, params)
    sim = _Sim(balls, params, float(t_end_s))
    sim.run()
    return SimResult([b.id for b in balls], replace(params), balls, float(t_end_s),
                     sim.events, sim.contacts, sim.segs)
