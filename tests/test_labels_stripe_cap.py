"""A stripe ball seen cap-up is named a stripe, not 'white' (tracking/labels.py).

Images: closed-form Lambertian spheres seen straight down (as tests/lambert_ball.py),
textured with a stripe band |n . a| < 0.55 around the ball's axis a (band half-height
0.55 R, common practice) on a white ball, then sRGB-encoded (IEC 61966-2-1). Colour
summaries come from the detector's own colour_summary. Ball-set facts (common
practice): a pool set has one white ball, the cue; a carom set has two white balls.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from lambert_ball import encode_frame
from tracking.detect import colour_summary
from tracking.labels import label_tracks

CLOTH = np.array([0.02, 0.16, 0.03])  # BGR linear, green cloth
WHITE = np.array([0.80, 0.82, 0.83])
BLUE_B = np.array([0.55, 0.05, 0.02])     # BGR linear: a blue band
RED_B = np.array([0.02, 0.02, 0.60])
YELLOW = np.array([0.02, 0.45, 0.80])


def _ball(axis_tilt_deg: float, band_bgr, base_bgr=WHITE, r: float = 14.0, ss: int = 6) -> np.ndarray:
    """Linear BGR image (41x41) of a ball whose stripe axis is tilted by axis_tilt_deg from vertical."""
    n_px = 41
    c = (n_px - 1) / 2
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:n_px, 0:n_px]
    dx = (xs[..., None, None] + sub[None, None, None, :] - c) / r
    dy = (ys[..., None, None] + sub[None, None, :, None] - c) / r
    q2 = dx * dx + dy * dy
    nz = np.sqrt(np.clip(1.0 - q2, 0.0, 1.0))
    t = math.radians(axis_tilt_deg)
    a = np.array([math.sin(t), 0.0, math.cos(t)])   # stripe axis (x right, y down, z to camera)
    band = np.abs(dx * a[0] + dy * a[1] + nz * a[2]) < 0.55
    lv = np.array([0.2, -0.3, 1.0]) / np.linalg.norm([0.2, -0.3, 1.0])
    shade = 0.3 + 0.7 * np.clip(dx * lv[0] + dy * lv[1] + nz * lv[2], 0.0, None)
    img = np.empty((n_px, n_px, 3))
    for ch in range(3):
        surf = np.where(band, band_bgr[ch], base_bgr[ch]) * shade
        img[..., ch] = np.where(q2 < 1.0, surf, CLOTH[ch]).mean(axis=(2, 3))
    return img


def _track(tid: int, tilts, band_bgr, base_bgr=WHITE) -> list[dict]:
    rows = []
    for k, tilt in enumerate(tilts):
        frame, _ = encode_frame(_ball(tilt, band_bgr, base_bgr), CLOTH, blur_px=0.7, noise_dn=1.0, seed=tid * 100 + k)
        rows.append(dict(track=tid, **colour_summary(frame, 20.0, 20.0, 14.0)))
    return rows


def _rack(stripe_tilts) -> pd.DataFrame:
    rows = _track(0, [0.0] * 12, WHITE)                       # the cue (all white)
    rows += _track(1, stripe_tilts, BLUE_B)                    # the stripe under test
    rows += _track(2, list(np.linspace(0.0, 165.0, 12)), RED_B)  # a rolling red stripe
    rows += _track(3, [0.0] * 12, YELLOW, base_bgr=YELLOW)     # a yellow solid (no number drawn)
    return pd.DataFrame(rows)


def test_cap_up_stripe_alone_looks_white_inside_the_sampled_disc():
    # geometry check first: from above the band lies beyond sqrt(1 - 0.55^2) = 0.835 R, outside
    # the 0.75 R disc the colour is sampled from, so this ball is all white to the colour summary
    frame, _ = encode_frame(_ball(0.0, BLUE_B), CLOTH, blur_px=0.7, noise_dn=1.0)
    s = colour_summary(frame, 20.0, 20.0, 14.0)
    assert s["white_frac"] > 0.9


def test_resting_cap_up_stripe_in_a_pool_set_is_a_stripe():
    names, balls = label_tracks(_rack([0.0] * 12))
    assert names[0] == "cue"
    assert names[1] == "stripe", names      # colour never seen: a stripe of unknown colour, not "white"
    assert names[2] == "red-stripe" and names[3] == "yellow"
    assert balls.set_index("ball").loc["stripe", "pattern"] == "stripe"


def test_rolling_stripe_mostly_cap_up_gets_its_colour():
    tilts = [0.0, 5.0, 10.0, 0.0, 80.0, 90.0, 0.0, 3.0, 0.0, 85.0, 0.0, 0.0]   # band in view in 3 of 12 frames
    names, _ = label_tracks(_rack(tilts))
    assert names[1] == "blue-stripe", names


def test_known_pool_table_names_the_second_white_a_stripe_even_without_other_stripes():
    det = _rack([0.0] * 12)
    det = det[det.track != 2]
    names, _ = label_tracks(det, table="pool-9ft")
    assert names[1] == "stripe"
    names, _ = label_tracks(det)   # table unknown, no stripe in sight: may be a carom white
    assert names[1] == "white"


def test_carom_set_keeps_two_whites_and_a_red():
    rows = _track(0, [0.0] * 12, WHITE) + _track(1, [0.0] * 12, WHITE) + _track(2, [0.0] * 12, RED_B, base_bgr=RED_B)
    names, _ = label_tracks(pd.DataFrame(rows), table="carom")
    assert sorted(names.values()) == ["cue", "red", "white"]
