"""Where a ball touches a cushion: the horizontal centre distance at first touch.

Table frame (mm): a cushion's nose line is the edge of the playing surface (the
table's length and width are measured between noses), and the nose sits at
height h above the cloth. A ball of radius R has its centre at height R, so it
first touches the nose when the 3-D distance from its centre to the nose line
is R, i.e. when the horizontal distance is

    d = sqrt(R^2 - (h - R)^2)

(the contact point lies (h - R) above the centre). With the pool nose at
63.5 % of the ball's diameter (WPA range 62.5-64.5 %, from memory; shared
REFERENCES.md) d = 0.961 R: 27.45 mm for a 57.15 mm ball, 1.12 mm inside
the "one radius from the nose line" of a flat wall. A ball crossing the
cushion at 1 m/s meets it 1.1 ms later than that flat-wall rule says (a
quarter frame at 240 frames/s).

>>> round(contact_distance_mm(28.575, 36.5125), 3)
27.45
>>> contact_distance_mm(30.0, 30.0)  # nose at the equator: a flat wall
30.0
"""
from __future__ import annotations

import math

#: Cushion nose height as a fraction of ball diameter when the table gives
#: none: ~63.5% (WPA range 62.5-64.5%, from memory; shared REFERENCES.md).
NOSE_HEIGHT_FRACTION = 0.635


def contact_distance_mm(radius_mm: float, nose_height_mm: float | None) -> float:
    """Horizontal distance (mm) from the cushion-nose line to the ball centre at first touch.

    radius_mm: ball radius R; nose_height_mm: nose height h above the cloth
    (None: NOSE_HEIGHT_FRACTION x 2R). Needs 0 < h < 2R (the nose between
    the cloth and the ball's top); raises ValueError otherwise.
    """
    R = float(radius_mm)
    h = NOSE_HEIGHT_FRACTION * 2.0 * R if nose_height_mm is None else float(nose_height_mm)
    if not (R > 0 and 0.0 < h < 2.0 * R):
        raise ValueError(f"cushion nose height {h} mm must lie between the cloth and the top of a "
                         f"{2 * R} mm ball")
    return math.sqrt(R * R - (h - R) ** 2)
