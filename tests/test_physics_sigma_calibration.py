"""e's reported sigma is calibrated: neither too small (a false alarm for a ball maker) nor too wide
(a real difference between two batches of balls hidden).

Closed-form truth, no simulator of ours. Head-on shots between two balls of equal mass with no
ball-ball friction: along the line of centres the object ball leaves at (1 + e) / 2 v and the cue
ball at (1 - e) / 2 v (conservation of momentum and Newton's definition of the coefficient of
restitution for direct central impact of equal spheres; W. Goldsmith, Impact, 1960, ch. 1, from memory).
A ball that leaves a contact without spin slides, decelerating at mu_s g, until it rolls at 5/7 of
its speed, at t = 2 v0 / (7 mu_s g); it then decelerates at mu_r g (REFERENCES.md, slide to roll).

* stun shot: the cue ball arrives sliding with its backspin just used up (no spin at the
  contact; before it, constant deceleration mu_s g), so both balls leave without spin;
* follow shot: the cue ball arrives rolling; it keeps its rolling spin, which pulls it forward
  until (5 v + 2 R omega) / 7.

With Gaussian position noise of known sigma and a correct sigma, |err| / sigma is half-normal:
median 0.674, 95.4 % within 2 sigma (standard normal table). With 40 draws (seeds fixed) the
sample median of a calibrated sigma is within about +-0.25 of 0.674 (its standard error is
0.79 / sqrt(n) = 0.12), while a sigma 2x too wide gives ~0.34 and 2x too narrow ~1.35.

The stun shot: the cue ball leaves at 15-60 mm/s and its short slide lies between two samples.
Before session 14's profile (physics.slide_profile), draws 0-19 at 120 fps: 15 of 19 reported e
within 2 sigma, one left empty; draws 3, 8 and 10 were 3.3-3.5 sigma low, each fitted with a
~30 ms slide from 67-88 mm/s where the truth slides 3-6 ms from 21-45 mm/s (the cue ball slides
INTO the contact, so nothing but the few samples after it fixes that slide's end). e's sigma is
now widened by a profile over that slide's end time: draws 0-19 (used while building it) 19 of
20 within 2 sigma, median 0.57; draws 20-59 (fresh, chosen before looking) 0.925 -> 0.975 within
2 sigma, median 0.82 -> 0.47 (somewhat wide, inside BAND). Session 15: where the slide lies
between two samples the profile is flat to fourth order at its best point and e's linearised
sigma there is far too WIDE (draw 13: 0.87, e left empty); the profile now replaces the slide
end's linearised part instead of only widening, and covers slides in both directions.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import table_preset
from physics.pipeline import analyze_tracks, tables_from_positions

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
G = 9806.65  # mm/s^2, standard gravity
MU_S, MU_R = 0.2, 0.01  # cloth sliding / rolling, within the published ranges (REFERENCES.md)
T_C = 0.35  # s, contact time
DURATION = 0.9  # s
NOISE_MM = 0.3  # per axis, a good 720p camera (design choice)
#: Band for the median |err| / sigma: 0.674 for a calibrated Gaussian sigma (half-normal median);
#: a sigma 2x too wide gives 0.34, 2x too narrow 1.35. Band edges about 2 standard errors of the
#: median of 40 draws beyond 0.674 and well inside both failures.
BAND = (0.45, 0.95)


def _slide_then_roll(tau: np.ndarray, v0: float, a_slide: float, t_slide: float) -> np.ndarray:
    """1-D displacement (mm): constant acceleration ``a_slide`` (mm/s^2) until ``t_slide`` (s),
    then rolling deceleration mu_r g until the ball stops."""
    ts = np.minimum(tau, t_slide)
    x = v0 * ts + 0.5 * a_slide * ts**2
    vr = v0 + a_slide * t_slide
    tr = np.clip(tau - t_slide, 0.0, vr / (MU_R * G))
    return x + vr * tr - 0.5 * MU_R * G * tr**2


def head_on(kind: str, v_c: float, e: float, fps: float, phase: float):
    """Times (s) and centres (mm) of cue and object ball for a head-on ``kind`` ('stun' or
    'follow') shot along +x meeting the resting object ball at T_C with approach ``v_c`` mm/s."""
    t = np.arange(0.0, DURATION, 1.0 / fps) + phase / fps
    x_obj = 1100.0
    a_in = MU_S * G if kind == "stun" else MU_R * G  # deceleration before the contact
    v_start = v_c + a_in * T_C
    x_start = x_obj - 2 * R - (v_start * T_C - 0.5 * a_in * T_C**2)
    va, vb = (1 - e) / 2 * v_c, (1 + e) / 2 * v_c
    tau = np.clip(t - T_C, 0.0, None)
    before = t < T_C
    if kind == "stun":  # no spin: slides forward to 5/7 of its speed
        after_a = _slide_then_roll(tau, va, -MU_S * G, 2 * va / (7 * MU_S * G))
    else:  # keeps its rolling spin v_c / R: pulled forward to (5 va + 2 v_c) / 7
        after_a = _slide_then_roll(tau, va, MU_S * G, 2 * (v_c - va) / (7 * MU_S * G))
    xa = np.where(before, x_start + v_start * t - 0.5 * a_in * t**2, x_obj - 2 * R + after_a)
    xb = np.where(before, x_obj, x_obj + _slide_then_roll(tau, vb, -MU_S * G, 2 * vb / (7 * MU_S * G)))
    y = np.full_like(t, 640.0)
    return t, {"cue": np.column_stack([xa, y]), "red": np.column_stack([xb, y])}


def z_scores(kind: str, fps: float, n: int, seed0: int = 0) -> np.ndarray:
    """|e - e_true| / e_sigma over ``n`` noise draws (approach 500-1500 mm/s, e 0.90-0.97)."""
    z = []
    for seed in range(seed0, seed0 + n):
        rng = np.random.default_rng([seed, int(fps)])
        v_c, e = rng.uniform(500.0, 1500.0), rng.uniform(0.90, 0.97)
        t, pos = head_on(kind, v_c, e, fps, rng.uniform())
        tracks, det = tables_from_positions(t, pos, NOISE_MM, rng, fps)
        c = analyze_tracks(tracks, det, TABLE, R, M, fps).contacts
        c = c[c.kind == "ball-ball"]
        assert len(c) == 1, f"{kind} seed {seed}: {len(c)} ball-ball contacts"
        row = c.iloc[0]
        assert abs(float(row.t_s) - T_C) < 0.5 / fps, (kind, seed, float(row.t_s))
        z.append(abs(float(row.e) - e) / float(row.e_sigma))  # NaN where e was left empty
    return np.array(z)


@pytest.mark.slow
def test_e_sigma_calibrated_follow_shot():
    """Follow shot, 40 draws at 120 fps: median |err|/sigma within BAND and >= 85 % within 2 sigma.
    (Draws 8, 10 and 32 are 2.5-2.9 sigma off; a sigma 2x too wide would give a median near 0.3.)"""
    z = z_scores("follow", 120.0, 40)
    med = float(np.median(z))
    assert BAND[0] <= med <= BAND[1], f"median |err|/sigma {med:.2f} (calibrated 0.67)"
    assert np.mean(z < 2.0) >= 0.85, f"{np.mean(z < 2.0):.2f} within 2 sigma"


@pytest.mark.slow
def test_e_sigma_calibrated_stun_shot_reported():
    """Stun shot, draws 20-59 at 120 fps (not used while building physics.slide_profile): of the
    reported e, >= 85 % within 2 sigma, none beyond 3 sigma and the median |err|/sigma within BAND.
    Measured 0.975, worst 2.36 sigma, median 0.47 (before the profile 0.925, worst 5.07 sigma on
    draw 53, median 0.82); with session 15's profile replacing the linearised t_roll part 1.00,
    worst 1.90, median 0.54. With a calibrated Gaussian sigma all 40 lie within 3 sigma with
    probability 0.9973^40 = 0.90 (standard normal table)."""
    z = z_scores("stun", 120.0, 40, seed0=20)
    z = z[np.isfinite(z)]
    assert len(z) >= 36, f"e left empty on {40 - len(z)} of 40 draws"
    # truth: closed-form head-on impact (module docstring); 2 and 3 sigma: standard normal table
    assert np.mean(z < 2.0) >= 0.85, f"{np.mean(z < 2.0):.2f} within 2 sigma"
    assert np.max(z) < 3.0, f"worst {np.max(z):.2f} sigma"
    med = float(np.median(z))  # half-normal median 0.674 (standard normal table)
    assert BAND[0] <= med <= BAND[1], f"median |err|/sigma {med:.2f} (calibrated 0.67)"


@pytest.mark.slow
def test_e_sigma_calibrated_stun_shot():
    """Stun shot, 20 draws at 120 fps: every e reported, >= 85 % within 2 sigma, median in BAND.
    Draw 13 (cue ball leaving at 35 mm/s, sliding 5 ms between two samples) was left empty with
    e_sigma 0.87 (> 0.5): e's linearised sigma followed the curvature of a profile flat to fourth
    order in the slide's end. With the profile replacing that part (physics.slide_profile) it is
    reported, 0.67 sigma off; draws 0-19 were used while building that change (tuning)."""
    z = z_scores("stun", 120.0, 20)
    assert np.all(np.isfinite(z)), f"{int(np.sum(~np.isfinite(z)))} of {len(z)} draws with e left empty"
    # truth: closed-form head-on impact (module docstring); 2 sigma, median: standard normal table
    assert np.mean(z < 2.0) >= 0.85, f"{np.mean(z < 2.0):.2f} within 2 sigma"
    assert BAND[0] <= float(np.median(z)) <= BAND[1], f"median |err|/sigma {float(np.median(z)):.2f}"
