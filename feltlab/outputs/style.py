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
#: Contact markers and normals.
CONTACT_RGB = (240, 228, 66)  # Okabe-Ito yellow: stands out on green, blue and red cloth
OUTLINE_RGB = (0, 0, 0)
#: Phase shading in plots (light tints of Okabe-Ito orange / sky blue).
SLIDE_RGB = (230, 159, 0)
ROLL_RGB = (86, 180, 233)


def ball_order(balls) -> list[str]:
    """Balls in drawing order: ``cue`` first, then the rest sorted by label."""
    names = sorted({str(b) for b in balls})
    return (["cue"] if "cue" in names else []) + [b for b in names if b != "cue"]


def ball_colours(balls, on_paper: bool = False) -> dict[str, tuple[int, int, int]]:
    """Label -> RGB (0-255). ``cue`` is white on video (black on paper); others cycle through Okabe-Ito.

    >>> ball_colours(["red", "cue", "yellow"])["cue"]
    (255, 255, 255)
    >>> ball_colours(["red", "cue"], on_paper=True)["cue"]
    (0, 0, 0)
    """
    out: dict[str, tuple[int, int, int]] = {}
    i = 0
    for b in ball_order(balls):
        if b == "cue":
            out[b] = OUTLINE_RGB if on_paper else CUE_RGB
        else:
            out[b] = OKABE_ITO_RGB[i % len(OKABE_ITO_RGB)]
            i += 1
    return out


def mpl(rgb: tuple[int, int, int]) -> tuple[float, float, float]:
    """RGB 0-255 -> matplotlib 0-1 tuple."""
    return tuple(c / 255.0 for c in rgb)  # type: ignore[return-value]


def bgr(rgb: tuple[int, int, int]) -> tuple[int, int, int]:
    """RGB -> OpenCV's BGR order."""
    return (int(rgb[2]), int(rgb[1]), int(rgb[0]))
