"""Equipment presets and physical constants, each with its source.

Every number that matters for geometry or physics lives here (or in
:mod:`feltlab.settings` for algorithm tolerances), so that a reader can check
it against the document it came from.

Units: millimetres (mm), kilograms (kg), seconds (s).

Sources, as cited beside each value:

* WPA -- World Pool-Billiard Association, *Tournament Table & Equipment
  Specifications* (2001); read from a faithful secondary copy.
* WPBSA -- World Professional Billiards & Snooker Association, *Official Rules
  of the Games of Snooker and English Billiards*, Section 2 (equipment);
  secondary copy.
* UMB -- Union Mondiale de Billard, rules art. 2.1 (match table); secondary.
* "from memory" -- a value we recall but have not confirmed against a source.
* "common practice" -- a trade fact, not a published standard.
"""
from __future__ import annotations

from dataclasses import dataclass, field

#: Standard gravity, mm/s^2 (CGPM 1901 conventional value 9.80665 m/s^2).
G_MM_S2: float = 9806.65

INCH_MM: float = 25.4


@dataclass(frozen=True)
class BallSpec:
    """A ball set's published dimensions.

    diameter_mm: nominal diameter; diameter_tol_mm: the published +/- tolerance;
    mass_kg_range: (min, max) allowed mass; mass_kg: the value we use when the
    user gives none (mid-range unless a source gives a typical value).
    """

    diameter_mm: float
    diameter_tol_mm: float
    mass_kg_range: tuple[float, float]
    mass_kg: float
    source: str

    @property
    def radius_mm(self) -> float:
        return self.diameter_mm / 2.0


@dataclass(frozen=True)
class TablePreset:
    """A table's playing surface (between cushion noses) and its ball set.

    length_mm x width_mm is the playing surface measured between the noses of
    opposite cushions; ``surface_tol_mm`` the published +/- tolerance on each.
    ``cushion_nose_height_mm`` is the height of the cushion nose above the
    cloth (None where no published figure exists).
    """

    name: str
    length_mm: float
    width_mm: float
    surface_tol_mm: float | None
    ball: BallSpec
    cushion_nose_height_mm: float | None
    pockets: bool
    source: str
    notes: str = ""
    aliases: tuple[str, ...] = field(default_factory=tuple)


POOL_BALL = BallSpec(
    diameter_mm=2.25 * INCH_MM,  # 57.15 mm (2 1/4 in)
    diameter_tol_mm=0.005 * INCH_MM,  # 0.127 mm (0.005 in)
    mass_kg_range=(0.156, 0.170),  # 5.5-6 oz
    mass_kg=0.163,
    source="WPA Tournament Table & Equipment Specifications (2001), secondary copy",
)

SNOOKER_BALL = BallSpec(
    diameter_mm=52.5,
    diameter_tol_mm=0.05,
    # WPBSA gives no absolute mass, only that a set agree within 3 g; ~142 g is
    # a typical set (from memory).
    mass_kg_range=(0.138, 0.146),
    mass_kg=0.142,
    source="WPBSA Official Rules, Section 2 (diameter); mass typical, from memory",
)

CAROM_BALL = BallSpec(
    diameter_mm=61.25,  # mid of the 61-61.5 mm band
    diameter_tol_mm=0.25,
    mass_kg_range=(0.205, 0.220),
    mass_kg=0.2125,
    source="UMB carom ball 61-61.5 mm, 205-220 g (equipment retailers' copies, secondary)",
)

#: Pool cushion nose height: 1 7/16 in for a 2 1/4 in ball (63.9% of the
#: diameter); WPA gives the range 62.5-64.5% of ball diameter (from memory,
#: the 1 7/16 in figure from a secondary copy).
POOL_NOSE_HEIGHT_MM = (1.0 + 7.0 / 16.0) * INCH_MM

TABLES: dict[str, TablePreset] = {
    "pool-9ft": TablePreset(
        name="pool-9ft",
        length_mm=100 * INCH_MM,  # 2540 mm
        width_mm=50 * INCH_MM,  # 1270 mm
        surface_tol_mm=0.125 * INCH_MM,  # +/- 1/8 in = 3.2 mm
        ball=POOL_BALL,
        cushion_nose_height_mm=POOL_NOSE_HEIGHT_MM,
        pockets=True,
        source="WPA Tournament Table & Equipment Specifications (2001), secondary copy",
        aliases=("pool9", "9ft"),
    ),
    "pool-8ft": TablePreset(
        name="pool-8ft",
        length_mm=92 * INCH_MM,  # 2337 mm
        width_mm=46 * INCH_MM,  # 1168 mm
        surface_tol_mm=0.125 * INCH_MM,
        ball=POOL_BALL,
        cushion_nose_height_mm=POOL_NOSE_HEIGHT_MM,
        pockets=True,
        source="WPA Tournament Table & Equipment Specifications (2001), secondary copy",
        aliases=("pool8", "8ft"),
    ),
    "pool-7ft": TablePreset(
        name="pool-7ft",
        length_mm=78 * INCH_MM,  # 1981 mm
        width_mm=39 * INCH_MM,  # 991 mm
        surface_tol_mm=None,
        ball=POOL_BALL,
        cushion_nose_height_mm=POOL_NOSE_HEIGHT_MM,
        pockets=True,
        source="no published standard; 78 x 39 in is common retail practice",
        notes="7-ft tables vary (76x38, 78x39, 80x40 in): measure yours and pass a calibration file.",
        aliases=("pool7", "7ft"),
    ),
    "snooker": TablePreset(
        name="snooker",
        length_mm=3569.0,
        width_mm=1778.0,
        surface_tol_mm=13.0,
        ball=SNOOKER_BALL,
        cushion_nose_height_mm=None,
        pockets=True,
        source="WPBSA Official Rules, Section 2, secondary copy",
        aliases=("snooker-12ft",),
    ),
    "carom": TablePreset(
        name="carom",
        length_mm=2840.0,
        width_mm=1420.0,
        surface_tol_mm=5.0,
        ball=CAROM_BALL,
        cushion_nose_height_mm=37.0,  # 37 +/- 1 mm
        pockets=False,
        source="UMB rules art. 2.1 (match table), secondary copy",
        aliases=("carom-match", "carom-3c"),
    ),
}

DEFAULT_TABLE = "pool-9ft"


def table_preset(name: str) -> TablePreset:
    """Look a preset up by name or alias; raise ValueError naming the choices."""
    key = name.strip().lower()
    for preset in TABLES.values():
        if key == preset.name or key in preset.aliases:
            return preset
    raise ValueError(
        f"unknown table preset {name!r}; choose one of: {', '.join(TABLES)}"
    )


# ---------------------------------------------------------------------------
# Measured coefficients: ranges for sanity bounds and demo defaults.
# Source: compiled ranges, "physical properties", Physics of Pool FAQ,
# Colorado State University (D. Alciatore), unless stated.
# ---------------------------------------------------------------------------
E_BALL_BALL_RANGE = (0.92, 0.98)
MU_BALL_BALL_RANGE = (0.03, 0.08)
MU_SLIDE_CLOTH_RANGE = (0.15, 0.4)
MU_SLIDE_CLOTH_TYPICAL = 0.2
#: Rolling resistance as a deceleration / g (the "force / weight" definition;
#: R. Cross, Am. J. Phys. 90(9):648 (2022) notes another definition differs by 7/5).
MU_ROLL_RANGE = (0.005, 0.015)
MU_ROLL_TYPICAL = 0.01
E_CUSHION_APPARENT_RANGE = (0.6, 0.9)
#: Cushion model values, Mathavan, Jackson & Parkin, Proc. IMechE C 224(9):1863 (2010).
E_CUSHION_CONTACT_POINT = 0.98
MU_CUSHION = 0.14
#: Shot speed bands (mm/s): Physics of Pool FAQ, Colorado State University.
SHOT_SPEED_BANDS_MM_S = {
    "slow": (450.0, 890.0),
    "medium": (890.0, 1900.0),
    "fast": (1900.0, 3200.0),
    "power": (3200.0, 4500.0),
}
