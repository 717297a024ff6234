"""Renderer defaults and limits, each with where it comes from.

Units: mm, s, px; colours sRGB 0-255. Nothing here is tuned to any one clip:
they are plausible physical values, and scenarios vary them.
"""
from __future__ import annotations

# --- clip limits (project requirements) -------------------------------------
FPS_RANGE = (25.0, 1000.0)
MAX_RESOLUTION = (1920, 1080)
MAX_DURATION_S = 30.0
#: A break shot reaches 11-13 m/s (Physics of Pool FAQ, Colorado State Univ.).
MAX_SPEED_MM_S = 14000.0
CODECS = ("mp4v", "ffv1", "png")

# --- table furniture ---------------------------------------------------------
#: Cushion top width from nose to rail (mm): ~2 in, common practice.
CUSHION_WIDTH_MM = 50.0
#: Wooden rail width beyond the cushion (mm): 4-6 in, common practice.
RAIL_WIDTH_MM = 125.0
#: Sights sit 3 11/16 in (93.7 mm) behind the cushion nose (WPA, secondary copy).
SIGHT_BEHIND_NOSE_MM = 93.7
SIGHT_RADIUS_MM = 7.0  # ~1/2 in diamond/dot inlay, common practice
#: Nose height for presets without a published one (snooker): ~63.5 % of the
#: ball diameter, the pool proportion (from memory).
NOSE_HEIGHT_FRACTION = 0.635
#: Pocket mouth radii (mm): corner ~4.5-5 in, side ~5-5.5 in mouths for pool
#: (WPA, from memory); drawn as discs centred just behind the nose lines.
CORNER_POCKET_RADIUS_MM = 62.0
SIDE_POCKET_RADIUS_MM = 66.0
CORNER_POCKET_SETBACK_MM = 22.0  # centre behind each nose line
SIDE_POCKET_SETBACK_MM = 35.0
APRON_DEPTH_MM = 180.0  # wooden side of the table below the rail top
FLOOR_Z_MM = -760.0  # floor ~ 30 in below the cloth (common practice)
CLOTH_TEXTURE_CELL_MM = 3.0  # cloth nap texture scale
CLOTH_TEXTURE_DEPTH = 0.03  # +/- relative brightness of the nap texture

# --- colours (sRGB 0-255; our own palette) -------------------------------------
CLOTH_RGB = (32, 112, 62)
RAIL_RGB = (112, 64, 34)
FLOOR_RGB = (48, 45, 43)
SIGHT_RGB = (232, 228, 215)
POCKET_RGB = (6, 6, 6)
BALL_COLOURS: dict[str, tuple[float, float, float]] = {
    "cue": (242, 240, 230),
    "white": (242, 240, 230),
    "yellow": (240, 190, 20),
    "blue": (25, 55, 175),
    "red": (200, 25, 25),
    "purple": (95, 35, 130),
    "orange": (240, 110, 25),
    "green": (15, 115, 55),
    "maroon": (120, 25, 35),
    "black": (18, 18, 20),
    "pink": (235, 120, 150),
    "brown": (110, 60, 30),
}
#: Stripe balls: a coloured band on white, band half-height as a fraction of R
#: (the band covers roughly the middle half of the ball's height; common practice).
STRIPE_HALF_HEIGHT = 0.55
#: Number circle: white disc of this angular radius (rad) on the ball.
NUMBER_CIRCLE_RAD = 0.42

# --- lighting -----------------------------------------------------------------
#: Lamps hang ~1 m above the cloth (common practice for billiard lamps).
LAMP_HEIGHT_MM = 1000.0
LAMP_RADIUS_MM = 150.0
LAMP_RGB = (255, 246, 235)
DEFAULT_LAMP_FRACTIONS = (0.27, 0.73)  # along the length
AMBIENT = 0.25
#: Exposure: a white diffuse surface at the table centre, lit by lamps + ambient,
#: maps to this linear value before white balance/brightness (keeps a white ball just below clipping).
WHITE_TARGET_LINEAR = 0.8
#: Ball surface: Lambert + two-lobe Blinn-Phong (a broad sheen and a sharp
#: lamp reflection of the lacquer); values chosen by eye, not fitted.
SPEC_BROAD = (0.08, 40.0)
SPEC_SHARP = (0.9, 900.0)
#: Fraction of ambient light a ball's lower half receives bounced off the cloth.
CLOTH_BOUNCE = 0.5

# --- camera effects -------------------------------------------------------------
READ_NOISE = 0.004
SHOT_NOISE = 0.01
BLUR_PX = 0.5
MAX_SUBFRAMES = 24
#: Motion-blur samples: one per this many px of ball travel during the exposure.
SUBFRAME_STEP_PX = 1.0
#: Background supersampling (per axis) for anti-aliased table edges.
BACKGROUND_SUPERSAMPLE = 2
#: Orientation integration: largest rotation per step (rad).
MAX_ROTATION_STEP_RAD = 0.02

PHYSICS_KEYS = ("e_ball_ball", "e_cushion", "mu_slide", "mu_roll", "mu_ball_ball", "mu_cushion", "mu_spin")
