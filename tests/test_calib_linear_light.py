"""Cushion-nose edges are located in linear light (tracking._table_edges).

Video is stored tone-encoded (sRGB, IEC 61966-2-1); lens and sensor blur act
on light before that curve. Through the curve a blurred step is lopsided and
its gradient peak moves to the dark side. The checks draw straight edges with
known sub-pixel positions: a Gaussian-blurred step is the closed form
a + (b - a) Phi(d / s) (d: signed distance to the line, s: blur sigma), and
the cushion band scene is blurred with OpenCV's own GaussianBlur and
box-averaged with its INTER_AREA resize (independent of our code), then
encoded with the IEC 61966-2-1 curve written out here.
"""
from __future__ import annotations

from dataclasses import replace

import cv2
import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d
from scipy.special import ndtr

from feltlab.errors import FeltlabError
from feltlab.standards import table_preset
from tracking._table_edges import edge_points_along, linear_gray
from tracking.calibrate import calibrate_auto
from tracking.settings import CalibrationSettings

W_IMG, H_IMG = 320, 200  # non-square (catches x/y swaps)
SLOPE = 0.05             # the edge line y = Y0 + SLOPE (x - W/2): every sub-pixel phase occurs
Y0 = 110.3


def srgb_encode(lin255):
    """Linear 0-255 -> sRGB 0-255 (IEC 61966-2-1)."""
    c = np.clip(np.asarray(lin255, float) / 255.0, 0, 1)
    return 255.0 * np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)


def _signed_distance(x, y):
    """Signed distance (px) from the line, positive downwards (outward, towards the cushion)."""
    return (y - (Y0 + SLOPE * (x - W_IMG / 2))) / np.hypot(1.0, SLOPE)


def _offsets(points):
    return _signed_distance(points[:, 0], points[:, 1])


def _find(img8, settings, linear: bool, plateau_px=8.0):
    gray = img8.astype(np.float32)
    p0 = np.array([20.0, Y0 + SLOPE * (20 - W_IMG / 2)])
    p1 = np.array([W_IMG - 20.0, Y0 + SLOPE * (W_IMG - 20 - W_IMG / 2)])
    nrm = np.array([-SLOPE, 1.0]) / np.hypot(1.0, SLOPE)
    return edge_points_along(gray, p0, p1, nrm, [(0.0, 1.0)], 30.0, 30.0, plateau_px, settings,
                             gray_lin=linear_gray(img8, "srgb") if linear else None)


def test_linear_gray_is_the_srgb_curve():
    # IEC 61966-2-1: code 128 -> 0.2159 of full scale; the linear toe below 0.04045 (12.92 slope)
    v = linear_gray(np.array([[0, 10, 128, 255]], np.uint8))[0]
    assert v[0] == 0.0 and v[3] == pytest.approx(255.0)
    assert v[1] / 255 == pytest.approx(10 / 255 / 12.92, rel=1e-5)
    assert v[2] / 255 == pytest.approx(0.21586, abs=2e-5)
    # colour: channels are decoded, then averaged
    bgr = np.array([[[0, 128, 255]]], np.uint8)
    assert linear_gray(bgr)[0, 0] == pytest.approx((0.0 + 0.21586 * 255 + 255.0) / 3, abs=0.01)
    assert np.allclose(linear_gray(bgr, "none"), 383 / 3)
    with pytest.raises(ValueError):
        linear_gray(bgr, "gamma9")


@pytest.mark.parametrize("blur", [0.7, 1.3])
def test_single_edge_located_where_the_blurred_step_is(blur):
    """Dark band side (linear 6 DN) -> lit cushion top (linear 60 DN), Gaussian blur ``blur`` px."""
    a, b = 6.0, 60.0
    yy, xx = np.mgrid[0:H_IMG, 0:W_IMG].astype(float)
    d = _signed_distance(xx, yy)
    # closed form: a step blurred by a Gaussian PSF of sigma s is a + (b - a) Phi(d / s); the
    # pixel's own area (a box of 1 px) is left out: it is symmetric and moves no edge
    lin = a + (b - a) * ndtr(d / blur)
    img8 = np.clip(np.round(srgb_encode(lin) + np.random.default_rng(1).normal(0, 0.5, lin.shape)), 0, 255
                   ).astype(np.uint8)
    s = CalibrationSettings()
    # where the encoded profile's gradient peaks: the closed-form step, encoded, then
    # differentiated at the edge locator's Gaussian scale (scipy on a 0.01 px grid)
    x = np.arange(-15, 15, 0.01)
    slope = np.abs(gaussian_filter1d(srgb_encode(a + (b - a) * ndtr(x / blur)), s.edge_sigma_px / 0.01, order=1))
    shift = float(x[np.argmax(slope)])
    assert shift < -0.15  # the effect the fix is for: the peak lies on the dark side
    pts_enc, _, band = _find(img8, s, linear=False)
    pts_lin, _, _ = _find(img8, s, linear=True)
    assert len(pts_lin) > 100 and not np.isfinite(band).any()  # a single edge, no band
    off_enc, off_lin = np.median(_offsets(pts_enc)), np.median(_offsets(pts_lin))
    # encoded image: the edge sits where the closed form's encoded gradient peaks (the
    # smoothing and the 8-bit rounding leave a few hundredths of a px)
    assert off_enc == pytest.approx(shift, abs=0.08)
    # linear light: on the line, to the accuracy the calibration needs (0.1 px ~ 0.2 mm)
    assert abs(off_lin) < 0.05, f"edge {off_lin:+.3f} px off the line"


def _band_scene(blur, band_px, ss=8):
    """Cloth, a dark cushion-face band ``band_px`` wide, the cushion top; linear light, 0-255.

    Shading: the cloth darkens towards the cushion (less sky light, exponential over 6 px),
    the face brightens with height (linear), the rounded nose catches light (an
    exponential highlight over 4 px of the top). Edges: foot at d = -band_px, nose at d = 0.
    """
    ys, xs = np.mgrid[0:H_IMG * ss, 0:W_IMG * ss].astype(float)
    d = _signed_distance((xs + 0.5) / ss - 0.5, (ys + 0.5) / ss - 0.5)
    cloth = 60.0 * (1 - 0.3 * np.exp(np.minimum(d + band_px, 0) / 6.0))
    face = 8.0 + 17.0 * (d + band_px) / band_px
    top = 45.0 * (1 + 0.15 * np.exp(-np.maximum(d, 0) / 4.0))
    lin = np.where(d < -band_px, cloth, np.where(d < 0, face, top)).astype(np.float32)
    lin = cv2.GaussianBlur(lin, (0, 0), blur * ss)
    return cv2.resize(lin, (W_IMG, H_IMG), interpolation=cv2.INTER_AREA)


@pytest.mark.parametrize("blur,band_px", [(0.8, 3.5), (1.2, 5.0)])
def test_band_edges_located_on_their_lines(blur, band_px):
    lin = _band_scene(blur, band_px)
    img8 = np.clip(np.round(srgb_encode(lin) + np.random.default_rng(2).normal(0, 0.7, lin.shape)), 0, 255
                   ).astype(np.uint8)
    s = replace(CalibrationSettings(), band_shading_slopes=True)  # the scene has shading beside the band
    pts, _, foot = _find(img8, s, linear=True)
    ok = np.isfinite(foot[:, 0])
    assert ok.mean() > 0.8  # the band is seen on most profiles
    nose_off, foot_off = np.median(_offsets(pts)), np.median(_offsets(foot[ok]))
    # both edges within 0.1 px of their lines (the calibration's budget: 0.1 px ~ 0.2 mm)
    assert abs(nose_off) < 0.1, f"nose {nose_off:+.3f} px"
    assert abs(foot_off + band_px) < 0.1, f"foot {foot_off + band_px:+.3f} px"
    # the same scene located on the encoded values is off by more (this scene shows the bias)
    pts_e, _, foot_e = _find(img8, s, linear=False)
    ok_e = np.isfinite(foot_e[:, 0])
    worst_e = max(abs(np.median(_offsets(pts_e))), abs(np.median(_offsets(foot_e[ok_e])) + band_px))
    assert worst_e > max(abs(nose_off), abs(foot_off + band_px)) + 0.05


def test_unknown_tone_curve_is_a_user_error():
    img = np.full((200, 320, 3), 90, np.uint8)
    with pytest.raises(FeltlabError, match="tone_curve"):
        calibrate_auto([img], table_preset("pool-9ft"), settings=replace(CalibrationSettings(), tone_curve="gamma9"))
