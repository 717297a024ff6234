"""Ball names under one lamp and dim exposure (tracking/appearance.py, tracking/labels.py).

Scenes are closed-form: cloth and balls are Lambertian (as tests/lambert_ball.py), lit by
one point lamp whose irradiance on the horizontal table follows the cosine-cubed law
E = E0 cos^3(theta) = E0 h^3 / (h^2 + d^2)^(3/2) (inverse-square law with Lambert's cosine
law; any lighting handbook, e.g. the IES Lighting Handbook's point-source formula), then
sRGB-encoded (IEC 61966-2-1). Colour summaries come from the detector's own colour_summary.
Ball-set facts (common practice): every pool set has one white ball, the cue; a stripe's
band has half-height 0.55 R, so from above a cap-up stripe shows it only beyond 0.83 R.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from lambert_ball import srgb_encode
from tracking.appearance import add_appearance, light_field, local_gain_grid
from tracking.detect import Background, colour_summary
from tracking.labels import label_tracks

CLOTH = np.array([0.10, 0.28, 0.04])   # BGR linear albedo: green-teal cloth
WHITE = np.array([0.80, 0.82, 0.83])
PURPLE = np.array([0.25, 0.02, 0.11])   # BGR linear: a purple solid
YELLOW = np.array([0.02, 0.45, 0.80])
RED_B = np.array([0.02, 0.02, 0.60])
R_PX = 12.0
H, W = 120, 400


def lamp(x: np.ndarray, y: np.ndarray, lamp_xy=(200.0, 60.0), h_px: float = 160.0) -> np.ndarray:
    """Cosine-cubed irradiance of a point lamp h_px above (lamp_xy), 1 right under it."""
    d2 = (x - lamp_xy[0]) ** 2 + (y - lamp_xy[1]) ** 2
    return h_px ** 3 / (h_px ** 2 + d2) ** 1.5


def _ball_disc(img: np.ndarray, cx: float, cy: float, albedo, band=None, tilt_deg: float = 0.0,
               irradiance: float = 1.0, ss: int = 4) -> None:
    """Paint a Lambertian ball (lamp overhead, ambient 0.25) into the linear image, in place."""
    n = int(R_PX) + 2
    ys, xs = np.mgrid[int(cy) - n:int(cy) + n + 1, int(cx) - n:int(cx) + n + 1]
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    dx = (xs[..., None, None] + sub[None, None, None, :] - cx) / R_PX
    dy = (ys[..., None, None] + sub[None, None, :, None] - cy) / R_PX
    q2 = dx * dx + dy * dy
    nz = np.sqrt(np.clip(1.0 - q2, 0.0, 1.0))
    shade = 0.25 + 0.75 * nz
    t = math.radians(tilt_deg)
    in_band = np.abs(dx * math.sin(t) + nz * math.cos(t)) < 0.55 if band is not None else np.zeros_like(q2, bool)
    for c in range(3):
        surf = np.where(in_band, band[c] if band is not None else 0.0, albedo[c]) * shade * irradiance
        cov = (q2 < 1.0).mean(axis=(2, 3))
        val = np.where(q2 < 1.0, surf, 0.0).sum(axis=(2, 3)) / (ss * ss)
        img[ys, xs, c] = img[ys, xs, c] * (1 - cov) + val


def scene(balls, exposure: float = 1.0, seed: int = 0):
    """(frame uint8, background Background, detections) of balls [(x, y, albedo, band, tilt)] under the lamp."""
    ys, xs = np.mgrid[0:H, 0:W].astype(float)
    e = lamp(xs, ys)
    lin = CLOTH[None, None, :] * e[..., None]
    cloth_lin = lin.copy()
    for x, y, alb, band, tilt in balls:
        _ball_disc(lin, x, y, alb, band, tilt, irradiance=float(lamp(np.array(x), np.array(y))))
    rng = np.random.default_rng(seed)
    frame = np.clip(np.round(srgb_encode(lin * exposure) + rng.normal(0, 1.0, lin.shape)), 0, 255).astype(np.uint8)
    bg_img = srgb_encode(cloth_lin * exposure).astype(np.float32)
    mask = np.ones((H, W), np.uint8)
    bg = Background(image=bg_img, median=bg_img.astype(np.uint8), mask=mask, roi=(0, 0, W, H), noise_dn=1.0,
                    threshold_dn=3.0, radius_px=R_PX)
    det = pd.DataFrame({"x_px": [b[0] for b in balls], "y_px": [b[1] for b in balls]})
    return frame, bg, det


def test_local_gain_is_the_inverse_of_the_lamp_falloff_in_encoded_values():
    # the gain is measured on encoded (sRGB) cloth levels; sRGB is close to a 2.4-power curve above its
    # linear toe, so the gain should follow (E_ref / E)^(1/2.4) within a few per cent (IEC 61966-2-1)
    ys, xs = np.mgrid[0:H, 0:W].astype(float)
    e = lamp(xs, ys)
    cloth = srgb_encode(CLOTH[None, None, :] * e[..., None]).astype(np.float32)
    gain, ref = local_gain_grid(cloth, np.ones((H, W), np.uint8), 20)
    cx = (np.arange(gain.shape[1]) + 0.5) * 20
    e_row = lamp(cx, np.full_like(cx, 70.0))
    expect = np.clip((e_row.max() / e_row) ** (1 / 2.4), 1.0, None)
    # the reference is the 95th percentile cell, a little under the peak
    rel = gain[3] / expect
    assert np.all(np.abs(rel / np.median(rel[:3]) - 1) < 0.08), (gain[3], expect)
    assert gain[3, 0] > 1.4 and gain[3, gain.shape[1] // 2] == pytest.approx(1.0, abs=0.05)


def test_white_ball_at_the_dim_end_reads_white_after_the_light_is_taken_out():
    balls = [(30.0, 60.0, WHITE, None, 0.0), (200.0, 60.0, YELLOW, None, 0.0)]
    frame, bg, det = scene(balls, exposure=0.8)
    raw = colour_summary(frame, 30.0, 60.0, R_PX)
    assert raw["white_frac"] < 0.3          # the lamp's fall-off alone hides the cue's white
    light = light_field(bg, [(frame, det)])
    out = add_appearance(det, frame, bg, light)
    assert out.loc[0, "white_frac_n"] > 0.8
    assert out.loc[0, "light_gain"] > 1.4
    assert out.loc[0, "rim_col_frac"] < 0.05  # no band on a white ball
    assert out.loc[1, "white_frac_n"] < 0.2   # the yellow stays coloured


@pytest.mark.parametrize("exposure", [0.15, 0.2])
def test_dim_exposure_purple_is_not_black_and_white_is_white(exposure):
    balls = [(200.0, 60.0, WHITE, None, 0.0), (240.0, 60.0, PURPLE, None, 0.0), (160.0, 60.0, YELLOW, None, 0.0)]
    frame, bg, det = scene(balls, exposure=exposure)
    raw = [colour_summary(frame, b[0], b[1], R_PX) for b in balls]
    assert raw[0]["white_frac"] < 0.5 and raw[1]["dark_frac"] > 0.45   # the fixed thresholds fail here
    light = light_field(bg, [(frame, det)])
    assert 1.3 < light.global_gain <= 3.0
    out = add_appearance(det, frame, bg, light)
    assert out.loc[0, "white_frac_n"] > 0.8
    assert out.loc[1, "dark_frac_n"] < 0.45
    rows = []
    for k in range(3):
        rows.append(out.iloc[[k]].assign(track=k))
    names, _ = label_tracks(pd.concat(rows * 6, ignore_index=True).assign(streak_px=0.0, radius_expected_px=R_PX),
                            table="pool-9ft")
    assert names == {0: "cue", 1: "purple", 2: "yellow"}


def test_cap_up_stripe_under_the_lamp_is_not_taken_for_the_cue_in_the_dim():
    # the stripe's white cap sits under the lamp and is whiter in raw pixels than the real cue at the end
    balls = [(200.0, 60.0, WHITE, RED_B, 8.0), (40.0, 60.0, WHITE, None, 0.0), (260.0, 60.0, YELLOW, None, 0.0)]
    frames = [scene(balls, exposure=0.9, seed=s) for s in range(6)]
    raw = [colour_summary(frames[0][0], b[0], b[1], R_PX)["white_frac"] for b in balls[:2]]
    assert raw[0] > raw[1]
    light = light_field(frames[0][1], [(frames[0][0], frames[0][2])])
    rows = []
    for f, bg, det in frames:
        out = add_appearance(det, f, bg, light)
        rows.append(out.assign(track=[0, 1, 2], streak_px=0.0, radius_expected_px=R_PX))
    det = pd.concat(rows, ignore_index=True)
    assert det[det.track == 0].rim_col_frac.median() > 0.3   # the band shows at the rim
    assert det[det.track == 1].rim_col_frac.median() < 0.05
    names, balls_df = label_tracks(det, table="pool-9ft")
    assert names[1] == "cue"
    assert names[0] == "red-stripe"
    assert balls_df.set_index("ball").loc["red-stripe", "pattern"] == "stripe"


def test_without_light_columns_labels_use_the_detector_colours():
    # old detection tables (no _n columns) are named exactly as before
    balls = [(200.0, 60.0, WHITE, None, 0.0), (240.0, 60.0, YELLOW, None, 0.0)]
    frame, _, _ = scene(balls)
    rows = [dict(track=k, **colour_summary(frame, b[0], b[1], R_PX)) for k, b in enumerate(balls)] * 5
    names, _ = label_tracks(pd.DataFrame(rows))
    assert names == {0: "cue", 1: "yellow"}


def test_band_facing_stripe_is_a_stripe_by_its_white_rim_and_solids_are_not():
    # band towards the camera (axis 75-90 deg from vertical): the inner disc is mostly band, but the
    # caps reach the rim on both sides of the axis; a solid's rim is all its colour
    rows = []
    for k, tilt in enumerate([75.0, 90.0, 80.0, 85.0, 90.0, 75.0]):
        balls = [(140.0, 60.0, WHITE, RED_B, tilt), (200.0, 60.0, WHITE, None, 0.0), (260.0, 60.0, YELLOW, None, 0.0)]
        f, bg, det = scene(balls, seed=k)
        out = add_appearance(det, f, bg, light_field(bg, [(f, det)]))
        rows.append(out.assign(track=[0, 1, 2], streak_px=0.0, radius_expected_px=R_PX))
    det = pd.concat(rows, ignore_index=True)
    assert det[det.track == 0].white_frac_n.median() < 0.3    # the inner-disc rule alone misses it
    assert det[det.track == 0].rim_white_frac.median() > 0.4
    assert det[det.track == 2].rim_white_frac.median() < 0.1
    names, _ = label_tracks(det, table="pool-9ft")
    assert names == {0: "red-stripe", 1: "cue", 2: "yellow"}


def test_carom_whites_the_struck_ball_is_the_cue_whichever_is_whiter():
    # common practice: the cue ball is the one struck, the first ball to move
    frame, bg, det = scene([(100.0, 60.0, WHITE, None, 0.0), (300.0, 60.0, WHITE * 0.97, None, 0.0),
                            (200.0, 60.0, RED_B, None, 0.0)])
    out = add_appearance(det, frame, bg, light_field(bg, [(frame, det)]))
    rows = []
    for k in range(12):
        moved = 25.0 * max(0, k - 3)      # ball 1 (the slightly greyer one) is struck at frame 4
        for j in range(3):
            rows.append({**out.iloc[j].to_dict(), "track": j, "t_s": k / 60.0, "x_mm": 100.0 * j + (moved if j == 1 else 0.0),
                         "y_mm": 500.0, "streak_px": 0.0, "radius_expected_px": R_PX})
    names, _ = label_tracks(pd.DataFrame(rows), table="carom")
    assert names == {0: "white", 1: "cue", 2: "red"}


def _lin_bgr(rgb) -> np.ndarray:
    """Linear BGR albedo of an sRGB colour (IEC 61966-2-1 decoding)."""
    c = np.asarray(rgb, float)[::-1] / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _pair_names(second_rgb, table: str) -> dict[int, str]:
    # a bright red solid and a second red-hue solid (a lighter-than-usual maroon, or another red),
    # with the cue and a yellow; several frames so the medians are taken over noise
    balls = [(200.0, 60.0, WHITE, None, 0.0), (140.0, 60.0, _lin_bgr((235, 40, 40)), None, 0.0),
             (260.0, 60.0, _lin_bgr(second_rgb), None, 0.0), (330.0, 60.0, YELLOW, None, 0.0)]
    rows = []
    for s in range(6):
        f, bg, det = scene(balls, seed=s)
        out = add_appearance(det, f, bg, light_field(bg, [(f, det)]))
        rows.append(out.assign(track=[0, 1, 2, 3], streak_px=0.0, radius_expected_px=R_PX))
    names, _ = label_tracks(pd.concat(rows, ignore_index=True), table=table)
    return names


def test_a_pool_sets_red_and_maroon_pair_is_split_even_when_the_maroon_reads_light():
    # a pool set holds one red and one maroon solid (common practice). A maroon of sRGB (170, 30, 40)
    # reads about 0.67 in value: over the absolute split (0.6), so alone it would be called red.
    names = _pair_names((170, 30, 40), "pool-9ft")
    assert names == {0: "cue", 1: "red", 2: "maroon", 3: "yellow"}


def test_two_reds_of_one_colour_stay_red_and_snooker_reds_are_never_split():
    # same colour: values within noise, no maroon; snooker has fifteen reds and no maroon (common practice)
    assert _pair_names((235, 40, 40), "pool-9ft") == {0: "cue", 1: "red", 2: "red-2", 3: "yellow"}
    assert _pair_names((170, 30, 40), "snooker")[2] == "red-2"
