"""Tracking: Kalman model, RTS smoothing, contact splits, rest averaging, linking, labels, track_clip.

Outside references: the discrete white-noise-acceleration model (Bar-Shalom,
Li & Kirubarajan 2001, sec. 6.3.2) written out in closed form;
scipy.stats.chi2 / kstest for filter consistency; the head-on equal-mass
collision closed form; the D1/D2 footage truth (skipped when absent).
"""
from __future__ import annotations

import json
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tracking.assign import Linker
from tracking.kalman import cv_transition, smooth_segment, split_segments
from tracking.labels import colour_name, label_tracks
from tracking.pipeline import rest_runs, smooth_ball
from tracking.settings import TrackingSettings

FOOTAGE = Path(__file__).resolve().parents[2] / "shared" / "footage"


def test_cv_transition_closed_form():
    """F and Q of the white-noise-acceleration model, Bar-Shalom et al. (2001) eq. 6.3.2-4."""
    dt, q = 0.01, 2000.0
    F, Q = cv_transition(dt, q)
    assert np.allclose(F @ [1, 2, 3, 4], [1 + 3 * dt, 2 + 4 * dt, 3, 4])
    expect = q ** 2 * np.array([[dt ** 4 / 4, dt ** 3 / 2], [dt ** 3 / 2, dt ** 2]])
    assert np.allclose(Q[np.ix_([0, 2], [0, 2])], expect)
    assert np.allclose(Q[np.ix_([1, 3], [1, 3])], expect)
    assert Q[0, 1] == 0 and Q[0, 3] == 0


def test_rts_smoothing_on_a_decelerating_roll():
    """A straight decelerating roll (sigma 0.5 mm, 120 fps): smoothing beats the raw 0.71 mm RMS,
    the smoothed velocity in the middle is within 4 of its stated sigmas of the truth, and the
    filter is not overconfident (mean NIS < 2, the chi-square(2) mean).
    """
    rng = np.random.default_rng(4)
    fps, n = 120.0, 240
    t = np.arange(n) / fps
    a = -100.0  # rolling resistance ~0.01 g (Physics of Pool FAQ range)
    v0 = np.array([800.0, -300.0])
    u = v0 / np.linalg.norm(v0)
    s = np.linalg.norm(v0) * t + 0.5 * a * t * t
    truth = np.array([500.0, 600.0]) + s[:, None] * u
    sig = np.full((n, 2), 0.5)
    z = truth + rng.normal(0, 0.5, (n, 2))
    fit = smooth_segment(t, np.arange(n), z, sig, 4000.0, 3000.0)
    pos_err = np.hypot(*(fit.x[:, :2] - truth).T)
    assert np.sqrt(np.mean(pos_err ** 2)) < 0.5 * np.sqrt(2)  # smoothing reduces the raw 0.71 mm RMS
    k = n // 2
    v_true = (np.linalg.norm(v0) + a * t[k]) * u
    sv = np.sqrt(fit.P[k, 2, 2])
    assert np.all(np.abs(fit.x[k, 2:] - v_true) < 4 * sv)
    # With a conservative acceleration noise (4 m/s^2 vs a true 0.1 m/s^2) the
    # NIS must sit below chi-square(2) on average (never overconfident).
    nis = fit.nis[np.isfinite(fit.nis)][5:]
    assert nis.mean() < 2.0


def test_filter_consistency_on_its_own_model():
    """Motion drawn from the white-noise-acceleration model itself: NIS ~ chi-square(2)
    (scipy.stats.kstest p > 0.01) and 95% of smoothed positions within 2.45 sigma
    (chi-square(2) 95% quantile, scipy.stats.chi2.ppf)."""
    rng = np.random.default_rng(21)
    fps, n, q = 120.0, 600, 3000.0
    dt = 1 / fps
    F, Q = cv_transition(dt, q)
    x = np.array([300.0, 300.0, 900.0, 200.0])
    xs = []
    for _ in range(n):
        xs.append(x.copy())
        x = F @ x + rng.multivariate_normal(np.zeros(4), Q)
    xs = np.array(xs)
    sig = np.full((n, 2), 0.4)
    z = xs[:, :2] + rng.normal(0, 0.4, (n, 2))
    t = np.arange(n) * dt
    fit = smooth_segment(t, np.arange(n), z, sig, q, 3000.0)
    nis = fit.nis[np.isfinite(fit.nis)][10:]
    assert stats.kstest(nis, stats.chi2(df=2).cdf).pvalue > 0.01
    d2 = np.array([(fit.x[k, :2] - xs[k, :2]) @ np.linalg.solve(fit.P[k, :2, :2], fit.x[k, :2] - xs[k, :2])
                   for k in range(n)])
    frac = np.mean(d2 <= stats.chi2(df=2).ppf(0.95))
    assert 0.90 <= frac <= 0.99


def test_split_at_velocity_jump_and_reject_single_outlier():
    """Piecewise-straight motion with one velocity jump (a contact) and one bad detection."""
    rng = np.random.default_rng(9)
    fps = 120.0
    t = np.arange(120) / fps
    v1, v2 = np.array([1500.0, 0.0]), np.array([400.0, 900.0])
    k_c = 50
    pos = np.where(t[:, None] < t[k_c], v1 * t[:, None], v1 * t[k_c] + v2 * (t[:, None] - t[k_c]))
    z = pos + rng.normal(0, 0.4, pos.shape)
    z[90] += [6.0, -5.0]  # one bad detection
    sig = np.full_like(z, 0.4)
    segs, out = split_segments(t, z, sig, 4000.0, 3000.0, TrackingSettings().split_nis)
    assert len(segs) == 2
    assert segs[1][0] in (k_c, k_c + 1)  # the first frame after the contact starts the new piece
    assert out[90] and out.sum() == 1


def test_rest_run_averaging_meets_jitter_target():
    """A resting ball (sigma 0.5 mm) averaged over its rest run: jitter <= 0.2 mm (task target)."""
    rng = np.random.default_rng(12)
    n = 200
    t = np.arange(n) / 100.0
    z = np.array([1000.0, 500.0]) + rng.normal(0, 0.5, (n, 2))
    sig = np.full((n, 2), 0.5)
    s = TrackingSettings()
    runs = rest_runs(t, z, sig, s)
    assert runs == [(0, n)]
    rows, segs, used = smooth_ball(np.arange(n), t, z, sig, t, set(), s)
    err = np.hypot(rows["x_mm"] - 1000.0, rows["y_mm"] - 500.0)
    assert err.max() <= 0.2
    assert np.ptp(rows["x_mm"]) == 0.0 and segs[0][2] == "rest"


def _dets(xy, rgb, white=0.0):
    n = len(xy)
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": 0.4, "sy_mm": 0.4,
                         "r": [c[0] for c in rgb], "g": [c[1] for c in rgb], "b": [c[2] for c in rgb],
                         "white_frac": white, "dark_frac": 0.0})


def test_linker_keeps_identity_through_a_contact():
    """Cue (white) stops dead hitting a resting red ball, which moves off where the cue was headed.

    The cue's prediction lands on the red ball's new position; the colour term
    must keep the identities (zero switches). Closed form of a head-on hit with
    e = 1, equal masses: the cue stops and the object ball takes its velocity.
    """
    fps = 120.0
    lk = Linker(28.575)
    cue0, red0 = np.array([500.0, 600.0]), np.array([800.0, 600.0])
    v = np.array([2000.0, 0.0])
    t_hit = (red0[0] - 57.15 - cue0[0]) / v[0]
    ids = {"cue": set(), "red": set()}
    row = 0
    for k in range(60):
        t = k / fps
        if t < t_hit:
            cue, red = cue0 + v * t, red0
        else:
            cue, red = cue0 + v * t_hit, red0 + v * (t - t_hit)
        det = _dets([cue, red], [(240, 240, 235), (200, 30, 30)])
        det.loc[0, "white_frac"] = 0.95
        out = lk.step(t, det, np.arange(row, row + 2))
        row += 2
        ids["cue"].add(int(out[0]))
        ids["red"].add(int(out[1]))
    assert len(ids["cue"]) == 1 and len(ids["red"]) == 1 and ids["cue"] != ids["red"]


def test_ball_leaving_the_view_does_not_take_another_balls_detection():
    """A yellow ball rolls out of the picture at 3 m/s (30 fps); ~0.45 s later another yellow ball rolls in.

    Closed form: constant-velocity motion x = x0 + v t. By then the first
    ball's predicted covariance (white-acceleration model) has grown so much
    that the newcomer 1.4 m from the prediction passes its chi-square gate;
    but that prediction lies out of view, so the newcomer must get a new
    track, not the old identity. The resting red ball keeps its own track
    throughout. The view is x <= 1500 mm (a crop), tested through
    tracking.assign.view_test with the identity "camera".
    """
    from tracking.assign import view_test

    fps = 30.0
    in_view = view_test(lambda xy: np.asarray(xy, float), (1500, 1270), 0.0)
    lk = Linker(28.575, in_view=in_view)
    yellow, red = (200, 180, 30), (180, 30, 30)
    a0, va = np.array([1200.0, 500.0]), np.array([3000.0, 0.0])
    b0, vb = np.array([1480.0, 520.0]), np.array([-800.0, 0.0])
    red_p = np.array([600.0, 300.0])
    ids_a, ids_b, ids_red = set(), set(), set()
    row = 0
    for k in range(24):
        t = k / fps
        pts, cols, who = [red_p], [red], ["red"]
        pa = a0 + va * t
        if pa[0] <= 1500:
            pts.append(pa), cols.append(yellow), who.append("a")
        if k >= 17:
            pts.append(b0 + vb * (t - 17 / fps)), cols.append(yellow), who.append("b")
        det = _dets(pts, cols)
        out = lk.step(t, det, np.arange(row, row + len(det)))
        row += len(det)
        for w, tid in zip(who, out):
            {"a": ids_a, "b": ids_b, "red": ids_red}[w].add(int(tid))
    assert len(ids_a) == 1 and len(ids_b) == 1 and len(ids_red) == 1
    assert ids_a.isdisjoint(ids_b) and ids_red.isdisjoint(ids_a | ids_b)


def test_stale_track_cannot_restart_far_away():
    """Without a view test: a track unseen for longer than jump_max_gap_s may not re-start onto a far detection.

    A ball is seen for 6 frames at 60 fps and then lost (covered); 10 frames
    later a same-coloured ball appears 600 mm away, well outside the
    gate of the old motion (constant velocity, closed form) but inside the
    14 m/s reach of a re-start. It must start a new track.
    """
    fps = 60.0
    lk = Linker(28.575)
    ids = []
    row = 0
    for k in range(6):
        out = lk.step(k / fps, _dets([(1000.0 + 10 * k, 500.0)], [(200, 180, 30)]), np.array([row]))
        row += 1
        ids.append(int(out[0]))
    for k in range(6, 16):
        lk.step(k / fps, _dets([], []), np.zeros(0, int))
    out = lk.step(16 / fps, _dets([(1000.0, 1100.0)], [(200, 180, 30)]), np.array([row]))
    assert len(set(ids)) == 1 and int(out[0]) not in ids


def test_streak_halves_merge_but_touching_balls_do_not():
    """Balls cannot overlap (centres >= 2R apart, geometry): two blobs 40 mm apart are one ball, 2R apart are two.

    A 78 mm motion streak (2.8 m/s over a 28 ms exposure) detected as two
    blobs at +/-20 mm about the mid-exposure centre must give that centre;
    two touching balls (centres exactly one diameter apart) must both stay.
    """
    from tracking.pipeline import merge_overlapping

    R = 28.575
    c = np.array([800.0, 400.0])
    u = np.array([np.cos(0.6), np.sin(0.6)])
    streak = _dets([c - 20 * u, c + 20 * u], [(240, 240, 240)] * 2).assign(confidence=[0.7, 0.9])
    m = merge_overlapping(streak, R, TrackingSettings().merge_below_frac)
    assert len(m) == 1
    assert np.hypot(m.x_mm[0] - c[0], m.y_mm[0] - c[1]) < 1e-9
    assert m.sx_mm[0] >= 20 / np.sqrt(2)  # the unknown end position stays in the sigma
    touching = _dets([c, c + 2 * R * u], [(240, 240, 240), (30, 40, 200)]).assign(confidence=0.9)
    assert len(merge_overlapping(touching, R, TrackingSettings().merge_below_frac)) == 2


def test_colour_names_and_labels():
    """Rendered-set colours (hue from colorsys-like HSV) map to the documented names; cue, stripe, -2."""
    assert colour_name(274.0, 0.75, 0.55, 0.0) == "purple"
    assert colour_name(25.0, 0.94, 0.98, 0.0) == "orange"
    assert colour_name(138.0, 0.87, 0.45, 0.0) == "green"
    assert colour_name(5.0, 0.9, 0.3, 0.0) == "maroon"
    assert colour_name(0.0, 0.0, 0.1, 0.9) == "black"
    det = pd.DataFrame({
        "track": [0, 0, 1, 1, 2, 2, 3, 3],
        "r": [240, 240, 250, 250, 250, 250, 200, 200], "g": [240, 240, 200, 200, 200, 200, 30, 30],
        "b": [235, 235, 20, 20, 20, 20, 30, 30],
        "hue_deg": [np.nan, np.nan, 47, 47, 47, 47, 0, 0], "sat": [0.05, 0.05, 0.9, 0.9, 0.9, 0.9, 0.85, 0.85],
        "val": [0.95, 0.95, 0.98, 0.98, 0.98, 0.98, 0.8, 0.8],
        "white_frac": [0.98, 0.98, 0.0, 0.0, 0.05, 0.05, 0.5, 0.5], "dark_frac": [0.0] * 8,
    })
    names, balls = label_tracks(det)
    assert names[0] == "cue"
    assert sorted([names[1], names[2]]) == ["yellow", "yellow-2"]
    assert names[3] == "red-stripe"
    assert set(balls.columns) >= {"ball", "r", "g", "b", "pattern"}


def test_smeared_cue_is_still_named_cue():
    """A cue ball smeared over the cloth (30 fps, long exposure) shows few white pixels but stays unsaturated.

    Trade fact (common practice): every shot has a cue ball, the only white
    one in a pool set. Here no track reaches the 0.6 white fraction; the
    unsaturated track with some white pixels must be the cue, a saturated
    stripe ball must not.
    """
    det = pd.DataFrame({
        "track": [0, 0, 1, 1, 2, 2],
        "r": [150, 150, 200, 200, 90, 90], "g": [150, 150, 30, 30, 30, 30], "b": [135, 135, 30, 30, 30, 30],
        "hue_deg": [60, 60, 0, 0, 358, 358], "sat": [0.13, 0.13, 0.85, 0.85, 0.75, 0.75],
        "val": [0.58, 0.58, 0.8, 0.8, 0.35, 0.35],
        "white_frac": [0.3, 0.3, 0.4, 0.4, 0.0, 0.0], "dark_frac": [0.0] * 6,
    })
    names, _ = label_tracks(det)
    assert names[0] == "cue" and names[1] == "red-stripe" and names[2] == "maroon"


# --------------------------------------------------------------------------- end to end
def _truth_run(clip: str):
    from tracking.pipeline import calibration_from_truth, track_clip

    truth = json.loads((FOOTAGE / f"{clip}.truth.json").read_text())
    res = track_clip(FOOTAGE / f"{clip}.mp4", calibration=calibration_from_truth(truth))
    return truth, res


@pytest.mark.slow
@pytest.mark.footage
@pytest.mark.skipif(not FOOTAGE.is_dir(), reason="outside footage ../shared/footage not present")
@pytest.mark.parametrize("clip", ["D1", "D2"])
def test_track_clip_on_outside_footage(clip):
    """Every true ball gets exactly one track, covering >= 99% of frames, no identity switch,
    RMSE <= 1.5 mm (honest bound at 2.6 mm/px; see the bench figures), the white ball is 'cue',
    and every true contact time falls on a motion-segment boundary of the balls involved (within 2 frames).
    """
    truth, res = _truth_run(clip)
    tr = res.tracks
    n = truth["n_frames"]
    used = set()
    for b in truth["balls"]:
        P = np.array(truth["frames"]["positions_mm"][b["id"]])
        best = None
        for name, g in tr.groupby("ball"):
            fr = g.frame.to_numpy()
            e = np.hypot(g.x_mm.to_numpy() - P[fr, 0], g.y_mm.to_numpy() - P[fr, 1])
            if best is None or np.median(e) < best[1]:
                best = (name, float(np.median(e)), e, fr)
        name, _, e, fr = best
        assert name not in used
        used.add(name)
        assert len(np.unique(fr)) >= 0.99 * n
        assert np.sqrt(np.mean(e ** 2)) <= 1.5, (b["id"], name, np.sqrt(np.mean(e ** 2)))
        assert e.max() < 5.0  # no frame on another ball (identity switch)
        if b["colour"] == "white":
            assert name == "cue"
    fps = truth["fps"]
    names = {}
    for b in truth["balls"]:
        P = np.array(truth["frames"]["positions_mm"][b["id"]])
        names[b["id"]] = min(tr.ball.unique(), key=lambda nm: np.median(np.hypot(
            tr[tr.ball == nm].x_mm - P[tr[tr.ball == nm].frame, 0], tr[tr.ball == nm].y_mm - P[tr[tr.ball == nm].frame, 1])))
    for c in truth["contacts"]:
        if not c.get("required"):
            continue
        for bid in [c["ball_a"], c.get("ball_b")]:
            if not bid:
                continue
            starts = [s[0] for s in res.segments_hint[names[bid]][1:]]
            assert any(abs(s0 - c["t_s"]) <= 2.0 / fps for s0 in starts), (c["t_s"], bid, starts)


# --------------------------------------------------------------------------- synthetic clip + CLI
def test_synthetic_clip_end_to_end_and_cli(tmp_path):
    """A ray-cast clip (tests/test_detect.render): a white ball rolls at constant speed past a resting red.

    Checks track_clip against the exact truth (moving RMSE <= 0.5 mm, the task's
    target, here at ~2.8 mm/px with MJPG compression; resting jitter <= 0.2 mm;
    names cue / red) and the command line: files written, no silent overwrite.
    """
    from click.testing import CliRunner

    from feltlab.cli import main
    from test_detect import make_calibration, render
    from tracking.calibrate import save_calibration
    from tracking.pipeline import track_clip

    cal = make_calibration(size=(960, 540))
    fps, n = 60.0, 30
    v = np.array([900.0, 250.0])
    p0 = np.array([700.0, 500.0])
    red = {"x": 1500.0, "y": 800.0, "bgr": (30, 40, 200)}
    rng = np.random.default_rng(31)
    clip = tmp_path / "roll.avi"
    wr = cv2.VideoWriter(str(clip), cv2.VideoWriter_fourcc(*"MJPG"), fps, cal.camera.image_size)
    truth = []
    for k in range(n):
        p = p0 + v * k / fps
        truth.append(p)
        wr.write(render(cal, [{"x": p[0], "y": p[1], "bgr": (235, 240, 242)}, red], rng, noise_dn=1.5, ss=3))
    wr.release()
    truth = np.array(truth)
    res = track_clip(clip, calibration=cal)
    assert set(res.balls.ball) == {"cue", "red"}
    cue = res.tracks[res.tracks.ball == "cue"].sort_values("frame")
    assert len(cue) == n
    err = np.hypot(cue.x_mm.to_numpy() - truth[:, 0], cue.y_mm.to_numpy() - truth[:, 1])
    assert np.sqrt(np.mean(err ** 2)) <= 0.5, err
    r = res.tracks[res.tracks.ball == "red"]
    assert np.ptp(r.x_mm) <= 0.2 and np.ptp(r.y_mm) <= 0.2  # static jitter (1-sigma target 0.2 mm)
    rest_err = float(np.hypot(r.x_mm - red["x"], r.y_mm - red["y"]).max())
    assert rest_err <= 1.0  # no gross error; the 0.5 mm bias bound is checked at the end
    # command line
    calib = save_calibration(cal, tmp_path / "cal.toml")
    out = tmp_path / "out"
    runner = CliRunner()
    first = runner.invoke(main, ["track", str(clip), "--calib", str(calib), "--out", str(out)])
    assert first.exit_code == 0, first.output
    assert (out / "tracks.csv").is_file() and (out / "tracks.parquet").is_file()
    before = (out / "tracks.csv").read_bytes()
    again = runner.invoke(main, ["track", str(clip), "--calib", str(calib), "--out", str(out)])
    assert again.exit_code == 2
    assert (out / "tracks.csv").read_bytes() == before
    assert not list(out.glob(".*partial"))
    # Resting-ball bias against the closed-form ray-sphere truth: the task's 0.5 mm bound (issue 3).
    # Measured 0.32 mm here (0.12 mm with tracking/chroma.py on); red placed at five other spots
    # chosen before running: 0.16-0.38 mm (0.19-0.44 with it). What is left is mostly the MJPG
    # codec's fixed pattern at the ball's place (8-px blocks, 2-px colour grid; scripts/bench_rest.py
    # --codec: 0.035 px per axis on raw frames, 0.08 through MJPG), which a still ball meets at the
    # same phase in every frame.
    assert rest_err <= 0.2 + 0.3, f"resting-ball bias {rest_err:.2f} mm"  # jitter 0 + bias bound


def test_dim_light_cue_is_the_ball_bright_in_every_channel():
    """Dim warm light: no pixel reaches the 'white' value, yet the white ball is the cue.

    Colours are computed, not chosen: albedo x illuminant x exposure in linear
    light, sRGB-encoded (IEC 61966-2-1 closed form); HSV from colorsys
    (Python standard library). A white ball reflects every channel, so its
    darkest channel is the brightest of the set (common practice: one white
    cue ball per pool set).
    """
    import colorsys

    from lambert_ball import srgb_encode

    light = np.array([1.0, 0.85, 0.65]) * 0.25  # warm lamp, dark scene (R, G, B linear)
    albedo = {"white": (0.85, 0.85, 0.85), "yellow": (0.85, 0.7, 0.06), "purple": (0.3, 0.12, 0.4),
              "orange": (0.9, 0.3, 0.03), "black": (0.03, 0.03, 0.03)}
    rows = []
    for k, (name, a) in enumerate(albedo.items()):
        rgb = srgb_encode(np.asarray(a) * light)
        h, s, v = colorsys.rgb_to_hsv(*(rgb / 255.0))
        for _ in range(3):
            rows.append(dict(track=k, r=rgb[0], g=rgb[1], b=rgb[2], hue_deg=360 * h, sat=s, val=v,
                             white_frac=0.0, dark_frac=0.9 if name == "black" else 0.0))
    det = pd.DataFrame(rows)
    assert det.val.max() < 0.62  # below the 'white' value of detection: the usual rules find no cue
    names, _ = label_tracks(det)
    assert names[0] == "cue"
    assert "cue" not in [names[k] for k in range(1, 5)]
