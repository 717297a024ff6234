"""Phantom balls on compressed footage (tracking/phantoms.py) and where a ball centre can be.

Compressed clip, emulated without a video codec (CI has none): frames are
ray-cast (tests/test_detect.render, a Lambertian ball model) on a shaded cloth
with sensor noise and coded the way an inter-frame codec codes a still scene
(ITU-T H.264 / ISO 14496-2): a keyframe is the whole picture with each 16x16
macroblock's mean (its DC coefficient) rounded to the quantiser step; every
other frame copies each block bit for bit from the previous decoded frame
unless the scene changed in it (a moving ball), when that block is coded
anew. A second keyframe with a coarser step re-renders the whole cloth (a GOP
boundary; block offsets of a few Delta-E, the condition under which H.264
crf 28-32 renders showed 18-26 phantom tracks). Frames are written as lossless
PNG files. Truth: the rendered ball centres.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

from feltlab.standards import table_preset
from tracking.phantoms import centre_inset_mm, in_pocket_mouth, off_surface
from tracking.settings import PhantomSettings

R = 28.575  # pool ball radius (mm), 2 1/4 in (WPA)


# --------------------------------------------------------------------------- geometry
def test_touching_centre_inset_is_pythagoras():
    """A sphere of radius R resting on the cloth touches a nose line at height h when the
    centre's distance to that line is R: horizontal offset sqrt(R^2 - (h - R)^2) (Pythagoras),
    solved here numerically with scipy's root finder as the reference."""
    from scipy.optimize import brentq

    s = PhantomSettings()
    h = s.nose_height_frac * 2 * R
    touch = brentq(lambda y: np.hypot(y, h - R) - R, 0.0, R)
    assert centre_inset_mm(R, s) == pytest.approx(touch - s.cushion_compression_mm - s.calibration_slack_mm, abs=1e-6)
    # a ball resting against the cushion is never "off the surface" (the margin is what is left)
    t = table_preset("pool-9ft")
    pts = np.array([[600.0, touch], [t.length_mm - touch, 400.0], [900.0, t.width_mm - touch]])
    assert not off_surface(pts, t, R, s).any()
    pts_out = np.array([[600.0, -3.0], [t.length_mm + 10.0, 400.0], [900.0, t.width_mm - 5.0]])
    assert off_surface(pts_out, t, R, s).all()


def test_pockets_exempt_on_pocketed_tables_only():
    s = PhantomSettings()
    pool, carom = table_preset("pool-9ft"), table_preset("carom")
    # a ball dropping into a corner pocket (beyond both nose lines) and into a side pocket
    drop = np.array([[-20.0, -15.0], [pool.length_mm / 2 + 20.0, pool.width_mm + 30.0]])
    assert in_pocket_mouth(drop, pool, R, s).all()
    assert not off_surface(drop, pool, R, s).any()
    # carom: no pockets, a centre beyond the nose line is off the surface everywhere
    assert off_surface(np.array([[-20.0, -15.0], [carom.length_mm / 2, -10.0]]), carom, R, s).all()


# --------------------------------------------------------------------------- compressed clip
def _dc_quantise(img: np.ndarray, step: float, block: int = 16) -> np.ndarray:
    """uint8 image with each block x block macroblock's mean rounded to a multiple of ``step`` (DN)."""
    h, w = img.shape[:2]
    f = img.astype(np.float32)
    m = cv2.resize(f, (w // block, h // block), interpolation=cv2.INTER_AREA)
    off = cv2.resize(np.round(m / step) * step - m, (w, h), interpolation=cv2.INTER_NEAREST)
    return np.clip(np.round(f + off), 0, 255).astype(np.uint8)


def _codec_clip(folder, cal, balls_at, n, key2, step1=2.0, step2=12.0, noise=0.5, seed=5):
    """Write n PNG frames of an emulated inter-frame-coded clip (module docstring); returns truth."""
    from test_detect import render

    rng = np.random.default_rng(seed)
    w, h = cal.camera.image_size
    yy, xx = np.mgrid[0:h, 0:w]
    # a lamp's pool of light on the cloth, so block means differ from block to block
    shade = (15.0 * np.cos(xx / 97.0) * np.sin(yy / 71.0))[..., None]
    prev_dec, prev_clean = None, None
    truth = []
    for k in range(n):
        balls = balls_at(k)
        truth.append([(b["x"], b["y"]) for b in balls])
        clean = render(cal, balls, None, noise_dn=0.0, ss=2).astype(np.float32)
        coded = _dc_quantise(clean + shade + rng.normal(0.0, noise, clean.shape), step2 if k >= key2 else step1)
        if k in (0, key2):
            dec = coded
        else:
            dec = prev_dec.copy()
            moved = np.abs(clean - prev_clean).max(axis=2) > 0
            for by in range(0, h, 16):
                for bx in range(0, w, 16):
                    if moved[by:by + 16, bx:bx + 16].any():
                        dec[by:by + 16, bx:bx + 16] = coded[by:by + 16, bx:bx + 16]
        cv2.imwrite(str(folder / f"f{k:03d}.png"), dec)
        prev_dec, prev_clean = dec, clean
    return truth


def _scene(k: int, fps: float = 60.0) -> list[dict]:
    """A white ball rolling at 0.95 m/s, a red at rest, a yellow that rests then rolls off at frame 10."""
    t = k / fps
    cue = {"x": 700.0 + 900.0 * t, "y": 500.0 + 300.0 * t, "bgr": (235, 240, 242)}
    red = {"x": 1700.0, "y": 850.0, "bgr": (30, 40, 200)}
    ty = max(0.0, t - 10 / fps)
    yellow = {"x": 1000.0 - 700.0 * ty, "y": 1000.0 - 400.0 * ty, "bgr": (20, 190, 240)}
    return [cue, red, yellow]


def _phantom_report(res, truth, tol_mm=10.0):
    """Per track: median distance to the nearest true ball over its frames (mm)."""
    out = {}
    for ball, g in res.tracks.groupby("ball"):
        d = [min(np.hypot(x - tx, y - ty) for tx, ty in truth[int(f)])
             for f, x, y in zip(g.frame, g.x_mm, g.y_mm) if int(f) < len(truth)]
        out[ball] = float(np.median(d))
    return out


@pytest.mark.parametrize("case", ["median", "still_cloth_only", "default", "half_threshold"])
def test_keyframe_quality_jump_makes_no_phantom_tracks(tmp_path, case):
    """Every track is a rendered ball (median distance <= 10 mm) and each ball has one track.

    median: the temporal-median background throughout and no evidence rules
    (the method before tracking/phantoms.py) - the clip must show phantoms,
    or it checks nothing.
    still_cloth_only: the still-cloth update alone (session 7's rules: no
    evidence tests) - the shortfall below.
    default: the shipped settings; the codec's copies are followed where they
    clear the foreground threshold, and tracks that never show a ball's
    shading or colour are dropped (tracking/phantoms.py, 4). Under the still-
    cloth rule alone, patches of the codec's wake behind the rolling ball
    below that threshold were still found by the sub-threshold searches
    (tracking/faint.py), 2 tracks here.
    half_threshold: still_min_frac 0.5 follows those too: no phantom (not the
    default: it moved the outside clips' contact e by up to 0.0005).
    """
    from test_detect import make_calibration
    from tracking.pipeline import track_clip

    cal = make_calibration(size=(960, 540))
    n, key2 = 36, 18
    truth = _codec_clip(tmp_path, cal, _scene, n, key2)
    before = dict(drop_codec_tracks=False)
    ps = {"median": PhantomSettings(follow_still_cloth=False, **before),
          "still_cloth_only": PhantomSettings(**before), "default": PhantomSettings(),
          "half_threshold": PhantomSettings(still_min_frac=0.5)}[case]
    res = track_clip(tmp_path, calibration=cal, fps=60.0, phantoms=ps)
    rep = _phantom_report(res, truth)
    phantoms = [b for b, d in rep.items() if d > 10.0]
    real = [b for b, d in rep.items() if d <= 1.0]
    if case == "median":
        assert len(phantoms) >= 20, f"the emulated keyframe made too few phantoms to check anything: {rep}"
        return
    assert len(real) == 3, rep
    assert res.stats["still_cloth_px"] > 0
    assert len(phantoms) <= (2 if case == "still_cloth_only" else 0), rep


def test_noisy_uncompressed_frames_leave_the_background_alone():
    """Sensor noise kept in every frame (no codec copies): no pixel is still, the median background stays."""
    from test_detect import make_calibration, render
    from tracking.detect import build_background
    from tracking.phantoms import StillCloth

    cal = make_calibration(size=(480, 270))
    rng = np.random.default_rng(11)
    balls = [{"x": 900.0, "y": 600.0, "bgr": (30, 40, 200)}]
    frames = [render(cal, balls, rng, noise_dn=2.0, ss=2) for _ in range(5)]
    bg = build_background(frames, cal)
    sc = StillCloth(bg, cal, PhantomSettings())
    for k, f in enumerate(frames):
        assert sc.update(f, f, k / 60.0) is bg
    assert sc.pixels_updated == 0
    # the same frame twice (a codec's copy) with a block re-rendered 14 DN brighter away from the
    # ball (a keyframe's quantisation): that block follows, the ball and the rest keep the median
    x0, y0, x1, y1 = bg.roi
    c = cal.table_to_px(np.array([[900.0, 600.0]]))[0]
    f = frames[0].copy()
    bx, by = int(x0 + 0.7 * (x1 - x0)) // 16 * 16, int(y0 + 0.5 * (y1 - y0)) // 16 * 16
    assert np.hypot(bx + 8 - c[0], by + 8 - c[1]) > 60
    f[by:by + 16, bx:bx + 16] = np.clip(f[by:by + 16, bx:bx + 16].astype(int) + 14, 0, 255).astype(np.uint8)
    sc2 = StillCloth(bg, cal, PhantomSettings())
    sc2.update(f, f, 0.0)
    nb = sc2.update(f, f, 1 / 60.0)
    assert nb is not bg and sc2.pixels_updated > 0
    assert np.allclose(nb.image[by + 4:by + 12, bx + 4:bx + 12], f[by + 4:by + 12, bx + 4:bx + 12])
    xi, yi = int(round(c[0])), int(round(c[1]))
    assert np.allclose(nb.image[yi - 3:yi + 4, xi - 3:xi + 4], bg.image[yi - 3:yi + 4, xi - 3:xi + 4])
    changed = np.any(nb.image != bg.image, axis=2)
    assert changed.sum() <= 2 * 16 * 16, changed.sum()  # the block (and its rim), nothing else
    # the CIELAB copy follows the image
    from tracking.detect import to_lab
    assert np.allclose(nb.lab_image(), to_lab(nb.image), atol=1e-3)
