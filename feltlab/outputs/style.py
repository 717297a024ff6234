"""Colours shared by the annotated frames and the plots.

The palette is Okabe & Ito's colour-blind-safe set ("Color Universal Design",
J. Okabe and K. Ito, 2002/2008), skipping black (used for outlines) and the
yellow (too light on paper). Balls get colours in order of their label
so a ball keeps its colour in every picture of one shot.
"""
from __future__ import annotations

#: Okabe-Ito colours as RGB 0-255, in the order balls receive them.
OKABE_ITO_RGB: tuple[tuple[int, int, int], ...] = (
    (230, 159, 0),  # orange
    (86, 180, 233),  # sky blue
    (204, 121, 167),  # reddish purple
    (0, 114, 178),  # blue
    (213, 94, 0),  # vermillion
    (0, 158, 115),  # bluish green
    (240, 228, 66),  # yellow
)
#: The cue ball is always drawn in white (with a dark outline) -- it is the
#: one ball every viewer looks for first.
CUE_RGB = (255, 255, 255)
#: Contact markers and normals (dashed): light grey with a black outline, distinct from every ball colour.
CONTACT_RGB = (225, 225, 225)
OUTLINE_RGB = (0, 0, 0)
#: Phase shading in plots (light tints of Okabe-Ito orange / sky blue).
SLIDE_RGB = (230, 159, 0)
ROLL_RGB = (86, 180, 233)


def ball_order(balls) -> list[str]:
    """Balls in drawing order: ``cue`` first, then the rest sorted by label."""
    names = sorted({str(b) for b in balls})
    return (["cue"] if "cue" in names else []) + [b for b in names if b != "cue"]


#: A ball named after a colour is drawn in the nearest Okabe-Ito colour, so
#: "yellow" looks yellow and "blue" blue (common-sense mapping, ours).
NAME_TO_RGB: dict[str, tuple[int, int, int]] = {
    "yellow": (240, 228, 66),
    "orange": (230, 159, 0),
    "red": (213, 94, 0),
    "maroon": (213, 94, 0),
    "brown": (213, 94, 0),
    "blue": (0, 114, 178),
    "green": (0, 158, 115),
    "purple": (204, 121, 167),
    "pink": (204, 121, 167),
    "violet": (204, 121, 167),
    "black": (100, 100, 100),
}
#: On white paper the Okabe-Ito yellow is too faint; plots use this darker yellow.
PAPER_YELLOW = (190, 170, 0)


def ball_colours(balls, on_paper: bool = False) -> dict[str, tuple[int, int, int]]:
    """Label -> RGB (0-255): ``cue`` white on video (black on paper); a colour-named ball its
    Okabe-Ito colour (every ball of that colour family: a full rack shares colours, and
    :func:`ball_dashes` tells them apart), the rest the unused Okabe-Ito colours in turn.

    >>> ball_colours(["red", "cue", "yellow"])["cue"]
    (255, 255, 255)
    >>> ball_colours(["red", "cue"], on_paper=True)["cue"]
    (0, 0, 0)
    >>> ball_colours(["blue", "blue-stripe"])["blue-stripe"]
    (0, 114, 178)
    """
    out: dict[str, tuple[int, int, int]] = {}
    used: set[tuple[int, int, int]] = set()
    order = ball_order(balls)
    for b in order:
        if b == "cue":
            out[b] = OUTLINE_RGB if on_paper else CUE_RGB
            continue
        rgb = NAME_TO_RGB.get(b.split("-")[0].lower())
        if rgb is not None:  # its colour family, even when shared (line styles tell them apart)
            out[b] = rgb
            used.add(rgb)
    i = 0
    for b in order:
        if b in out:
            continue
        free = [c for c in OKABE_ITO_RGB if c not in used]
        rgb = free[0] if free else OKABE_ITO_RGB[i % len(OKABE_ITO_RGB)]
        i += 1
        out[b] = rgb
        used.add(rgb)
    if on_paper:
        out = {b: (PAPER_YELLOW if c == (240, 228, 66) else c) for b, c in out.items()}
    return out


#: Line styles (matplotlib) for balls that share a drawing colour, in turn.
DASHES: tuple[str, ...] = ("-", "--", ":", "-.")


def ball_dashes(balls, on_paper: bool = True) -> dict[str, str]:
    """Label -> matplotlib line style: the first ball of a drawing colour solid, the next
    ones sharing it (a stripe, a second red, a maroon beside a red) dashed, dotted, dash-dot.

    >>> d = ball_dashes(["cue", "red", "red-stripe", "maroon", "yellow"])
    >>> d["cue"], d["maroon"], d["red"], d["red-stripe"], d["yellow"]
    ('-', '-', '--', ':', '-')
    """
    cols = ball_colours(balls, on_paper=on_paper)
    seen: dict[tuple[int, int, int], int] = {}
    out: dict[str, str] = {}
    for b in ball_order(balls):
        k = seen.get(cols[b], 0)
        seen[cols[b]] = k + 1
        out[b] = DASHES[k % len(DASHES)]
    return out


def mpl(rgb: tuple[int, int, int]) -> tuple[float, float, float]:
    """RGB 0-255 -> matplotlib 0-1 tuple."""
    return tuple(c / 255.0 for c in rgb)  # type: ignore[return-value]


def bgr(rgb: tuple[int, int, int]) -> tuple[int, int, int]:
    """RGB -> OpenCV's BGR order."""
    return (int(rgb[2]), int(rgb[1]), int(rgb[0]))


def decimals_for(sigma: float) -> int:
    """Decimals that show ``sigma`` to 1 significant digit (2 when it starts with 1 or 2), clipped to 2..4.

    >>> decimals_for(0.0051), decimals_for(0.018), decimals_for(0.2)
    (3, 3, 2)
    """
    import math

    if not (sigma > 0 and math.isfinite(sigma)):
        return 3
    exp = math.floor(math.log10(sigma))
    lead = sigma / 10 ** exp
    d = -exp + (1 if lead < 3 else 0)
    return max(2, min(4, d))
