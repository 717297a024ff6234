"""Contact finding in chains and clusters (compound events), slow touches and near misses.

Outside truth: pymunk, an independent general-purpose 2-D physics engine (PyPI), decides which
balls touch and conserves momentum; straight-line motion (closed form) for the near miss; the
link-impulse solve against momentum conservation (closed form). Table plane only for pymunk: no
cloth, so balls glide at constant velocity between contacts (mu = 0 case of our motion model).
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import table_preset
from physics.compound import solve_links
from physics.pipeline import analyze_tracks, tables_from_positions

pymunk = pytest.importorskip("pymunk")

from pymunk_scenes import build_space, run_frames  # noqa: E402

TABLE = table_preset("pool-8ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
SUB = 40  # pymunk steps per video frame


def run_pymunk(balls: dict, e_each: float, fps: float, duration: float):
    """Circles (mm, mm/s) in pymunk; times (T,), positions ball -> (T,2), and the total normal
    impulse (kg mm/s) pymunk applied per touching pair (from its own collision callbacks)."""
    space, bodies, shape_ball = build_space(balls, e_each, R, M, iterations=50)
    impulses: dict[frozenset, float] = {}

    def post(arbiter, space_, data):
        a, b = (shape_ball[s] for s in arbiter.shapes)
        key = frozenset((a, b))
        impulses[key] = impulses.get(key, 0.0) + float(np.hypot(*arbiter.total_impulse))

    space.on_collision(None, None, post_solve=post)
    times, pos, _ = run_frames(space, bodies, fps, duration, SUB)
    return times, pos, impulses


def analyse(times, pos, fps, sigma, seed):
    tracks, det = tables_from_positions(times, pos, sigma, np.random.default_rng(seed), fps)
    return analyze_tracks(tracks, det, TABLE, R, M, fps)


def pairs_of(contacts) -> set:
    return {frozenset((r.ball_a, r.ball_b)) for r in contacts.itertuples() if r.kind == "ball-ball"}


def test_link_impulses_from_velocity_changes_closed_form():
    """Momentum conservation (closed form): ball 0 hits ball 1, which passes momentum to balls 2
    and 3 along lines of centres at +-30 degrees. Velocity changes built from known link impulses
    J (mm/s, equal masses) must give back J; links at the bound stay zero."""
    n01 = np.array([1.0, 0.0])
    n12 = np.array([np.cos(np.radians(30)), np.sin(np.radians(30))])
    n13 = np.array([np.cos(np.radians(-30)), np.sin(np.radians(-30))])
    n23 = np.array([0.0, -1.0])  # balls 2 and 3 side by side: touching, but no impulse
    J = np.array([2000.0, 900.0, 700.0, 0.0])
    links = [(0, 1), (1, 2), (1, 3), (2, 3)]
    N = np.array([n01, n12, n13, n23])
    dv = np.zeros((4, 2))
    for (a, b), j, n in zip(links, J, N):
        dv[a] -= j * n
        dv[b] += j * n
    rng = np.random.default_rng(3)
    sig = 5.0
    r = solve_links(dv + rng.normal(0, sig, dv.shape), np.tile(np.eye(2) * sig**2, (4, 1, 1)), links, N,
                    mu_bb=0.0)
    # tolerance: 4 standard errors of each link (noise 5 mm/s per component)
    assert np.all(np.abs(r.J - J) < 4 * r.J_sigma + 1e-9), (r.J, r.J_sigma)
    assert r.J[3] < 4 * r.J_sigma[3]


@pytest.mark.slow
@pytest.mark.parametrize("fps", [60.0, 240.0])
def test_line_of_three_all_links_found_and_momentum_conserved(fps):
    """Cue ball into two nearly touching balls in a line (Newton's-cradle-like), pymunk truth."""
    gap = 0.3
    y = 584.0
    balls = {
        "cue": ((900.0, y), (2500.0, 0.0)),
        "yellow": ((1400.0, y), (0.0, 0.0)),
        "blue": ((1400.0 + 2 * R + gap, y + 3.0), (0.0, 0.0)),
    }
    times, pos, imp = run_pymunk(balls, 0.97, fps, 0.6)
    truth = {k for k, v in imp.items() if v / M > 30.0}  # >= 30 mm/s change (as the e2e rule)
    assert truth == {frozenset(("cue", "yellow")), frozenset(("yellow", "blue"))}
    out = analyse(times, pos, fps, 0.3, 11)
    c = out.contacts
    assert pairs_of(c) == truth, c[["t_s", "ball_a", "ball_b", "e"]]
    # one compound event: same group, flagged, e not measurable, a note saying why
    assert c["simultaneous"].astype(bool).all(), c[["t_s", "ball_a", "ball_b", "group", "simultaneous"]]
    assert c["group"].nunique() == 1 and (c["group"] > 0).all()
    assert c["e"].isna().all() and c["e_sigma"].isna().all()
    assert (c["note"].str.len() > 20).all()
    # the group's momentum is conserved (pymunk conserves it exactly) within 3 sigma plus a model
    # allowance: our motion model has cloth friction (sliding prior mu_s ~0.2) and pymunk has none,
    # so the fitted velocities at the break carry a bias of a few % (measured 4.7 % at 60 fps)
    g = c.iloc[0]
    assert g.group_momentum_residual_pct < 3 * g.group_momentum_residual_sigma_pct + 6.0
    # link impulses against pymunk's own accumulated impulses (N s); 3 sigma + 2 %
    for r in c.itertuples():
        true_ns = imp[frozenset((r.ball_a, r.ball_b))] * 1e-3
        assert abs(r.impulse_n_Ns - true_ns) < 3 * r.impulse_n_sigma_Ns + 0.02 * true_ns, (r.ball_a, r.ball_b)


@pytest.mark.slow
def test_triangle_break_finds_every_touching_pair_and_no_other():
    """Cue ball into a three-ball triangle (apex + two behind, 0.2 mm gaps) at 60 fps, pymunk truth:
    the apex passes momentum to both back balls in the same frame; the back balls, side by side,
    never push on each other, so that pair must not be reported."""
    gap = 0.2
    d = 2 * R + gap
    apex = np.array([1500.0, 600.0])
    u = np.array([np.cos(np.radians(7)), np.sin(np.radians(7))])
    v = np.array([-u[1], u[0]])
    balls = {
        "cue": (tuple(apex - 500 * u + np.array([0.0, 2.0])), tuple(3000.0 * u)),
        "yellow": (tuple(apex), (0.0, 0.0)),
        "red": (tuple(apex + d * np.sqrt(3) / 2 * u + d / 2 * v), (0.0, 0.0)),
        "blue": (tuple(apex + d * np.sqrt(3) / 2 * u - d / 2 * v), (0.0, 0.0)),
    }
    times, pos, imp = run_pymunk(balls, 0.95, 60.0, 0.5)
    truth = {k for k, val in imp.items() if val / M > 30.0}
    assert frozenset(("red", "blue")) not in truth and len(truth) == 3
    out = analyse(times, pos, 60.0, 0.4, 5)
    c = out.contacts
    assert pairs_of(c) == truth, c[["t_s", "ball_a", "ball_b", "e"]]
    assert c["simultaneous"].astype(bool).all() and c["group"].nunique() == 1
    g = c.iloc[0]
    assert g.group_momentum_residual_pct < 3 * g.group_momentum_residual_sigma_pct + 6.0  # as above
    # kinetic energy: pymunk's elasticity loses some; the measured loss lies within [0, 1)
    assert 0.0 <= g.group_ke_loss_frac + 3 * g.group_ke_loss_sigma_frac and g.group_ke_loss_frac < 1.0


@pytest.mark.slow
@pytest.mark.parametrize("fps,approach", [(60.0, 83.0), (60.0, 150.0), (240.0, 83.0)])
def test_slow_touch_is_found(fps, approach):
    """A slow touch (83 mm/s approach, the slowest in our drill clip) between two balls, pymunk
    truth; position noise 0.4 mm."""
    balls = {
        "cue": ((1000.0, 500.0), (approach, 0.0)),
        "red": ((1000.0 + 2 * R + 0.5 * approach, 500.0 + 20.0), (0.0, 0.0)),  # touch after ~0.5 s
    }
    times, pos, imp = run_pymunk(balls, 0.95, fps, 1.4)
    assert frozenset(("cue", "red")) in imp
    out = analyse(times, pos, fps, 0.4, 21)
    assert pairs_of(out.contacts) == {frozenset(("cue", "red"))}, out.contacts[["t_s", "ball_a", "ball_b"]]


@pytest.mark.slow
@pytest.mark.parametrize("fps", [60.0, 240.0])
@pytest.mark.parametrize("gap_mm", [0.5, 1.5, 3.0])
def test_grazing_pass_is_not_a_contact(fps, gap_mm):
    """A ball passing a resting ball at a small gap without touching (straight-line motion, closed
    form): no contact may be reported, however close it comes."""
    t = np.arange(0.0, 1.2, 1.0 / fps) + 0.3 / fps
    x0, y0 = 800.0, 500.0
    still = np.array([1100.0, y0 + 2 * R + gap_mm])
    moving = np.column_stack([x0 + 500.0 * t, np.full_like(t, y0)])  # 500 mm/s along +x
    out = analyse(t, {"cue": moving, "red": np.tile(still, (len(t), 1))}, fps, 0.4, 31)
    assert pairs_of(out.contacts) == set(), out.contacts[["t_s", "ball_a", "ball_b"]]


@pytest.mark.slow
def test_touch_at_noise_level_is_beyond_reach():
    """A 1 mm/s touch moves the struck ball ~0.02 mm per frame at 60 fps, far below 0.3 mm noise:
    no evidence, so no contact is reported (the documented floor: max(dv_min_mm_s, dv_z standard
    errors) of the change-point fit). pymunk truth says they did touch."""
    balls = {"cue": ((1000.0, 500.0), (1.0, 0.0)), "red": ((1000.0 + 2 * R + 0.2, 500.0), (0.0, 0.0))}
    times, pos, imp = run_pymunk(balls, 0.95, 60.0, 1.0)
    assert frozenset(("cue", "red")) in imp
    out = analyse(times, pos, 60.0, 0.3, 41)
    assert pairs_of(out.contacts) == set()


def test_link_impulses_with_throw_on_a_ball_that_passes_the_push_on():
    """Momentum conservation with ball-ball friction (closed form): ball 1 takes a push from ball
    0 and hands it on to ball 2 round an 8 degree bend, so its own velocity change is small while
    both of its links carry throw, a tangential impulse T_l = mu J_l (mu = 0.06, inside the
    published 0.03-0.08, Physics of Pool FAQ). The solve must give back J and explain the data
    (reduced chi^2 near 1), not blame the throw on noise of the ball's small velocity change."""
    n01 = np.array([1.0, 0.0])
    n12 = np.array([np.cos(np.radians(8)), np.sin(np.radians(8))])
    J = np.array([1500.0, 1450.0])
    links = [(0, 1), (1, 2)]
    N = np.array([n01, n12])
    dv = np.zeros((3, 2))
    for (a, b), j, n, side in zip(links, J, N, (1.0, -1.0)):
        imp = j * n + side * 0.06 * j * np.array([-n[1], n[0]])  # throws of opposite senses
        dv[a] -= imp
        dv[b] += imp
    sig = 5.0
    rng = np.random.default_rng(8)
    r = solve_links(dv + rng.normal(0, sig, dv.shape), np.tile(np.eye(2) * sig**2, (3, 1, 1)), links, N)
    # tolerance: 4 standard errors (noise 5 mm/s per component) of each link
    assert np.all(np.abs(r.J - J) < 4 * r.J_sigma), (r.J, r.J_sigma)
    assert np.all(r.J > 5 * r.J_sigma)  # both links significant: the contact finder keeps them
    # chi^2 / dof of Gaussian noise with ~2 dof beyond 4 is a < 2 % event (scipy.stats.chi2)
    assert r.chi2_red < 4.0, r.chi2_red


@pytest.mark.slow
@pytest.mark.parametrize("fps", [120.0, 240.0])
def test_resting_neighbour_beside_the_struck_ball_is_not_a_contact(fps):
    """Cue ball straight into a yellow ball that rests 0.3 mm beside a red ball, their line of
    centres square to the shot (pymunk truth): the push passes the red ball by. At high frame
    rates the two resting balls sit at the touching distance for many frames before the hit;
    no contact between them may be reported, and the real one must be found at its time."""
    gap = 0.3
    balls = {
        "cue": ((900.0, 500.0), (2200.0, 0.0)),
        "yellow": ((1300.0, 500.0), (0.0, 0.0)),
        "red": ((1300.0, 500.0 + 2 * R + gap), (0.0, 0.0)),
    }
    times, pos, imp = run_pymunk(balls, 0.95, fps, 0.5)
    truth = {k for k, v in imp.items() if v / M > 30.0}  # >= 30 mm/s change (as the e2e rule)
    assert truth == {frozenset(("cue", "yellow"))}
    t_hit = (1300.0 - 2 * R - 900.0) / 2200.0  # straight-line motion until the touch (closed form)
    out = analyse(times, pos, fps, 0.4, 17)
    c = out.contacts
    assert pairs_of(c) == truth, c[["t_s", "ball_a", "ball_b"]]
    assert abs(c.iloc[0].t_s - t_hit) < 1.0 / fps
