"""Dark-ring search (tracking/dark_ring.py) on closed-form images of a ball of the cloth's own colour.

Outside truth, all closed forms drawn here (not by our renderer):
- the ball: a Lambertian sphere, shade = ambient + (1 - ambient) max(0, n.l)
  (Lambert's cosine law), seen straight down, 4x4 supersampled;
- the cloth's ambient light: the sky it sees, less the view factor of the
  sphere from a horizontal plane element, F = R^2 h / D^3 (sphere of
  radius R, centre height h = R, distance D from the element; the
  configuration factor of a sphere seen from a plane element with the
  sphere wholly above the element's plane, standard radiative-transfer
  catalogues; from memory);
- the lamp's cast shadow: a cloth point is dark when the ray towards the
  lamp meets the sphere (ray-sphere intersection, plain geometry);
- sRGB encoding (IEC 61966-2-1) and Gaussian sensor noise (tests/lambert_ball.py).
The ball's true centre is the reference for the centre checks; the
colour of ball and cloth is the same hue, ball albedo 0.85-1.0 x the cloth's.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

from lambert_ball import srgb_encode
from tracking.dark_ring import ring_centre, ring_refine, ring_search
from tracking.detect import to_lab
from tracking.settings import DetectionSettings

S = DetectionSettings()
R = 10.0                 # ball radius px (a 57 mm ball at ~2.6 m on a 720p view is ~12.6 px)
H, W = 120, 150          # non-square: catches x/y swaps
CLOTH = np.array([0.06, 0.05, 0.30])  # linear BGR: a red cloth (common practice colours, from memory)


def _scene(balls, light, ambient: float, noise_dn: float, seed: int, ss: int = 4, blur_px: float = 0.8):
    """8-bit BGR frame of balls [(cx, cy, albedo_bgr)] on the cloth, lit by a distant lamp ``light`` and a sky."""
    lv = np.asarray(light, float) / np.linalg.norm(light)
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:H, 0:W]
    X = np.broadcast_to(xs[..., None, None] + sub[None, None, None, :], (H, W, ss, ss)).astype(np.float64)
    Y = np.broadcast_to(ys[..., None, None] + sub[None, None, :, None], (H, W, ss, ss)).astype(np.float64)
    # cloth: sky less the spheres' view factors, lamp unless a sphere blocks the ray
    sky = np.ones_like(X)
    lit = np.ones_like(X, bool)
    for cx, cy, _ in balls:
        D2 = (X - cx) ** 2 + (Y - cy) ** 2 + R * R
        sky -= R ** 3 / D2 ** 1.5
        # ray p + t l (t > 0) from p = (X, Y, 0); sphere centre (cx, cy, R)
        ox, oy, oz = X - cx, Y - cy, -R
        b = ox * lv[0] + oy * lv[1] + oz * lv[2]
        c = ox * ox + oy * oy + oz * oz - R * R
        lit &= ~((b * b - c > 0) & (-b > 0))
    shade = ambient * sky + (1 - ambient) * lv[2] * lit
    img = shade[..., None] * CLOTH
    for cx, cy, alb in balls:
        dx, dy = (X - cx) / R, (Y - cy) / R
        q2 = dx * dx + dy * dy
        inside = q2 < 1.0
        nz = np.sqrt(np.clip(1.0 - q2, 0.0, 1.0))
        sh = ambient + (1 - ambient) * np.clip(dx * lv[0] + dy * lv[1] + nz * lv[2], 0.0, None)
        img = np.where(inside[..., None], sh[..., None] * np.asarray(alb, float), img)
    lin = img.mean(axis=(2, 3)).astype(np.float32)
    lin = cv2.GaussianBlur(lin, (0, 0), blur_px)
    rng = np.random.default_rng(seed)
    return np.clip(np.round(srgb_encode(lin) + rng.normal(0.0, noise_dn, lin.shape)), 0, 255).astype(np.uint8)


def _lamp(zenith_deg: float, azimuth_deg: float) -> np.ndarray:
    z, a = np.radians(zenith_deg), np.radians(azimuth_deg)
    return np.array([np.sin(z) * np.cos(a), np.sin(z) * np.sin(a), np.cos(z)])


def _find(frame, known=np.zeros((0, 2)), known_r=np.zeros(0)):
    lum = to_lab(frame)[..., 0]
    valid = np.ones(lum.shape, bool)
    seeds, info = ring_search(lum, valid, R, known, known_r, S)
    out = []
    for sd in seeds:
        wgt = np.ones(lum.shape, np.float32)
        for (x, y), rk in zip(np.asarray(known, float).reshape(-1, 2), known_r):
            cv2.circle(wgt, (int(round(x * 16)), int(round(y * 16))), int(round(S.ring_known_pad * rk * 16)), 0, -1,
                       lineType=cv2.LINE_8, shift=4)
        x, y, _ = ring_centre(lum, wgt, sd["x"], sd["y"], R, S)
        ref = ring_refine(lum, wgt, x, y, R, S)  # as find_dark_ring: the rays' circle when it holds
        out.append((x, y) if ref is None else ref)
    return out


ALBEDOS = {"same": 1.0, "darker": 0.85}
LAMPS = {"overhead": (0, 0), "side25": (25, 30)}
SIDE40 = (40, 200)  # the lamp 40 deg from overhead: the far side of the ball and its shadow merge
SEEDS = range(6)


def _error_px(found, cx, cy):
    return np.hypot(found[0][0] - cx, found[0][1] - cy)


@pytest.mark.parametrize("albedo", ALBEDOS)
@pytest.mark.parametrize("lamp", LAMPS)
def test_lone_ball_of_the_cloths_colour_is_found_and_centred(albedo, lamp):
    # The per-pixel colour difference of such a ball is the shading only.
    cx, cy = 71.3, 58.6
    for seed in SEEDS:
        frame = _scene([(cx, cy, ALBEDOS[albedo] * CLOTH)], _lamp(*LAMPS[lamp]), 0.35, 1.5, seed)
        found = _find(frame)
        assert len(found) == 1, found
        # within 2 sigma of the model error the setting assumes (ring_model_frac x r)
        assert _error_px(found, cx, cy) <= 2.0 * S.ring_model_frac * R, (albedo, lamp, seed, found)


@pytest.mark.parametrize("albedo", ALBEDOS)
def test_lone_ball_with_a_low_side_lamp_is_mostly_found(albedo):
    # Lamp 40 deg from overhead: the dark half of the ball runs into its own
    # cast shadow; the ring is open there and the search finds the ball in
    # most frames only (measured 4-5 of 6), never elsewhere.
    cx, cy = 71.3, 58.6
    hits = 0
    for seed in SEEDS:
        found = _find(_scene([(cx, cy, ALBEDOS[albedo] * CLOTH)], _lamp(*SIDE40), 0.35, 1.5, seed))
        assert len(found) <= 1
        if found:
            assert _error_px(found, cx, cy) <= 2.0 * S.ring_model_frac * R
            hits += 1
    assert hits >= 4


def _rack(lamp, seed):
    cx, cy = 72.4, 61.7
    white = np.array([0.8, 0.8, 0.8])
    nb = np.array([(cx + 2 * R * np.cos(a), cy + 2 * R * np.sin(a)) for a in np.radians([10, 130, 250])])
    frame = _scene([(cx, cy, CLOTH)] + [(x, y, white) for x, y in nb], _lamp(*lamp), 0.35, 1.5, seed)
    return frame, nb, (cx, cy)


@pytest.mark.parametrize("lamp", LAMPS)
def test_ball_of_the_cloths_colour_in_a_rack(lamp):
    # Three bright neighbours touch it (2 radii), already found by the
    # detector: the outer annulus is mostly theirs, its shading still shows.
    for seed in SEEDS:
        frame, nb, (cx, cy) = _rack(LAMPS[lamp], seed)
        found = _find(frame, nb, np.full(3, R))
        assert len(found) == 1, found
        assert _error_px(found, cx, cy) <= 2.0 * S.ring_model_frac * R, (lamp, seed, found)


@pytest.mark.xfail(strict=True, reason="known limit: lamp 40 deg to the side, ball in a rack: the lit neighbours "
                                       "hide the outer annulus and the far side is dark inside and out")
def test_ball_of_the_cloths_colour_in_a_rack_low_side_lamp():
    frame, nb, (cx, cy) = _rack(SIDE40, 0)
    found = _find(frame, nb, np.full(3, R))
    assert len(found) == 1 and _error_px(found, cx, cy) <= 2.0 * S.ring_model_frac * R


@pytest.mark.parametrize("lamp", [*LAMPS.values(), SIDE40])
def test_rack_gaps_are_not_balls(lamp):
    # The shadowed gaps between the rack's balls must not become balls.
    for seed in SEEDS:
        frame, nb, (cx, cy) = _rack(lamp, seed)
        for x, y in _find(frame, nb, np.full(3, R)):
            assert np.hypot(x - cx, y - cy) <= 2.0 * S.ring_model_frac * R, (lamp, seed, x, y)


@pytest.mark.parametrize("seed", range(4))
def test_no_ball_on_empty_cloth(seed):
    frame = _scene([], _lamp(25, 30), 0.35, 1.5, seed)
    assert _find(frame) == []


@pytest.mark.parametrize("lamp", [*LAMPS.values(), SIDE40])
def test_a_known_balls_shadow_is_not_a_ball(lamp):
    # A bright ball already found casts its shadow and contact shadow on the
    # cloth; no second ball may come of them.
    frame = _scene([(60.0, 60.0, np.array([0.8, 0.8, 0.8]))], _lamp(*lamp), 0.35, 1.5, 7)
    assert _find(frame, np.array([[60.0, 60.0]]), np.array([R])) == []


def test_a_flat_dark_disc_is_not_a_ball():
    # A ball-sized flat mark (a shadow patch, a worn spot) has no limb
    # darkening: its inside is as dark as its rim.
    yy, xx = np.mgrid[0:H, 0:W]
    lin = np.broadcast_to(CLOTH, (H, W, 3)).copy()
    lin[(xx - 70.0) ** 2 + (yy - 60.0) ** 2 <= R * R] *= 0.5
    rng = np.random.default_rng(3)
    frame = np.clip(np.round(srgb_encode(cv2.GaussianBlur(lin, (0, 0), 0.8)) + rng.normal(0, 1.5, lin.shape)),
                    0, 255).astype(np.uint8)
    assert _find(frame) == []


def test_a_straight_shadow_edge_is_not_a_ball():
    # The shade along a cushion: a dark band across the cloth is open at both ends.
    yy, xx = np.mgrid[0:H, 0:W]
    lin = np.broadcast_to(CLOTH, (H, W, 3)).copy()
    lin[np.abs(yy - 60.0) <= 0.3 * R] *= 0.6
    rng = np.random.default_rng(4)
    frame = np.clip(np.round(srgb_encode(cv2.GaussianBlur(lin, (0, 0), 0.8)) + rng.normal(0, 1.5, lin.shape)),
                    0, 255).astype(np.uint8)
    assert _find(frame) == []
