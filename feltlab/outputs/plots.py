"""Plots: each ball's speed against time, and a to-scale table diagram.

* :func:`speed_plot` -- one panel per moving ball: speed (m/s) from the
  smoothed track, the fitted sliding / rolling phases shaded, every contact
  marked. Sliding and rolling separate clearly on a speed-time plot (a sliding
  ball decelerates ~20x faster than a rolling one; Mathavan, Jackson & Parkin,
  Am. J. Phys. 77:788, 2009).
* :func:`table_diagram` -- the playing surface to scale in mm (table frame of
  DEVELOPERS.md, origin bottom-left), every ball's path, contact points, the
  balls' positions at each ball-ball contact, and departure angles.

Colours: Okabe-Ito (colour-blind safe), cue ball black on paper.
"""
from __future__ import annotations

import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.patches import Circle, Rectangle  # noqa: E402

from feltlab.outputs.label_layout import LabelSpec, place_labels  # noqa: E402
from feltlab.outputs.style import ROLL_RGB, SLIDE_RGB, ball_colours, ball_dashes, ball_order, mpl  # noqa: E402

#: A ball whose track spans less than this (mm) is drawn as "did not move".
MOVED_MM = 5.0
#: Sight (diamond) set-back behind the cushion nose, mm: WPA, 3 11/16 in (secondary copy).
SIGHT_SETBACK_MM = 93.7
#: Drawn cushion-plus-rail width and pocket radius (mm): illustration only, common practice values.
CUSHION_DRAW_MM = 125.0
POCKET_DRAW_MM = 60.0
DPI = 110
#: At most this many balls get a speed panel (the ones in contacts first).
MAX_SPEED_PANELS = 6
#: Table diagram close-up: drawn when at least BUSY_MIN_CONTACTS contact points lie within
#: BUSY_RADIUS_R ball radii of one another's centre (a rack break, a cluster); the inset is
#: INSET_FRACTION of the table's length wide. Layout choices, not physics.
BUSY_MIN_CONTACTS = 4
BUSY_RADIUS_R = 6.0
INSET_FRACTION = 0.40
INSET_MAX_HEIGHT = 0.50     # of the table's width
INSET_MIN_ZOOM = 1.5        # a close-up magnifying less than this is not drawn



def contact_ranges(ids) -> str:
    """Contact numbers as short runs: ``C0-C9``, ``C2``, ``C0-C1, C3-C9``.

    >>> contact_ranges([0, 1, 2, 3])
    'C0-C3'
    >>> contact_ranges([2])
    'C2'
    >>> contact_ranges([5, 0, 1, 3])
    'C0-C1, C3, C5'
    """
    v = sorted({int(i) for i in ids})
    runs: list[list[int]] = []
    for i in v:
        if runs and i == runs[-1][1] + 1:
            runs[-1][1] = i
        else:
            runs.append([i, i])
    return ", ".join(f"C{a}" if a == b else f"C{a}-C{b}" for a, b in runs)

def group_id(c: dict) -> int:
    """Compound-event id of a contact row (> 0), or -1 (missing, NaN or not part of a group)."""
    try:
        g = float(c.get("group", -1))
    except (TypeError, ValueError):
        return -1
    return int(g) if np.isfinite(g) else -1


def moving_balls(tracks: pd.DataFrame) -> list[str]:
    """Balls whose track spans more than ``MOVED_MM``, cue first."""
    out = []
    for b in ball_order(tracks["ball"].unique()):
        g = tracks[tracks["ball"] == b]
        span = np.hypot(np.ptp(g["x_mm"].to_numpy(float)), np.ptp(g["y_mm"].to_numpy(float))) if len(g) else 0.0
        if np.isfinite(span) and span > MOVED_MM:
            out.append(b)
    return out


def speed_plot(tracks: pd.DataFrame, segments: pd.DataFrame | None, contacts: pd.DataFrame | None,
               path: Path, title: str = "", model=None) -> Path:
    """Write the speed-time plot (PNG) and return its path.

    ``model(ball, t_s array) -> velocities (T, 2) mm/s``, if given, adds the
    fitted motion model's speed as a dashed line over the smoothed track.
    """
    balls = moving_balls(tracks)
    if contacts is not None and len(contacts):  # the balls the shot is about
        names = {str(b) for b in contacts["ball_a"]} | {str(b) for b in contacts["ball_b"]}
        balls = [b for b in balls if b in names] or balls
    if len(balls) > MAX_SPEED_PANELS:  # too many for a panel each: the first ball, then the fastest
        peak = {b: float(np.nanmax(np.hypot(g["vx_mm_s"].to_numpy(float), g["vy_mm_s"].to_numpy(float)),
                                   initial=0.0))
                for b, g in tracks[tracks["ball"].isin(balls)].groupby("ball")}
        keep = set([balls[0]] + sorted(balls[1:], key=lambda b: -peak.get(b, 0.0))[: MAX_SPEED_PANELS - 1])
        balls = [b for b in balls if b in keep]
    balls = balls[:MAX_SPEED_PANELS] or ball_order(tracks["ball"].unique())[:1]
    cols = ball_colours(tracks["ball"].unique(), on_paper=True)
    dashes = ball_dashes(tracks["ball"].unique())
    n = max(1, len(balls))
    fig, axes = plt.subplots(n, 1, figsize=(9, 1.2 + 2.1 * n), sharex=True, squeeze=False)
    axes = axes[:, 0]
    t_all = tracks["t_s"].to_numpy(float)
    tmin, tmax = (float(np.nanmin(t_all)), float(np.nanmax(t_all))) if len(t_all) else (0.0, 1.0)
    vmax = 0.0
    any_predicted = False
    for ax, b in zip(axes, balls):
        g = tracks[tracks["ball"] == b].sort_values("t_s")
        sp = np.hypot(g["vx_mm_s"].to_numpy(float), g["vy_mm_s"].to_numpy(float)) / 1000.0
        fin = sp[np.isfinite(sp)]
        vmax = max(vmax, float(np.percentile(fin, 99.5)) if fin.size else 0.0)
        if segments is not None and len(segments):
            for _, s in segments[segments["ball"].astype(str) == b].iterrows():
                ph = str(s.get("phase", ""))
                if ph in ("slide", "roll"):
                    ax.axvspan(s["t0_s"], s["t1_s"], color=mpl(SLIDE_RGB if ph == "slide" else ROLL_RGB),
                               alpha=0.22 if ph == "slide" else 0.16, lw=0)
        vis = g["visible"].to_numpy(float) if "visible" in g else np.ones(len(g))
        ax.plot(g["t_s"], sp, color=mpl(cols[b]), lw=1.6, ls=dashes[b], label="speed (smoothed track)")
        if model is not None and len(g):
            try:
                tt = np.linspace(float(g["t_s"].min()), float(g["t_s"].max()), 600)
                vm = np.asarray(model(b, tt), float).reshape(-1, 2)
                ax.plot(tt, np.hypot(vm[:, 0], vm[:, 1]) / 1000.0, color="0.35", lw=1.0, ls=(0, (4, 2)),
                        label="fitted model")
            except Exception:  # noqa: BLE001 - a ball without a fitted model keeps its track only
                pass
        pred = vis < 0.5
        any_predicted = any_predicted or bool(pred.any())
        if pred.any():
            ax.plot(g["t_s"].to_numpy()[pred], sp[pred], ".", color="0.5", ms=3, label="predicted (ball not seen)")
        ax.set_ylabel(f"{b}\nspeed (m/s)")
        ax.grid(True, color="0.9", lw=0.6)
    for ax in axes:
        ax.set_ylim(0, max(0.1, vmax * 1.12))
        if contacts is not None:
            for _, c in contacts.iterrows():
                ax.axvline(c["t_s"], color="0.3", ls=":", lw=1.3)
    if contacts is not None and len(contacts):
        span = max(tmax - tmin, 1e-9)
        marks = contact_marks(contacts)
        for (t, text), row in zip(marks, contact_label_rows(np.array([t for t, _ in marks]), span)):
            axes[0].annotate(text, (t, 1.0), xycoords=("data", "axes fraction"),
                             xytext=(2, -2 - 11 * row), textcoords="offset points", va="top", fontsize=9,
                             color="0.15")
    axes[-1].set_xlabel("time (s)")
    axes[-1].set_xlim(tmin, tmax)
    from matplotlib.patches import Patch
    from matplotlib.lines import Line2D
    handles = [Line2D([], [], color="0.4", lw=1.6, label="smoothed track")]
    if any_predicted:
        handles.append(Line2D([], [], color="0.5", marker=".", ls="", label="predicted (not seen)"))
    if model is not None:
        handles.append(Line2D([], [], color="0.35", lw=1.0, ls=(0, (4, 2)), label="fitted model"))
    handles += [Patch(color=mpl(SLIDE_RGB), alpha=0.35, label="sliding"),
                Patch(color=mpl(ROLL_RGB), alpha=0.3, label="rolling"),
                Line2D([], [], color="0.3", ls=":", lw=1.3, label="contact")]
    # title on top, key in a row along the bottom: a long clip name never runs into the key
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=9, frameon=False)
    fig.suptitle(title or "Ball speed against time", x=0.02, ha="left", fontsize=11)
    fig.tight_layout(rect=(0, 0.35 / fig.get_figheight(), 1, 1))   # about 0.35 inch kept for the key
    fig.savefig(path, dpi=DPI)
    plt.close(fig)
    return Path(path)


def compound_groups(rows: list[dict]) -> dict[int, list[dict]]:
    """Compound events of more than one touch (rows with a group id > 0 and no measured e, i.e.
    touches within one frame): group id -> its rows in time order. Groups of one are left out.

    >>> g = compound_groups([dict(contact=0, t_s=0.31, group=1, e=float("nan")),
    ...                      dict(contact=1, t_s=0.30, group=1, e=float("nan")), dict(contact=2, t_s=0.9, group=-1)])
    >>> {k: [r["contact"] for r in v] for k, v in g.items()}
    {1: [1, 0]}
    """
    groups: dict[int, list[dict]] = {}
    for c in rows:
        g = group_id(c)
        try:
            e = float(c.get("e", np.nan))
        except (TypeError, ValueError):
            e = np.nan
        if g > 0 and not np.isfinite(e):
            groups.setdefault(g, []).append(c)
    return {g: sorted(m, key=lambda c: float(c["t_s"])) for g, m in groups.items() if len(m) > 1}


def contact_marks(contacts: pd.DataFrame) -> list[tuple[float, str]]:
    """(time s, label) of each contact for the speed plot, in time order; a compound event (several
    touches within one frame, e not measured) gets one label for all its touches, at the first.

    >>> contact_marks(pd.DataFrame({"contact": [0, 1, 2], "t_s": [0.3, 0.301, 0.9], "group": [1, 1, -1],
    ...                             "e": [float("nan"), float("nan"), 0.8]}))
    [(0.3, 'C0-C1'), (0.9, 'C2')]
    """
    rows = contacts.sort_values("t_s").to_dict("records")
    groups = compound_groups(rows)
    out, done = [], set()
    for c in rows:
        g = group_id(c)
        if g in groups:
            if g not in done:
                done.add(g)
                out.append((float(c["t_s"]), contact_ranges([int(m["contact"]) for m in groups[g]])))
            continue
        out.append((float(c["t_s"]), f"C{c['contact']}"))
    return out


def contact_label_rows(t_s: np.ndarray, span_s: float, min_gap: float = 0.045) -> list[int]:
    """Row (0 = top) for each contact's label on the speed plot, times sorted ascending (s).

    Two contacts closer than ``min_gap`` of the time span would print their labels on top of each
    other; the later one drops a row, and the rows restart once there is room again.

    >>> contact_label_rows(np.array([0.3, 0.9, 2.000, 2.004, 2.006]), 2.5)
    [0, 0, 0, 1, 2]
    """
    rows: list[int] = []
    last_t_in_row: dict[int, float] = {}
    for t in np.asarray(t_s, float):
        r = 0
        while r in last_t_in_row and (t - last_t_in_row[r]) < min_gap * span_s:
            r += 1
        last_t_in_row[r] = float(t)
        rows.append(r)
    return rows


def _angle_deg(u, v) -> float:
    """Unsigned angle between two 2-vectors (degrees); NaN if either is ~zero."""
    u, v = np.asarray(u, float), np.asarray(v, float)
    nu, nv = np.linalg.norm(u), np.linalg.norm(v)
    if not (nu > 1e-9 and nv > 1e-9):
        return float("nan")
    return float(np.degrees(np.arccos(np.clip(np.dot(u, v) / (nu * nv), -1.0, 1.0))))


def departure_angles(c: dict) -> dict:
    """Departure angles of one contact row (degrees).

    ball-ball: ``object_deg`` / ``cue_deg`` -- each ball's departure direction
    measured from ball_a's incoming direction (for a frictionless hit the
    object ball leaves along the line of centres, i.e. object_deg = cut angle).
    ball-cushion: ``incidence_deg`` / ``rebound_deg`` -- from the cushion normal.
    """
    va_in = np.array([c.get("va_in_x_mm_s", np.nan), c.get("va_in_y_mm_s", np.nan)], float)
    va_out = np.array([c.get("va_out_x_mm_s", np.nan), c.get("va_out_y_mm_s", np.nan)], float)
    if c.get("kind") == "ball-ball":
        vb_out = np.array([c.get("vb_out_x_mm_s", np.nan), c.get("vb_out_y_mm_s", np.nan)], float)
        return {"object_deg": _angle_deg(va_in, vb_out), "cue_deg": _angle_deg(va_in, va_out)}
    n = np.array([c.get("nx", np.nan), c.get("ny", np.nan)], float)
    inc = c.get("incidence_deg", np.nan)
    reb = c.get("rebound_deg", np.nan)
    if inc is None or not np.isfinite(inc):
        inc = _angle_deg(-va_in, n)
    if reb is None or not np.isfinite(reb):
        reb = _angle_deg(va_out, n)
    return {"incidence_deg": float(inc), "rebound_deg": float(reb)}


def _draw_table(ax, table) -> None:
    L, W = table.length_mm, table.width_mm
    cw = CUSHION_DRAW_MM
    ax.add_patch(Rectangle((-cw, -cw), L + 2 * cw, W + 2 * cw, color="0.6", zorder=0))
    ax.add_patch(Rectangle((0, 0), L, W, facecolor="0.97", edgecolor="0.3", lw=1.0, zorder=1))
    if table.pockets:
        for x, y in ((0, 0), (L / 2, 0), (L, 0), (0, W), (L / 2, W), (L, W)):
            ax.add_patch(Circle((x, y), POCKET_DRAW_MM, color="0.35", zorder=2))
    if table.name.startswith("pool") or table.name.startswith("carom"):
        off = SIGHT_SETBACK_MM if table.name.startswith("pool") else cw * 0.7
        for i in range(1, 8):
            if i == 4:
                continue
            for y in (-off, W + off):
                ax.plot(i * L / 8, y, marker="D", ms=3, color="white", zorder=3)
        for j in (1, 2, 3):
            for x in (-off, L + off):
                ax.plot(x, j * W / 4, marker="D", ms=3, color="white", zorder=3)
    for name, (x, y, ha, va) in {"cushion y0": (L * 0.19, -cw * 0.35, "center", "center"),
                                 "cushion yW": (L * 0.19, W + cw * 0.35, "center", "center"),
                                 "cushion x0": (-cw * 0.35, W * 0.62, "center", "center"),
                                 "cushion xL": (L + cw * 0.35, W * 0.62, "center", "center")}.items():
        ax.text(x, y, name, ha=ha, va=va, fontsize=7, color="white", zorder=3,
                rotation=90 if name.endswith(("x0", "xL")) else 0)


def busy_region(points_mm: np.ndarray, radius_mm: float, min_count: int = BUSY_MIN_CONTACTS,
                extra_mm: np.ndarray | None = None, pad_mm: float = 0.0) -> tuple[float, float, float, float] | None:
    """Box (x0, y0, x1, y1), table mm, around the densest knot of contact points, or None.

    A knot is the points within ``radius_mm`` of the point with most such neighbours, if there are at
    least ``min_count``; the box also takes in ``extra_mm`` points (e.g. the balls' start positions)
    inside that radius of the knot's centre, and is padded by ``pad_mm``.

    >>> busy_region(np.array([[0, 0], [10, 0], [0, 10], [5, 5], [900, 900]]), 50, 4)
    (0.0, 0.0, 10.0, 10.0)
    >>> busy_region(np.array([[0, 0], [500, 0]]), 50, 2) is None
    True
    """
    p = np.asarray(points_mm, float).reshape(-1, 2)
    p = p[np.isfinite(p).all(axis=1)]
    if len(p) < min_count:
        return None
    d = np.hypot(*(p[:, None, :] - p[None, :, :]).transpose(2, 0, 1))
    near = d <= radius_mm
    k = int(np.argmax(near.sum(axis=1)))
    if near[k].sum() < min_count:
        return None
    knot = p[near[k]]
    c = knot.mean(axis=0)
    if extra_mm is not None and len(extra_mm):
        e = np.asarray(extra_mm, float).reshape(-1, 2)
        e = e[np.isfinite(e).all(axis=1)]
        knot = np.vstack([knot, e[np.hypot(*(e - c).T) <= radius_mm]])
    x0, y0 = knot.min(axis=0) - pad_mm
    x1, y1 = knot.max(axis=0) + pad_mm
    return float(x0), float(y0), float(x1), float(y1)


def inset_place(region: tuple[float, float, float, float], length_mm: float, width_mm: float,
                path_xy: np.ndarray, discs_xy: np.ndarray | None = None,
                fraction: float = INSET_FRACTION) -> tuple[float, float, float, float]:
    """Where to draw a close-up of ``region`` on the table (x, y, w, h in table mm).

    The close-up keeps the region's aspect and is at most ``fraction`` of the table's length wide
    and INSET_MAX_HEIGHT of its width high. Positions on a 7 x 5 grid over the playing surface
    are tried, at full size and then smaller (down to INSET_MIN_ZOOM); the first size with a
    position that covers no ball (``discs_xy``: start and end positions) and not the region
    itself wins, at its position covering the fewest path points.
    """
    rx0, ry0, rx1, ry1 = region
    rw, rh = max(rx1 - rx0, 1.0), max(ry1 - ry0, 1.0)
    w0 = min(fraction * length_mm, INSET_MAX_HEIGHT * width_mm * rw / rh)
    m = 0.015 * length_mm
    pts = np.asarray(path_xy, float).reshape(-1, 2)
    discs = np.empty((0, 2)) if discs_xy is None else np.asarray(discs_xy, float).reshape(-1, 2)
    best = None
    for scale in (1.0, 0.85, 0.72, 0.6):
        w = w0 * scale
        if w / rw < INSET_MIN_ZOOM and best is not None:
            break
        h = w * rh / rw
        best_cost = np.inf
        for x in np.linspace(m, length_mm - m - w, 7):
            for y in np.linspace(m, width_mm - m - h, 5):
                if not (x + w < rx0 or rx1 < x or y + h < ry0 or ry1 < y):
                    continue
                inside = lambda q, pad=0.0: int(((q[:, 0] >= x - pad) & (q[:, 0] <= x + w + pad)  # noqa: E731
                                                 & (q[:, 1] >= y - pad) & (q[:, 1] <= y + h + pad)).sum())
                cost = inside(pts) + 1e6 * inside(discs, pad=0.04 * length_mm)
                if cost < best_cost:
                    best_cost, cand = cost, (float(x), float(y), float(w), float(h))
        if np.isfinite(best_cost):
            best = cand
            if best_cost < 1e6:
                return best
    return best if best is not None else (m, m, w0, w0 * rh / rw)


def _draw_ends(ax, name: str, xy: np.ndarray, c, R: float) -> None:
    """A ball's start (open circle) and end (filled disc) on a table drawing, radius R (mm)."""
    ax.add_patch(Circle(xy[0], R, facecolor="none", edgecolor=c, lw=1.4, zorder=6))
    if str(name) in ("cue", "white") or str(name).startswith("white-"):
        # a white ball ends as a white disc with a dot (its paper colour is black, and a
        # black-filled end would read as the black ball)
        ax.add_patch(Circle(xy[-1], R, facecolor="white", edgecolor=c, lw=1.6, zorder=6))
        ax.plot(*xy[-1], marker="o", ms=2.5, color=c, zorder=6)
    else:
        ax.add_patch(Circle(xy[-1], R, facecolor=c, edgecolor="0.1", lw=0.8, alpha=0.55, zorder=6))


def _draw_closeup(ax, box, region, paths: dict[str, np.ndarray], cps: np.ndarray, cols, dashes, R: float):
    """Magnified view of ``region`` (table mm) drawn in ``box`` (x, y, w, h, table mm) on ``ax``."""
    import matplotlib.patheffects as pe

    ins = ax.inset_axes(list(box), transform=ax.transData, zorder=12)
    ins.set_facecolor("0.97")
    for b, xy in paths.items():
        c = mpl(cols[b])
        ins.plot(xy[:, 0], xy[:, 1], color=c, lw=1.6, ls=dashes[b], zorder=5)
        _draw_ends(ins, b, xy, c, R)
    for b, xy in paths.items():
        if region[0] <= xy[0, 0] <= region[2] and region[1] <= xy[0, 1] <= region[3]:
            ins.text(xy[0, 0], xy[0, 1], b, ha="center", va="center", fontsize=6, color="0.05", zorder=9,
                     path_effects=[pe.withStroke(linewidth=2.2, foreground="white")])
    if len(cps):
        ins.plot(cps[:, 0], cps[:, 1], ls="", marker="x", color="black", ms=5, mew=1.3, zorder=8)
    ins.set_xlim(region[0], region[2])
    ins.set_ylim(region[1], region[3])
    ins.set_aspect("equal", adjustable="box")
    ins.set_xticks([])
    ins.set_yticks([])
    zoom = box[2] / max(region[2] - region[0], 1e-9)
    ins.set_title(f"close-up, x{zoom:.1f}", fontsize=7, pad=2, loc="left")
    ax.indicate_inset_zoom(ins, edgecolor="0.35", alpha=0.9)
    return ins


def table_diagram(tracks: pd.DataFrame, contacts: pd.DataFrame | None, table, ball_radius_mm: float,
                  path: Path, title: str = "") -> Path:
    """Write the to-scale top-down diagram (PNG) and return its path."""
    L, W = table.length_mm, table.width_mm
    cols = ball_colours(tracks["ball"].unique(), on_paper=True)
    dashes = ball_dashes(tracks["ball"].unique())
    fig_w = 10.0
    fig, ax = plt.subplots(figsize=(fig_w, fig_w * (W + 2 * CUSHION_DRAW_MM + 260) / (L + 2 * CUSHION_DRAW_MM + 80)))
    _draw_table(ax, table)
    R = ball_radius_mm
    name_specs: list[LabelSpec] = []
    contact_specs: list[LabelSpec] = []
    path_pts: list[np.ndarray] = []
    paths: dict[str, np.ndarray] = {}
    for b in ball_order(tracks["ball"].unique()):
        g = tracks[tracks["ball"] == b].sort_values("t_s")
        xy = g[["x_mm", "y_mm"]].to_numpy(float)
        xy = xy[np.isfinite(xy).all(axis=1)]
        if len(xy):
            paths[str(b)] = xy
    # A knot of contacts (a rack break) gets a magnified close-up; its balls are named there.
    cps = (contacts[["x_mm", "y_mm"]].to_numpy(float) if contacts is not None and len(contacts)
           and {"x_mm", "y_mm"} <= set(contacts.columns) else np.empty((0, 2)))
    starts = np.array([xy[0] for xy in paths.values()]) if paths else np.empty((0, 2))
    region = busy_region(cps, BUSY_RADIUS_R * R, extra_mm=starts, pad_mm=1.6 * R)
    box = None
    if region is not None:
        ends = np.array([xy[[0, -1]] for xy in paths.values()]).reshape(-1, 2)
        box = inset_place(region, L, W, np.vstack(list(paths.values()) + [cps]), discs_xy=ends)
        if box[2] / max(region[2] - region[0], 1e-9) < INSET_MIN_ZOOM:
            region = box = None
    for b, xy in paths.items():
        c = mpl(cols[b])
        ax.plot(xy[:, 0], xy[:, 1], color=c, lw=1.6, ls=dashes[b], zorder=5, label=b)
        _draw_ends(ax, b, xy, c, R)
        in_closeup = region is not None and (region[0] <= xy[0, 0] <= region[2] and region[1] <= xy[0, 1] <= region[3])
        if not in_closeup:
            name_specs.append(LabelSpec(tuple(xy[0]), str(b), prefer=(1.0, 1.0), radii_pt=(5.0, 10.0, 18.0, 30.0),
                                        leader_from_pt=15.0, style=dict(fontsize=8, color="0.1", zorder=8)))
        path_pts.append(xy[:: max(1, len(xy) // 400)])
        # start and end circles count as many path points: a label should not hide a ball
        path_pts.append(np.repeat(xy[[0, -1]], 12, axis=0))
    if contacts is not None:
        labelled_groups: set[int] = set()
        for _, row in contacts.iterrows():
            c = row.to_dict()
            cp = np.array([c.get("x_mm", np.nan), c.get("y_mm", np.nan)], float)
            n = np.array([c.get("nx", np.nan), c.get("ny", np.nan)], float)
            if not np.isfinite(cp).all():
                continue
            ax.plot(*cp, marker="x", color="black", ms=7, mew=1.8, zorder=9)
            grp = group_id(c)
            ids = contacts.loc[contacts["group"] == c["group"], "contact"].astype(int) if grp > 0 else []
            if grp > 0 and len(ids) > 1:  # a compound event: one label for all its touches, no per-link circles
                if grp in labelled_groups:
                    continue
                labelled_groups.add(grp)
                txt = (f"{contact_ranges(ids)}  {len(ids)} touch{'es' if len(ids) != 1 else ''} within one frame"
                       + (f"\n({c['group_balls']})" if str(c.get("group_balls", "") or "") else ""))
            elif c.get("kind") == "ball-ball":
                ang = departure_angles(c)
                if np.isfinite(n).all():
                    for sgn, who in ((-1, c["ball_a"]), (1, c["ball_b"])):
                        ctr = cp + sgn * R * n
                        ax.add_patch(Circle(ctr, R, facecolor="none", edgecolor=mpl(cols.get(str(who), (0, 0, 0))),
                                            ls="--", lw=1.0, zorder=7))
                words = []
                if np.isfinite(ang.get("object_deg", np.nan)):
                    words.append(f"{c['ball_b']} leaves {ang['object_deg']:.1f}°")
                if np.isfinite(ang.get("cue_deg", np.nan)):
                    words.append(f"{c['ball_a']} {ang['cue_deg']:.1f}° off {c['ball_a']}'s path")
                txt = f"C{c['contact']}  " + (",\n".join(words) if words else f"{c['ball_a']} - {c['ball_b']}")
            else:
                ang = departure_angles(c)
                if np.isfinite(ang.get("incidence_deg", np.nan)) and np.isfinite(ang.get("rebound_deg", np.nan)):
                    txt = (f"C{c['contact']}  {c['ball_a']} off cushion {c.get('cushion', '')}:"
                           f"\nin {ang['incidence_deg']:.1f}°, out {ang['rebound_deg']:.1f}° from the normal")
                else:
                    txt = f"C{c['contact']}  {c['ball_a']} on cushion {c.get('cushion', '')}"
            # Prefer the side towards the table centre, so the label stays on the drawing.
            d = np.array([L / 2, W / 2]) - cp
            contact_specs.append(LabelSpec(tuple(cp), txt, prefer=tuple(d), style=dict(
                fontsize=8, zorder=10, bbox=dict(boxstyle="round,pad=0.25", fc="white", ec="0.6", alpha=0.9))))
    ax.set_xlim(-CUSHION_DRAW_MM - 10, L + CUSHION_DRAW_MM + 10)
    ax.set_ylim(-CUSHION_DRAW_MM - 10, W + CUSHION_DRAW_MM + 10)
    ax.set_aspect("equal")
    if region is not None and box is not None:
        _draw_closeup(ax, box, region, paths, cps, cols, dashes, R)
        # labels keep off the close-up: its area counts as densely drawn
        gx, gy = np.meshgrid(np.linspace(box[0], box[0] + box[2], 24), np.linspace(box[1], box[1] + box[3], 12))
        path_pts.append(np.repeat(np.column_stack([gx.ravel(), gy.ravel()]), 3, axis=0))
    step = 250 if L > 2000 else 200
    ax.set_xticks(np.arange(0, L + 1, step))
    ax.set_yticks(np.arange(0, W + 1, step))
    ax.tick_params(labelsize=7)
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.08), ncol=8, fontsize=8, frameon=False,
              title="paths (open circle: start, filled or dotted circle: end, dashed circle: ball at contact, x: contact point)",
              title_fontsize=8)
    ax.set_title(title or f"Top view, to scale ({table.name}, {L:.0f} x {W:.0f} mm)", loc="left", fontsize=11)
    fig.tight_layout()
    # Labels last, once the layout is final: contact labels first (they matter
    # most), then ball names, none covering another.
    fig.set_dpi(DPI)
    place_labels(ax, contact_specs + name_specs, np.vstack(path_pts) if path_pts else None)
    fig.savefig(path, dpi=DPI)
    plt.close(fig)
    return Path(path)
