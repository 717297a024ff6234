"""A thin dark line at a cushion nose whose face the camera cannot see: a shadow or groove on the cloth.

Where the camera's sight line to a nose is steeper than the face's lean, the
face is hidden, so a line darker than both the cloth and the cushion top just
inward of the nose lies on the cloth (a lamp's shadow of the nose, a groove):
the nose is its cushion-side edge. Narrower than the blur, the line is not
resolved as a band; it pulls the single-edge fit inward by about its area over
the step's height (first order: d/dx of A Phi(x/s) + a phi(x/s)/s peaks at
x ~ -a/A).

Checks against closed forms and an independent blur:
- the truth is the line we draw: a sharp cloth / dark line / cushion-top
  profile along x = x0 + slope (y - h/2), area-sampled at 8x8 sub-pixels and
  blurred by scipy.ndimage.gaussian_filter (a Gaussian PSF of known sigma,
  independent of the tool's normal-CDF model), with seeded sensor noise;
- no shift where there is no line, on steps whose shape is not a Gaussian-
  blurred one: an unsharp mask (x + k (x - blur(x))), whose halo is darker
  than the darker plateau on one side of the step only and brighter than the
  brighter one on the other, with the cloth the brighter and the darker side
  (the halo then lies where a shadow would); and a 1/2.2 power tone curve
  (close to sRGB / Rec. 709, IEC 61966-2-1 / ITU-R BT.709) after a blur in
  linear light: lopsided but monotone, no dip.
"""
import numpy as np
import pytest
from scipy.ndimage import gaussian_filter

import tracking._table_edges as te
from tracking.settings import CalibrationSettings

H, W_IMG = 192, 96
SLOPE = 0.01  # px across per row: the line crosses pixel phases along the side


def _image(x0: float, cloth: float, top: float, line_w: float = 0.0, line: float = 0.0, blur: float = 1.0,
           noise: float = 0.5, seed: int = 0, sharpen: float = 0.0, gamma: float | None = None) -> np.ndarray:
    """Grey image: cloth (x < x0 - line_w) | dark line | cushion top (x >= x0), blurred, noisy."""
    rng = np.random.default_rng(seed)
    sup = 8
    ys, xs = np.mgrid[0:H * sup, 0:W_IMG * sup]
    xc = (xs + 0.5) / sup - 0.5
    yc = (ys + 0.5) / sup - 0.5
    edge = x0 + SLOPE * (yc - H / 2)
    img = np.where(xc < edge, cloth, top).astype(float)
    if line_w > 0:
        img = np.where((xc >= edge - line_w) & (xc < edge), line, img)
    img = img.reshape(H, sup, W_IMG, sup).mean(axis=(1, 3))  # pixel = area mean (OpenCV centres)
    if gamma:  # blur in linear light, stored through a power-law tone curve
        img = 255.0 * gaussian_filter((img / 255.0) ** gamma, blur, mode="nearest") ** (1.0 / gamma)
    else:
        img = gaussian_filter(img, blur, mode="nearest")
    if sharpen:
        img = img + sharpen * (img - gaussian_filter(img, 1.5, mode="nearest"))
    return (img + rng.normal(0.0, noise, img.shape)).astype(np.float32)


def _side_offset(img: np.ndarray, x0: float, face_px: float | None) -> float:
    """Median signed distance (px, + outward onto the cushion) of the side's nose points from the drawn nose."""
    st = CalibrationSettings()
    p0 = np.array([x0 + SLOPE * (12 - H / 2) - 2.0, 12.0])
    p1 = np.array([x0 + SLOPE * (H - 12 - H / 2) - 2.0, H - 12.0])
    found, _, _ = te.edge_points_along(img, p0, p1, np.array([1.0, -SLOPE]), [(0.0, 1.0)], 24.0, 24.0, 10.0, st,
                                       detect=img, face_px=face_px)
    assert len(found) >= 60
    d = (found[:, 0] - (x0 + SLOPE * (found[:, 1] - H / 2))) / np.hypot(1.0, SLOPE)
    return float(np.median(d))


@pytest.mark.parametrize("line_w,line,blur", [(0.75, 70.0, 1.3), (1.0, 90.0, 1.0), (0.5, 60.0, 1.0)])
def test_shadow_line_on_the_cloth_side_is_taken_off(line_w, line, blur):
    x0 = 48.3
    img = _image(x0, 110.0, 95.0, line_w, line, blur, seed=int(10 * line_w + blur * 7))
    plain = _side_offset(img, x0, None)  # no line model (no camera yet)
    assert plain < -0.6  # the scenario matters: the line pulls the edge well inward
    got = _side_offset(img, x0, 0.0)  # face hidden: a line there lies on the cloth
    # the width is set by the fit, which tells it only roughly under the blur
    assert abs(got) < 0.4 and abs(got) < abs(plain) / 3, (plain, got)


@pytest.mark.parametrize("kind", ["sharpened", "sharpened, dark cloth", "tone curve", "tone curve, dark cloth"])
def test_plain_step_gets_no_shadow_line(kind):
    # seeds fixed before looking (40-42)
    x0 = 48.3
    cloth, top = (80.0, 110.0) if "dark cloth" in kind else (110.0, 80.0)
    kw = {"sharpen": 0.8} if kind.startswith("sharpened") else {"gamma": 2.2}
    for seed in (40, 41, 42):
        img = _image(x0, cloth, top, seed=seed, **kw)
        assert _side_offset(img, x0, 0.0) == pytest.approx(_side_offset(img, x0, None), abs=1e-9), seed


def test_shadow_line_of_unknown_width():
    """A face-hidden side's line of unknown width, modelled as SHADOW_LINE_PX wide."""
    st = CalibrationSettings()
    offs = np.arange(-15.0, 15.0 + 1e-9, st.profile_step_px)
    fine = np.arange(-25.0, 25.0, 0.01)
    rng = np.random.default_rng(5)
    for w_true in (0.5, 1.25):
        # profiles walk outward: cloth (x < -w), line, cushion top (x >= 0); Gaussian blur 1.0 px (scipy)
        sharp = np.where(fine < 0, 110.0, 95.0)
        sharp = np.where((fine >= -w_true) & (fine < 0), 70.0, sharp)
        blurred = gaussian_filter(sharp, 1.0 / 0.01)
        nose = rng.uniform(-0.5, 0.5, 160)
        prof = np.array([np.interp(offs - x, fine, blurred) for x in nose]) + rng.normal(0, 0.5, (160, len(offs)))
        start = te.fit_single_edges(prof, offs, nose.copy(), nose - 10.0, nose + 10.0)
        info: dict = {}
        shift = te.face_line_shift(prof, offs, start, 0.0, st, info)
        assert info["taken"]
        before = float(np.median(start - nose))
        after = float(np.median(start + shift - nose))
        assert before < -0.5 and abs(after) < 0.4, (w_true, before, after)


def test_without_the_shadow_model_the_bias_stays(monkeypatch):
    """The same image with the face-hidden line model off keeps the inward pull (the checks above can fail)."""
    monkeypatch.setattr(te, "SHADOW_LINE", False)
    x0 = 48.3
    img = _image(x0, 110.0, 95.0, 0.75, 70.0, 1.3, seed=int(10 * 0.75 + 1.3 * 7))
    assert _side_offset(img, x0, 0.0) < -0.6
