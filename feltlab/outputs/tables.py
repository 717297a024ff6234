"""Tidy tables as CSV and Parquet, with units in every column name.

Each kind of observation is its own table (Wickham, "Tidy Data", J. Stat.
Software 59(10), 2014): ``tracks`` (one row per ball per frame), ``segments``
(one row per motion segment), ``contacts`` (one row per contact). Column lists
follow DEVELOPERS.md; the documented columns come first, anything extra a
stage adds follows in its own order.
"""
from __future__ import annotations

from pathlib import Path

import logging

import pandas as pd

log = logging.getLogger("feltlab.outputs")

#: Documented columns (DEVELOPERS.md "Tables"), in the order they are written.
TRACK_COLUMNS = ["frame", "t_s", "ball", "x_mm", "y_mm", "vx_mm_s", "vy_mm_s", "sx_mm", "sy_mm", "visible"]
SEGMENT_COLUMNS = ["ball", "segment", "t0_s", "t1_s", "phase"]
CONTACT_COLUMNS = [
    "contact", "t_s", "t_sigma_s", "kind", "ball_a", "ball_b", "cushion", "nx", "ny",
    "va_in_x_mm_s", "va_in_y_mm_s", "va_out_x_mm_s", "va_out_y_mm_s",
    "vb_in_x_mm_s", "vb_in_y_mm_s", "vb_out_x_mm_s", "vb_out_y_mm_s",
    "speed_in_mm_s", "e", "e_sigma", "impulse_Ns", "impulse_n_Ns", "impulse_t_Ns",
    "momentum_residual_pct", "ke_before_J", "ke_after_J", "ke_loss_frac", "cut_angle_deg", "throw_deg",
]
#: Columns a writer cannot do without (a stage that drops one has a bug).
EVENT_COLUMNS = ["event", "t_s", "t_sigma_s", "kind", "ball", "other", "contact"]
REQUIRED = {
    "tracks": ["frame", "t_s", "ball", "x_mm", "y_mm", "vx_mm_s", "vy_mm_s"],
    "segments": SEGMENT_COLUMNS,
    "contacts": ["contact", "t_s", "kind", "ball_a", "ball_b", "e", "e_sigma"],
    "events": ["t_s", "kind", "ball"],
}
ORDER = {"tracks": TRACK_COLUMNS, "segments": SEGMENT_COLUMNS, "contacts": CONTACT_COLUMNS, "events": EVENT_COLUMNS}

#: A column name carries its unit as a suffix ...
UNIT_SUFFIXES = ("_mm", "_s", "_mm_s", "_mm_s2", "_Ns", "_J", "_deg", "_pct", "_frac", "_kg", "_px", "_rad_s")
#: ... or is one of these labels, counts and dimensionless quantities.
UNITLESS = {
    "frame", "ball", "segment", "phase", "contact", "kind", "ball_a", "ball_b", "cushion",
    "nx", "ny", "e", "e_sigma", "visible", "confidence", "pattern", "r", "g", "b",
    "mu", "mu_sigma", "n_points", "a_phase_in", "b_phase_in", "a_phase_out", "b_phase_out",
    "event", "other", "group", "simultaneous", "note", "group_balls",
}
#: Columns that hold labels (written as text; empty where not applicable).
TEXT_COLUMNS = {"ball", "phase", "kind", "ball_a", "ball_b", "cushion", "pattern", "other",
                "a_phase_in", "b_phase_in", "a_phase_out", "b_phase_out", "note", "group_balls"}


def has_unit(column: str) -> bool:
    """True when a column name ends in a unit suffix or is a documented label/dimensionless name.

    >>> has_unit("x_mm"), has_unit("e"), has_unit("speed")
    (True, True, False)
    """
    if column in UNITLESS:
        return True
    base = column[: -len("_sigma")] if column.endswith("_sigma") else column
    return base.endswith(UNIT_SUFFIXES) or base in UNITLESS


def tidy(df: pd.DataFrame, kind: str) -> pd.DataFrame:
    """Documented columns first, label columns as text, checked for required columns and units.

    Columns whose names start with "_" are a stage's internals and are left out.

    Raises ValueError (a stage bug, not a user error) if a required column is
    missing; a column name without a unit is logged as a warning (the tests
    pin the documented tables, and a stage's new column must not lose a result).
    """
    if kind not in ORDER:
        raise ValueError(f"unknown table kind {kind!r}")
    if df is None:
        df = pd.DataFrame()
    df = df.loc[:, [c for c in df.columns if not str(c).startswith("_")]]  # a stage's private columns
    if len(df) == 0:  # nothing found (e.g. no contact): still write the documented header
        df = df.reindex(columns=list(df.columns) + [c for c in ORDER[kind] if c not in df.columns])
    missing = [c for c in REQUIRED[kind] if c not in df.columns]
    if missing:
        raise ValueError(f"{kind} table lacks column(s) {missing}")
    no_unit = [c for c in df.columns if not has_unit(str(c))]
    if no_unit:
        log.warning("%s table column(s) %s carry no unit in their name", kind, no_unit)
    first = [c for c in ORDER[kind] if c in df.columns]
    rest = [c for c in df.columns if c not in first]
    out = df.loc[:, first + rest].copy()
    for c in out.columns:
        if c in TEXT_COLUMNS:
            out[c] = out[c].map(lambda v: "" if v is None or (isinstance(v, float) and v != v) else str(v))
    return out.reset_index(drop=True)


def write_table(df: pd.DataFrame, kind: str, folder: Path, name: str | None = None) -> list[Path]:
    """Write ``folder/<name>.csv`` and ``.parquet`` (name defaults to ``kind``); return the paths.

    CSV floats keep 9 significant digits (0.001 mm on a 3.6 m table).
    """
    folder = Path(folder)
    name = name or kind
    t = tidy(df, kind)
    csv_path = folder / f"{name}.csv"
    pq_path = folder / f"{name}.parquet"
    t.to_csv(csv_path, index=False, float_format="%.9g")
    t.to_parquet(pq_path, index=False)
    return [csv_path, pq_path]
