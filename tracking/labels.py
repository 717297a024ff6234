"""Ball names from colour: ``cue``, then object balls by colour name.

Each track's colour is the median over its detections of the detector's
colour summary (tracking/detect.py: mean RGB, hue/saturation/value of the
coloured pixels, white and dark pixel fractions inside 0.75 radius).

Names (hue in degrees on the HSV circle, 0 = red; sat/val 0..1):

============  =======================================================
``cue``       the whitest ball (largest white fraction, > 0.6; failing that the
              whitest unsaturated one with white fraction > 0.2)
``black``     dark pixels cover > 45% of the disc
``red``       hue < 12 or >= 345, value >= 0.45
``maroon``    red or orange hue with value < 0.45 (maroon / brown balls); also the
              darker of a pool set's two red-hue balls of one pattern (MAROON_PAIR_RATIO)
``orange``    hue 12-40, value >= 0.45
``yellow``    hue 40-70
``green``     hue 70-170
``blue``      hue 170-255
``purple``    hue 255-310
``pink``      hue 310-345, or a red hue with saturation < 0.45
``white``     a second mostly-white ball in a carom set (see below)
``ball``      no usable colour (never seen well)
============  =======================================================

A second mostly-white ball: pool and snooker sets hold one white ball, the
cue (common practice), while a carom set holds two (one of them spotted).
So outside carom a second white-looking ball is a stripe ball whose white
cap faces the camera (its band lies outside the inner 0.75-radius disc the
colour is sampled from: a band of half-height 0.55 R shows only beyond
0.83 R from the centre when seen from above). It is named a stripe
(``COLOUR-stripe`` from the frames where its band showed, else ``stripe``)
when the table is not carom and either (a) the set shows other stripes,
(b) the ball itself showed its band (10th percentile of its white fraction
below ``BAND_SEEN_WHITE_P10``: in a tenth of the frames over half the disc
was not white), or (c) the table is known to be a pocketed one.
With the table unknown and no stripe in sight it stays ``white``.

A monochrome clip (a grey-level camera: no colour anywhere,
:func:`tracking.appearance.is_monochrome`) carries no hue, and a ball's grey
level does not tell its colour (a yellow and a white ball, or a red and a
green one, can read alike). There the cue is the struck ball among the
brightest (mean grey level of the inner disc within ``MONO_CUE_VAL_FRAC`` of the brightest ball's;
a white ball reflects most, common practice), else the brightest;
``black`` keeps its rule (dark pixels over most of the disc), and every other
ball is ``shade-1``, ``shade-2``, ... from the lightest to the darkest (that
grey level), without a stripe suffix (a stripe's band and caps can read alike in
grey).

A non-cue ball whose median white fraction is >= ``STRIPE_WHITE_FRAC`` (or
whose 90th percentile is >= ``STRIPE_WHITE_P90``) gets the ``-stripe`` suffix (a stripe ball shows its white caps; a solid shows only
its small number circle). A second ball with the same name gets ``-2``
(``-3`` ...). The hue bands are our own split of the colour circle at the
usual boundaries between colour words (common practice), checked against
the rendered colours of the ball sets we know, not a standard.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

#: Minimum median white fraction for the cue (a white ball's inner disc is
#: almost all white; a stripe shows colour too). Common practice.
CUE_WHITE_FRAC = 0.6
#: Median white fraction that marks a stripe ball (a solid's number circle
#: covers at most ~1/3 of the inner disc, and only when facing the camera).
STRIPE_WHITE_FRAC = 0.3
#: A rolling stripe ball shows a white cap in some frames: 90th percentile of
#: the white fraction at or above this marks a stripe even when the coloured
#: band mostly faces the camera (a solid's number circle fills at most ~0.45
#: of the inner disc: circle half the ball's diameter, common practice).
STRIPE_WHITE_P90 = 0.55
BLACK_DARK_FRAC = 0.45
#: A white ball shows at least ~0.9 white inside 0.75 R whichever way it turns
#: (a carom spot is small); a stripe whose band turns towards the camera drops
#: under half. 10th percentile of the white fraction below this: the band was seen.
BAND_SEEN_WHITE_P10 = 0.45
#: When no track reaches CUE_WHITE_FRAC: a track with at least this median
#: white fraction and a median saturation under CUE_FALLBACK_SAT (the HSV
#: saturation below which detection counts a pixel white,
#: DetectionSettings.white_saturation) may still be the cue.
CUE_FALLBACK_WHITE_FRAC = 0.2
CUE_FALLBACK_SAT = 0.28
#: Dim light (no white pixels anywhere): the cue is the unsaturated ball whose
#: darkest colour channel is at least this factor brighter than any other
#: ball's (our choice: a white ball reflects ~2-4x more than a coloured one in
#: that ball's dark channel; pale pastel sets may not separate and stay unnamed).
CUE_DIM_MARGIN = 1.25

#: A white-looking ball whose rim (0.80-0.95 R) is coloured over at least this
#: median fraction shows a stripe's band: a stripe ball resting cap-up (the
#: band of half-height 0.55 R lies beyond 0.83 R seen from above; a white ball's
#: rim is white or cloth-coloured). Our choice, half a band seen edge-on.
RIM_BAND_FRAC = 0.25
#: A white-looking ball whose rim shows colour in at most this fraction even in
#: its most coloured tenth of sharp frames never showed a band: a white ball.
RIM_NO_BAND_FRAC = 0.08
#: Two cue candidates whose whiteness differs by less than this are told apart
#: by which moved first (the struck ball); ours.
CUE_WHITE_TIE = 0.1
#: Distance (mm) from its first position at which a ball counts as moving:
#: well above tracking noise (< 1 mm), well under a ball's radius.
MOVE_START_MM = 10.0
#: A coloured ball whose rim (0.80-0.95 R) is white over at least this median
#: fraction shows a stripe's white caps (measured: solids 0.00-0.14, stripes
#: 0.31-0.64 on renders by two engines; a cap reaches the rim on both sides of
#: the axis whenever the band is not facing the camera).
RIM_CAP_WHITE_FRAC = 0.22
#: Detections smeared by more than this fraction of the radius do not count
#: for the rim colour (tracking/appearance.py).
RIM_MAX_STREAK_FRAC = 0.3

#: Value (HSV, 0..1) under which a red or orange hue is maroon, on the
#: detector's raw colours (ours, from rendered sets under ordinary light).
MAROON_VAL = 0.45
#: The same on light-free colours (tracking/appearance.py), where a white
#: ball's lit top reads 0.94: a ball then reads about its own sRGB value -
#: red (200, 25, 25) 0.78, maroon (120, 25, 35) 0.47 (common ball colours,
#: from memory) - and the split lies between them.
MAROON_VAL_LIGHT_FREE = 0.6
#: A pool set holds one red and one maroon ball of each pattern (solid 3 and 7,
#: stripe 11 and 15; common practice). Two balls of one pattern both named red
#: (or both maroon) whose values differ by this ratio or more are that pair: the
#: darker is maroon. Red 0.78 vs maroon 0.47 (from memory, above) is a ratio of
#: 0.6; two balls of one colour under the scene's light taken out read within
#: about 10 % of each other, so the split lies between (ours).
MAROON_PAIR_RATIO = 0.8

#: Monochrome clips: balls whose grey level is at least this fraction of
#: the brightest ball's may be the cue (the first of them to move is; ours:
#: a white ball's grey level can be matched by a yellow one within ~10 %,
#: BT.601 luma of sRGB white 255 vs a ball yellow (230, 190, 40) 0.78, from memory).
MONO_CUE_VAL_FRAC = 0.85

HUE_BANDS = [  # (name, hue from, hue to) degrees
    ("red", 345.0, 360.0), ("red", 0.0, 12.0), ("orange", 12.0, 40.0), ("yellow", 40.0, 70.0),
    ("green", 70.0, 170.0), ("blue", 170.0, 255.0), ("purple", 255.0, 310.0), ("pink", 310.0, 345.0),
]


def colour_name(hue_deg: float, sat: float, val: float, dark_frac: float, maroon_val: float = MAROON_VAL) -> str:
    """Colour word for a solid colour (no cue/stripe logic).

    maroon_val: value below which a red/orange hue is maroon (MAROON_VAL for
    the detector's raw colours, MAROON_VAL_LIGHT_FREE for light-free ones).

    >>> colour_name(274.0, 0.75, 0.55, 0.1), colour_name(47.0, 0.9, 0.95, 0.0)
    ('purple', 'yellow')
    """
    if not np.isfinite(dark_frac):
        return "ball"
    if dark_frac > BLACK_DARK_FRAC or not np.isfinite(hue_deg):
        return "black" if dark_frac > 0.2 or not np.isfinite(hue_deg) else "ball"
    h = float(hue_deg) % 360.0
    name = next(n for n, a, b in HUE_BANDS if a <= h < b)
    if name in ("red", "orange") and np.isfinite(val) and val < maroon_val:
        return "maroon"
    if name == "red" and np.isfinite(sat) and sat < 0.45:
        return "pink"
    return name


def _circ_median_hue(h: np.ndarray) -> float:
    h = h[np.isfinite(h)]
    if len(h) == 0:
        return float("nan")
    a = np.radians(h)
    return float(np.degrees(np.arctan2(np.median(np.sin(a)), np.median(np.cos(a)))) % 360)


#: Colour summary columns; a detection table that also holds the light-free
#: ones (tracking/appearance.py, suffix ``_n``) is named from those.
_COLOUR = ("r", "g", "b", "hue_deg", "sat", "val", "white_frac", "dark_frac")


def _colour_columns(g: pd.DataFrame) -> dict[str, str]:
    """Column to read for each colour quantity: the light-free one where the detections carry it."""
    light_free = "light_gain" in g and np.isfinite(g["light_gain"].to_numpy(float)).any()
    return {k: (k + "_n" if light_free and k + "_n" in g else k) for k in _COLOUR}


def _sharp(g: pd.DataFrame, col: str) -> np.ndarray:
    """Rows of a track whose rim value ``col`` counts: finite, and not smeared by more than
    RIM_MAX_STREAK_FRAC of the radius (a smeared rim mixes the ball with the cloth)."""
    keep = np.isfinite(g[col].to_numpy(float))
    if "streak_px" in g and "radius_expected_px" in g:
        st = np.nan_to_num(g["streak_px"].to_numpy(float), nan=0.0)
        keep &= st <= RIM_MAX_STREAK_FRAC * g["radius_expected_px"].to_numpy(float)
    return keep


def _rim(g: pd.DataFrame) -> tuple[float, float, float, float]:
    """(median and 90th percentile of the rim's coloured fraction, circular median rim hue deg,
    median white fraction of the rim) over a track's sharp detections (:func:`_sharp`); NaN
    where the detections carry no rim colour.
    """
    nan = float("nan")
    col, p90, hue = nan, nan, nan
    if "rim_col_frac" in g:
        keep = _sharp(g, "rim_col_frac")
        if keep.any():
            frac = g["rim_col_frac"].to_numpy(float)
            col, p90 = float(np.median(frac[keep])), float(np.percentile(frac[keep], 90))
            hue = _circ_median_hue(g["rim_hue_deg"].to_numpy(float)[keep & (frac >= RIM_BAND_FRAC)])
    white = nan
    if "rim_white_frac" in g:
        keep = _sharp(g, "rim_white_frac")
        if keep.any():
            white = float(np.median(g["rim_white_frac"].to_numpy(float)[keep]))
    return col, p90, hue, white


def _move_start(g: pd.DataFrame) -> float:
    """Time (s) a track first lies MOVE_START_MM from where it was first seen; NaN if never (or no positions)."""
    if not {"t_s", "x_mm", "y_mm"} <= set(g.columns) or len(g) < 2:
        return float("nan")
    g = g.sort_values("t_s")
    xy = g[["x_mm", "y_mm"]].to_numpy(float)
    x0 = np.nanmedian(xy[:3], axis=0)
    far = np.hypot(*(xy - x0).T) > MOVE_START_MM
    return float(g["t_s"].to_numpy(float)[np.argmax(far)]) if far.any() else float("nan")


def _whiteish(r: pd.Series) -> bool:
    """A mostly white, unsaturated disc (a cue-like ball)."""
    return bool(r["white_frac"] >= CUE_WHITE_FRAC and (not np.isfinite(r["hue_deg"]) or r["sat"] < 0.25))


def _is_stripe(r: pd.Series) -> bool:
    """Enough white on a coloured ball to be a stripe: inside the disc, or at its rim (module docstring)."""
    rim_white = r.get("rim_white", float("nan"))
    return bool(r["white_frac"] >= STRIPE_WHITE_FRAC or r["white_p90"] >= STRIPE_WHITE_P90
                or (np.isfinite(rim_white) and rim_white >= RIM_CAP_WHITE_FRAC))


def _split_red_maroon_pair(info: pd.DataFrame, base: list[str]) -> None:
    """Rename in place the darker of exactly two same-pattern balls both named red (or both
    maroon) to maroon (the brighter to red) when their values differ by MAROON_PAIR_RATIO:
    a pool set's red/maroon pair, whose absolute value depends on the light
    (MAROON_VAL_LIGHT_FREE alone misses a maroon stripe lit brighter than usual)."""
    for suffix in ("", "-stripe"):
        for colour in ("red", "maroon"):
            idx = [k for k, b in enumerate(base) if b == colour + suffix]
            if len(idx) != 2 or any(b in ("red" + suffix, "maroon" + suffix) for k, b in enumerate(base)
                                    if k not in idx):
                continue
            val = info["val"].to_numpy(float)[idx]
            if not np.isfinite(val).all() or val.max() <= 0:
                continue
            if val.min() <= MAROON_PAIR_RATIO * val.max():
                dark, bright = (idx[0], idx[1]) if val[0] < val[1] else (idx[1], idx[0])
                base[dark], base[bright] = "maroon" + suffix, "red" + suffix


def _mono_names(info: pd.DataFrame) -> tuple[list[str], list[str]]:
    """Names of a monochrome clip's tracks (module docstring): cue, black, shade-1.. (lightest first)."""
    # grey level: the mean of the inner disc (the "coloured pixels" value leaves out a white ball's white)
    val = info[["r", "g", "b"]].mean(axis=1).to_numpy(float)
    lit = np.where(np.isfinite(val), val, -np.inf)
    n = len(info)
    cue = None
    if n and np.isfinite(lit.max()):
        cand = np.nonzero(lit >= MONO_CUE_VAL_FRAC * lit.max())[0]
        cue = int(cand[np.argmax(lit[cand])])
        starts = info["move_start_s"].to_numpy(float)[cand]
        if len(cand) >= 2 and np.isfinite(starts).any():
            order = np.argsort(np.where(np.isfinite(starts), starts, np.inf))
            if not np.isfinite(starts[order[1]]) or starts[order[0]] < starts[order[1]]:
                cue = int(cand[order[0]])
    final = [""] * n
    pattern = ["solid"] * n
    if cue is not None:
        final[cue] = "cue"
    rest = [k for k in range(n) if k != cue]
    dark = [k for k in rest if np.isfinite(info["dark_frac"].iloc[k]) and info["dark_frac"].iloc[k] > BLACK_DARK_FRAC]
    for j, k in enumerate(sorted(dark, key=lambda k: -int(info["n_detections"].iloc[k]))):
        final[k] = "black" if j == 0 else f"black-{j + 1}"
    shades = sorted((k for k in rest if k not in dark), key=lambda k: -lit[k])
    for j, k in enumerate(shades):
        final[k] = f"shade-{j + 1}"
    return final, pattern


def label_tracks(det: pd.DataFrame, track_col: str = "track",
                 table: str | None = None, monochrome: bool = False) -> tuple[dict[int, str], pd.DataFrame]:
    """Name every track from its detections' colours.

    table: the table preset name when known ("carom..." allows a second white
    ball; any other name means a pool/snooker set with one white ball); None:
    decide from the balls seen (module docstring). monochrome: the clip has
    no colour (grey-level camera): names from lightness (module docstring).

    Returns ({track id: name}, balls DataFrame with columns ball, r, g, b,
    pattern, hue_deg, white_frac, n_detections).
    """
    rows = []
    for tid, g in det.groupby(track_col):
        c = _colour_columns(g)
        hue = g[c["hue_deg"]].to_numpy(float)
        rim_frac, rim_p90, rim_hue, rim_white = _rim(g)
        rows.append({
            "track": int(tid),
            "r": float(g[c["r"]].median()), "g": float(g[c["g"]].median()), "b": float(g[c["b"]].median()),
            "hue_deg": _circ_median_hue(hue),
            "sat": float(g[c["sat"]].median()), "val": float(g[c["val"]].median()),
            "white_frac": float(g[c["white_frac"]].median()), "dark_frac": float(g[c["dark_frac"]].median()),
            "white_p90": float(g[c["white_frac"]].quantile(0.9)),
            "white_p10": float(g[c["white_frac"]].quantile(0.1)),
            # saturation / value of the frames where coloured pixels were seen (the band of a stripe)
            "sat_col": float(g.loc[np.isfinite(hue), c["sat"]].median()),
            "val_col": float(g.loc[np.isfinite(hue), c["val"]].median()),
            "rim_col": rim_frac, "rim_p90": rim_p90, "rim_hue": rim_hue, "rim_white": rim_white,
            "maroon_val": MAROON_VAL_LIGHT_FREE if c["val"].endswith("_n") else MAROON_VAL,
            "move_start_s": _move_start(g),
            "n_detections": int(len(g)),
        })
    info = pd.DataFrame(rows)
    names: dict[int, str] = {}
    if info.empty:
        return names, pd.DataFrame(columns=["ball", "r", "g", "b", "pattern", "hue_deg", "white_frac", "n_detections"])
    if monochrome:
        final, pattern = _mono_names(info)
        for k, r in info.iterrows():
            names[int(r["track"])] = final[k]
        balls = info.assign(ball=final, pattern=pattern)[
            ["ball", "r", "g", "b", "pattern", "hue_deg", "white_frac", "n_detections"]]
        return names, balls.reset_index(drop=True)
    # Whiteness: white fraction minus colourfulness of the rest.
    whiteness = info["white_frac"] - 0.2 * info["sat"].fillna(0)
    # A band at the rim marks a stripe seen cap-up, never the cue (carom sets have no stripes).
    carom = table is not None and str(table).lower().startswith("carom")
    banded = (info["rim_col"].fillna(0.0) >= RIM_BAND_FRAC) & (not carom)
    white_enough = info["white_frac"] >= CUE_WHITE_FRAC
    if (white_enough & ~banded).any():
        white_enough &= ~banded
    cue_idx = None
    if white_enough.any():
        cue_idx = int(whiteness[white_enough].idxmax())
        # Two balls equally white (a carom set's two whites, or a stripe whose band never showed):
        # the cue ball is the one struck, the first to move (common practice).
        close = white_enough & (whiteness >= whiteness[white_enough].max() - CUE_WHITE_TIE)
        if close.sum() >= 2:
            starts = info.loc[close, "move_start_s"]
            if starts.notna().any() and starts.min() < starts.drop(starts.idxmin()).fillna(np.inf).min():
                cue_idx = int(starts.idxmin())
    else:
        # No track is white enough: a fast cue ball smeared over the cloth at a
        # low frame rate, or dim / warm light. A shot has a cue ball (common
        # practice), and it stays the least saturated ball, so the whitest of
        # the unsaturated tracks with some white pixels is taken.
        cand = (info["white_frac"] >= CUE_FALLBACK_WHITE_FRAC) & (info["sat"] < CUE_FALLBACK_SAT)
        if cand.any():
            cue_idx = int(whiteness[cand].idxmax())
        elif len(info) >= 2:
            # Dim light: no pixel reaches the "white" value. A white ball
            # reflects every channel, so under the same light its darkest
            # channel is the brightest of all balls' (a coloured ball is dark
            # in at least one channel); it is taken only when unsaturated and
            # clearly ahead of every other ball.
            lo = info[["r", "g", "b"]].min(axis=1).to_numpy(float)
            k = int(np.argmax(lo))
            rest = np.delete(lo, k)
            if info["sat"].iloc[k] < CUE_FALLBACK_SAT and lo[k] >= CUE_DIM_MARGIN * rest.max():
                cue_idx = int(info.index[k])
    base = []
    pattern = []
    whiteish = [k for k, r in info.iterrows() if k != cue_idx and _whiteish(r)]
    for k, r in info.iterrows():
        if k == cue_idx:
            base.append("cue")
            pattern.append("solid")
            continue
        if k in whiteish:
            if carom:
                base.append("white")
                pattern.append("solid")
                continue
            others_striped = any(_is_stripe(q) for j, q in info.iterrows() if j != k and j != cue_idx and j not in whiteish)
            band_seen = bool(np.isfinite(r["white_p10"]) and r["white_p10"] < BAND_SEEN_WHITE_P10
                             and np.isfinite(r["hue_deg"]))
            # A stripe's band covers 55 % of its surface (a zone of height 1.1 R): whichever way
            # it turns, the band shows across the disc or at the rim. A white ball whose rim
            # never shows colour in its sharp frames is a second white ball (a carom or training
            # ball on a pocketed table), not a stripe.
            never_banded = bool(np.isfinite(r["rim_p90"]) and r["rim_p90"] < RIM_NO_BAND_FRAC and not band_seen)
            if never_banded or (table is None and not (others_striped or band_seen or banded[k])):
                base.append("white")
                pattern.append("solid")
                continue
            # a stripe seen cap-up: name it by the colour of the frames where its band showed,
            # else by its rim, where the band of a cap-up stripe shows
            if band_seen:
                name = colour_name(r["hue_deg"], r["sat_col"], r["val_col"], 0.0, r["maroon_val"])
            elif banded[k] and np.isfinite(r["rim_hue"]):
                name = colour_name(r["rim_hue"], 1.0, 1.0, 0.0)
            else:
                name = "ball"
            base.append("stripe" if name in ("ball", "black") else name + "-stripe")
            pattern.append("stripe")
            continue
        name = colour_name(r["hue_deg"], r["sat"], r["val"], r["dark_frac"], r["maroon_val"])
        stripe = _is_stripe(r) and name != "ball"
        base.append(name + ("-stripe" if stripe else ""))
        pattern.append("stripe" if stripe else "solid")
    if not (table is not None and str(table).lower().startswith("snooker")):
        _split_red_maroon_pair(info, base)
    # Duplicates: order by number of detections (the longest-seen keeps the plain name).
    order = np.argsort(-info["n_detections"].to_numpy(), kind="stable")
    seen: dict[str, int] = {}
    final = [""] * len(info)
    for k in order:
        b = base[k]
        seen[b] = seen.get(b, 0) + 1
        final[k] = b if seen[b] == 1 else f"{b}-{seen[b]}"
    for k, r in info.iterrows():
        names[int(r["track"])] = final[k]
    balls = info.assign(ball=final, pattern=pattern)[
        ["ball", "r", "g", "b", "pattern", "hue_deg", "white_frac", "n_detections"]]
    return names, balls.reset_index(drop=True)
