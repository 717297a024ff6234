"""Measured contacts against a clip's truth file (for the demo, benchmarks and end-to-end tests).

Reads both truth layouts in use: our renderer's ``CLIP.truth.json``
(:mod:`feltlab.render.truth`: contacts with ``e_measured``, ``micro``,
``va_pre``...) and the outside development footage's (contacts with ``e``,
``required``). A true contact counts as *required* when it visibly changes a
ball's motion: normal velocity change of at least ``MIN_DV_MM_S`` and not a
repeat of the same contact within one frame period (the same rule as the
project's footage scorer). Matching is one-to-one by kind and time
(Hungarian assignment, scipy) within ``window_frames`` frame periods.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

#: A contact that changes a ball's normal velocity by less than this (mm/s) is optional.
MIN_DV_MM_S = 30.0


def load_truth(path: Path) -> dict:
    return json.loads(Path(path).read_text(encoding="utf-8"))


def true_contacts(truth: dict) -> pd.DataFrame:
    """Truth contacts as a table: t_s, kind, ball_a, ball_b, cushion, e, required."""
    rows = []
    fps = float(truth["fps"])
    for c in truth.get("contacts", []):
        n = np.asarray(c.get("normal", [np.nan, np.nan]), float)[:2]
        if "required" in c:  # outside footage: the flag is given
            req = bool(c["required"])
            e = c.get("e") if c.get("e_valid", True) else None
        else:  # our renderer: derive it
            if c["kind"] == "ball-ball":
                dv = (np.asarray(c["vb_post"], float)[:2] - np.asarray(c["vb_pre"], float)[:2]) @ n
            else:
                dv = (np.asarray(c["va_post"], float)[:2] - np.asarray(c["va_pre"], float)[:2]) @ n
            req = (not c.get("micro", False)) and abs(dv) >= MIN_DV_MM_S
            e = c.get("e_measured")
        rows.append(dict(t_s=float(c["t_s"]), kind=c["kind"], ball_a=c.get("ball_a"), ball_b=c.get("ball_b") or "",
                         cushion=c.get("cushion") or "", e=e, required=req))
    df = pd.DataFrame(rows, columns=["t_s", "kind", "ball_a", "ball_b", "cushion", "e", "required"])
    # a repeat of the same contact within one frame period cannot be resolved
    for i in range(1, len(df)):
        same = df.iloc[:i]
        key = (df.at[i, "kind"], frozenset((df.at[i, "ball_a"], df.at[i, "ball_b"], df.at[i, "cushion"])))
        for j in range(i):
            if (same.at[j, "kind"], frozenset((same.at[j, "ball_a"], same.at[j, "ball_b"], same.at[j, "cushion"]))) \
                    == key and df.at[i, "t_s"] - same.at[j, "t_s"] < 1.0 / fps:
                df.at[i, "required"] = False
    return df


def match_contacts(measured: pd.DataFrame, truth: pd.DataFrame, fps: float, window_frames: float = 2.0) -> pd.DataFrame:
    """One row per true contact: its measured partner (if any), dt (s) and e error.

    Columns: t_true_s, kind, required, e_true, t_meas_s, e_meas, e_sigma, dt_s, e_err.
    """
    win = window_frames / fps
    nt, nm = len(truth), len(measured)
    cost = np.full((nt, max(nm, 1)), 1e9)
    for i, t in enumerate(truth.itertuples()):
        for j, m in (enumerate(measured.itertuples()) if nm else []):
            dt = abs(m.t_s - t.t_s)
            if m.kind == t.kind and dt <= win:
                cost[i, j] = dt + (0 if t.required else win * 3)
    rows = []
    pairs = dict()
    if nt and nm:
        r, c = linear_sum_assignment(cost)
        pairs = {i: j for i, j in zip(r, c) if cost[i, j] < 1e8}
    for i, t in enumerate(truth.itertuples()):
        j = pairs.get(i)
        m = measured.iloc[j] if j is not None else None
        e_true = float(t.e) if t.e is not None and np.isfinite(t.e) else np.nan
        rows.append(dict(t_true_s=t.t_s, kind=t.kind, required=t.required, e_true=e_true,
                         t_meas_s=m["t_s"] if m is not None else np.nan,
                         e_meas=m["e"] if m is not None else np.nan,
                         e_sigma=m["e_sigma"] if m is not None else np.nan,
                         dt_s=(m["t_s"] - t.t_s) if m is not None else np.nan,
                         e_err=(m["e"] - e_true) if m is not None else np.nan))
    return pd.DataFrame(rows)


def unmatched_measured(measured: pd.DataFrame, truth: pd.DataFrame, fps: float, window_frames: float = 2.0) -> int:
    """Measured contacts with no true contact of the same kind within the window (false positives)."""
    win = window_frames / fps
    n = 0
    for m in measured.itertuples():
        if not ((truth["kind"] == m.kind) & ((truth["t_s"] - m.t_s).abs() <= win)).any():
            n += 1
    return n
