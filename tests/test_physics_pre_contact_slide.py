"""Cushion e's sigma when the ball reaches the cushion still sliding (physics.slide_profile, pre-contact).

Closed-form truth, no simulator of ours. A ball struck straight at a long cushion (along -y, no side
spin) slides the whole way in: under Coulomb friction with the cloth its contact-point slip keeps
its direction, so it decelerates at mu_s g and the slip shrinks at 7/2 mu_s g, rolling once the slip
is gone (uniform sphere, I = 2/5 m R^2; standard rigid-ball result, from memory). It meets the
cushion at T_C with speed v_c and slip u_c > 0 left, and leaves along the normal at e v_c
(Newton's restitution, the cushion frictionless here), its spin unchanged; it then slides until its
new slip is gone (2 |u| / (7 mu_s g)) and rolls at mu_r g.

Over the ~85 ms before the contact a fit can put a roll-over a few frames before it about as well
(dchi2 ~3 at 120 fps), and the roll phase keeps the velocity at the contact where the slide takes
mu_s g dt off it per frame. With that slide end taken as known the sigma was too narrow (bench seed
1515, shots 27/32 at 120 fps: 5.5 sigma). With Gaussian noise of known sigma and a correct e sigma,
|err| / sigma is half-normal: 95.4 % within 2 sigma, median 0.674 (standard normal table).
Draws (seeds 0-23) were chosen before the first run; run once before the change, once after:
without the pre-contact profile 19 of 24 within 2 sigma (worst 8.3 sigma, median 0.54), with it
24 of 24 (worst 1.7, median 0.67).
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import table_preset
from physics.cushion_geometry import contact_distance_mm
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.settings import PhysicsSettings

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
G = 9806.65  # mm/s^2, standard gravity
MU_S, MU_R = 0.2, 0.01  # cloth sliding / rolling, inside the usual ranges (common practice, from memory)
NOISE_MM = 0.3  # per axis (design choice: a good 720p camera)
DURATION = 0.6  # s


def _slide_then_roll(tau: np.ndarray, v0: float, a_slide: float, t_slide: float) -> np.ndarray:
    """1-D displacement (mm): constant acceleration ``a_slide`` (mm/s^2) until ``t_slide`` (s), then
    rolling deceleration mu_r g until the ball stops."""
    ts = np.minimum(tau, t_slide)
    x = v0 * ts + 0.5 * a_slide * ts**2
    vr = v0 + a_slide * t_slide
    tr = np.clip(tau - t_slide, 0.0, abs(vr) / (MU_R * G))
    return x + vr * tr - 0.5 * np.sign(vr) * MU_R * G * tr**2


def draw_into_cushion(v_c: float, u_c: float, e: float, t_c: float, fps: float, phase: float):
    """Times (s) and centres (mm) of a ball sliding straight into cushion y0, meeting it at ``t_c``
    with speed ``v_c`` and forward slip ``u_c`` (mm/s), leaving at ``e v_c``."""
    t = np.arange(0.0, DURATION, 1.0 / fps) + phase / fps
    a = MU_S * G
    y_c = contact_distance_mm(R, TABLE.cushion_nose_height_mm)  # centre's distance at first touch
    v_s = v_c + a * t_c  # speed at the strike (still sliding at t_c: u_c > 0)
    y_s = y_c + v_s * t_c - 0.5 * a * t_c**2
    before = t < t_c
    y_in = y_s - (v_s * t - 0.5 * a * t**2)
    # after: velocity +e v_c along +y, spin part (u_c - v_c) towards -y unchanged, so the slip
    # along +y is e v_c + (u_c - v_c); friction opposes it
    w0 = e * v_c
    slip = w0 + (u_c - v_c)
    tau = np.clip(t - t_c, 0.0, None)
    y_out = y_c + _slide_then_roll(tau, w0, -np.sign(slip) * a, 2.0 * abs(slip) / (7.0 * a))
    y = np.where(before, y_in, y_out)
    x = np.full_like(t, 1270.0)
    return t, {"cue": np.column_stack([x, y])}


def z_scores(n: int, fps: float, settings: PhysicsSettings) -> np.ndarray:
    z = []
    for k in range(n):
        rng = np.random.default_rng([k, int(fps), 16])
        v_c = rng.uniform(1500.0, 3000.0)
        u_c = v_c * rng.uniform(0.5, 2.0)
        e = rng.uniform(0.6, 0.9)
        t_c = rng.uniform(0.07, 0.10)
        t, pos = draw_into_cushion(v_c, u_c, e, t_c, fps, rng.uniform())
        tracks, det = tables_from_positions(t, pos, NOISE_MM, rng, fps)
        c = analyze_tracks(tracks, det, TABLE, R, M, fps, settings).contacts
        c = c[(c.kind == "ball-cushion") & (c.cushion == "y0") & ((c.t_s - t_c).abs() < 2.0 / fps)]
        assert len(c) == 1, f"draw {k}: {len(c)} contacts at the cushion"
        row = c.iloc[0]
        assert np.isfinite(row.e), f"draw {k}: e left empty"
        z.append(abs(float(row.e) - e) / float(row.e_sigma))
    return np.asarray(z)


@pytest.mark.slow
def test_cushion_e_sigma_when_sliding_into_the_cushion():
    """24 draws at 120 fps: within 2 sigma >= 0.83 (20 of 24; a calibrated sigma gives 95.4 %, and
    20 or more of 24 with probability ~0.99, binomial) and median |err| / sigma <= 0.95 (0.674
    calibrated; 0.95 about 2 standard errors of the median of 24 draws above it)."""
    z = z_scores(24, 120.0, PhysicsSettings())
    assert np.mean(z < 2.0) >= 20 / 24, np.round(np.sort(z), 2)
    assert np.median(z) <= 0.95, np.round(np.sort(z), 2)
    # not so wide that a real difference would hide: median above half the calibrated value
    assert np.median(z) >= 0.3, np.round(np.sort(z), 2)
