"""``report.html``: one self-contained page per shot.

The page needs nothing but itself: images are embedded as base64 ``data:``
URIs, styles are inline, there is no script and no network access. Every
string that came from outside (file names, labels, notes) is HTML-escaped by
Jinja2's autoescape. The shot is told in plain words first, then the contacts
table, the plots and the contact frames.
"""
from __future__ import annotations

import base64
import math
import re
from pathlib import Path

import cv2
import jinja2
import numpy as np
import pandas as pd

from feltlab.outputs.plots import departure_angles
from feltlab.outputs.style import ball_order, decimals_for

TEMPLATE_DIR = Path(__file__).resolve().parents[1] / "templates"
TEMPLATE = "report.html.j2"
#: Embedded frames are scaled down to at most this width (px) to keep the page light.
EMBED_MAX_WIDTH_PX = 1000


def _f(v) -> float:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return float("nan")
    return f


def _ok(*vals) -> bool:
    return all(math.isfinite(_f(v)) for v in vals)


def ms(v_mm_s) -> str:
    """mm/s -> 'x.xx m/s'."""
    return f"{_f(v_mm_s) / 1000.0:.2f} m/s" if _ok(v_mm_s) else "n/a"


def pm(value, sigma, digits: int | None = None) -> str:
    """'0.936 ± 0.010': decimals from the sigma (:func:`feltlab.outputs.style.decimals_for`).

    >>> pm(0.0070, 0.00003, 4)
    '0.00700 ± 0.00003'
    """
    v, s = _f(value), _f(sigma)
    if not math.isfinite(v):
        return "n/a"
    if not (math.isfinite(s) and s > 0):
        return f"{v:.{digits or 3}f}"
    d = digits if digits is not None else decimals_for(s)
    if round(s, d) == 0:  # never print a sigma as 0: show its first significant digit (up to 6 decimals)
        d = min(6, max(d, -math.floor(math.log10(s))))
    return f"{v:.{d}f} ± {s:.{d}f}"


def _speed(c: dict, prefix: str) -> float:
    return float(np.hypot(_f(c.get(f"{prefix}_x_mm_s")), _f(c.get(f"{prefix}_y_mm_s"))))


def _phase_word(p) -> str:
    return {"slide": "sliding", "roll": "rolling", "rest": "at rest"}.get(str(p), "")


#: Below this approach speed (mm/s) the striking ball is described as at rest (a touch by a
#: neighbour's push, not a shot); about the tracker's speed noise on a resting ball.
AT_REST_WORDS_MM_S = 5.0


def describe_contact(c: dict) -> str:
    """One contact in plain words (pure).

    >>> describe_contact({"contact": 1, "t_s": 0.5, "kind": "ball-cushion", "ball_a": "red", "cushion": "y0",
    ...     "nx": 0.0, "ny": 1.0, "va_in_x_mm_s": 0.0, "va_in_y_mm_s": -1000.0, "va_out_x_mm_s": 0.0,
    ...     "va_out_y_mm_s": 800.0, "speed_in_mm_s": 1000.0, "e": 0.8, "e_sigma": 0.01, "ke_loss_frac": 0.36})
    'C1 at 0.500 s: red reached cushion y0 at 1.00 m/s (1.00 m/s into the cushion), 0° from the normal, and came off at 0.80 m/s, 0° from the normal; e = 0.800 ± 0.010; 36.0% of the kinetic energy lost.'
    """
    parts = []
    ang = departure_angles(c)
    head = f"C{c['contact']} at {_f(c['t_s']):.3f} s: "
    a, b = str(c.get("ball_a", "")), str(c.get("ball_b", "") or "")
    va_in, va_out = _speed(c, "va_in"), _speed(c, "va_out")
    phase = _phase_word(c.get("a_phase_in", ""))
    if c.get("kind") == "ball-ball":
        vb_out = _speed(c, "vb_out")
        if phase == "at rest" or (math.isfinite(va_in) and va_in < AT_REST_WORDS_MM_S):
            s = f"{a} (at rest) and {b} touched"
        elif _ok(c.get("cut_angle_deg")):
            s = f"{a} arrived at {ms(va_in)}" + (f" ({phase})" if phase else "")
            s += f", {_f(c['cut_angle_deg']):.0f}° cut on {b}"
        else:
            s = f"{a} arrived at {ms(va_in)}" + (f" ({phase})" if phase else "") + f" and struck {b}"
        s += f"; {b} left at {ms(vb_out)}"
        if _ok(ang.get("object_deg")):
            s += f" ({ang['object_deg']:.1f}° off {a}'s line"
            s += f", throw {_f(c['throw_deg']):.1f}°)" if _ok(c.get("throw_deg")) else ")"
        s += f", {a} at {ms(va_out)}"
        if _ok(ang.get("cue_deg")) and va_out > 1.0:
            s += f" ({ang['cue_deg']:.0f}° off its line)"
        parts.append(s)
    else:
        cushion = str(c.get("cushion", "") or "")
        s = f"{a} reached cushion {cushion} at {ms(va_in)}".replace("cushion  at", "a cushion at")
        if _ok(c.get("speed_in_mm_s")):
            s += f" ({ms(c['speed_in_mm_s'])} into the cushion)"
        if _ok(ang.get("incidence_deg")):
            s += f", {ang['incidence_deg']:.0f}° from the normal"
        s += f", and came off at {ms(va_out)}"
        if _ok(ang.get("rebound_deg")):
            s += f", {ang['rebound_deg']:.0f}° from the normal"
        parts.append(s)
    note = str(c.get("note", "") or "")
    if _ok(c.get("group")) and _f(c["group"]) > 0 and not _ok(c.get("e")):
        parts.append(group_words(c))
    elif not _ok(c.get("e")) and "e not measured" in note:
        parts.append(note[note.index("e not measured"):].split(";")[0])
    else:
        parts.append(f"e = {pm(c.get('e'), c.get('e_sigma'))}")
    if _ok(c.get("ke_loss_frac")):
        parts.append(energy_words(c["ke_loss_frac"], c.get("ke_loss_sigma_frac")))
    return head + "; ".join(parts) + "."


def energy_words(loss_frac, sigma=None, group: bool = False) -> str:
    """The kinetic-energy change in words: a loss as measured; a gain (no contact makes energy,
    so it is measurement error, or for a group a push from outside it) says so instead of a negative loss.

    >>> energy_words(0.36)
    '36.0% of the kinetic energy lost'
    >>> energy_words(-0.388, 0.2, group=True)
    'its kinetic energy rose 38.8 ± 20.0% (a contact cannot add energy: within its error, or pushed from outside)'
    """
    f, sg = _f(loss_frac), _f(sigma)
    if f >= 0:
        return f"it lost {100 * f:.1f}% of its kinetic energy" if group else f"{100 * f:.1f}% of the kinetic energy lost"
    amount = pm(-100 * f, 100 * sg, 1) if math.isfinite(sg) and sg > 0 else f"{-100 * f:.1f}"
    why = "within its error, or pushed from outside" if group else "measurement error"
    return f"{'its ' if group else ''}kinetic energy rose {amount}% (a contact cannot add energy: {why})"


def calibration_words(cal: dict) -> str:
    """The calibration fact line. Four hand-marked corners determine the camera exactly (8 numbers for
    at most 8 unknowns), so their residual is ~0 by construction and says nothing: say so instead.

    >>> calibration_words({"method": "manual", "residual_px": 1e-6, "residual_mm": 2e-6, "px_per_mm": 0.98})
    'manual, from 4 marked points (an exact fit: no residual to check it by), 0.980 px/mm'
    >>> calibration_words({"method": "auto", "residual_px": 0.44, "residual_mm": 1.13, "px_per_mm": 0.392})
    'auto, residual 0.44 px / 1.13 mm, 0.392 px/mm'
    """
    method, res = cal.get("method"), _f(cal.get("residual_px"))
    scale = f"{pm(cal.get('px_per_mm'), None, 3)} px/mm"
    if method == "manual" and math.isfinite(res) and res < EXACT_FIT_PX:
        return f"manual, from 4 marked points (an exact fit: no residual to check it by), {scale}"
    return (f"{method}, residual {pm(cal.get('residual_px'), None, 2)} px / {pm(cal.get('residual_mm'), None, 2)} mm, "
            f"{scale}")


#: A manual calibration's residual below this (px) is the exact fit of four points, not a check.
EXACT_FIT_PX = 0.005


def describe_contacts(rows: list[dict]) -> list[str]:
    """Plain-words lines for every contact, time order kept; a compound event of several touches
    (balls touching within one frame, e.g. a rack break) is told once, at its first touch (pure).

    >>> rows = [dict(contact=0, t_s=0.30, kind="ball-ball", ball_a="cue", ball_b="red", group=1,
    ...              group_balls="cue red blue", va_in_x_mm_s=2000.0, va_in_y_mm_s=0.0, va_out_x_mm_s=90.0,
    ...              va_out_y_mm_s=0.0, vb_out_x_mm_s=60.0, vb_out_y_mm_s=0.0, a_phase_in="roll",
    ...              group_momentum_residual_pct=2.0, group_momentum_residual_sigma_pct=1.0,
    ...              group_ke_loss_frac=0.1),
    ...         dict(contact=1, t_s=0.301, kind="ball-ball", ball_a="red", ball_b="blue", group=1,
    ...              group_balls="cue red blue", va_out_x_mm_s=60.0, va_out_y_mm_s=0.0, vb_out_x_mm_s=1850.0,
    ...              vb_out_y_mm_s=0.0, group_momentum_residual_pct=2.0, group_momentum_residual_sigma_pct=1.0,
    ...              group_ke_loss_frac=0.1)]
    >>> describe_contacts(rows)
    ["C0-C1 at 0.300-0.301 s: 2 touches within one frame among cue, red, blue (cue–red, red–blue): cue came in at 2.00 m/s (rolling); blue left fastest, at 1.85 m/s. The touches were too close together to see each one's e; the group's momentum changed by 2.0 ± 1.0% and it lost 10.0% of its kinetic energy."]
    """
    out: list[str] = []
    from feltlab.outputs.plots import group_id, compound_groups

    groups = compound_groups(rows)
    told: set[int] = set()
    for c in rows:
        g = group_id(c)
        if g in groups:
            if g not in told:
                told.add(g)
                out.append(describe_group(groups[g]))
            continue
        out.append(describe_contact(c))
    return out


def describe_group(links: list[dict]) -> str:
    """One compound event (several touches within one frame) in plain words (pure)."""
    from feltlab.outputs.plots import contact_ranges

    links = sorted(links, key=lambda c: _f(c.get("t_s")))
    first = links[0]
    t0, t1 = _f(first.get("t_s")), _f(links[-1].get("t_s"))
    balls = str(first.get("group_balls", "") or "").split()
    pairs = ", ".join(f"{c.get('ball_a')}–{c.get('ball_b')}" for c in links)
    s = (f"{contact_ranges([int(_f(c['contact'])) for c in links])} at {t0:.3f}-{t1:.3f} s: {len(links)} touches "
         f"within one frame among {', '.join(balls)} ({pairs})")
    v_in: dict[str, tuple[float, str]] = {}
    v_out: dict[str, float] = {}
    for c in links:
        for who, pre in ((str(c.get("ball_a")), "va"), (str(c.get("ball_b")), "vb")):
            vi, vo = _speed(c, f"{pre}_in"), _speed(c, f"{pre}_out")
            if math.isfinite(vi) and vi > v_in.get(who, (-1.0, ""))[0]:
                v_in[who] = (vi, _phase_word(c.get("a_phase_in" if pre == "va" else "b_phase_in", "")))
            if math.isfinite(vo):
                v_out[who] = max(vo, v_out.get(who, -1.0))
    words = []
    if v_in:
        who, (v, phase) = max(v_in.items(), key=lambda kv: kv[1][0])
        if v > 0:
            words.append(f"{who} came in at {ms(v)}" + (f" ({phase})" if phase else ""))
    if v_out:
        who, v = max(v_out.items(), key=lambda kv: kv[1])
        words.append(f"{who} left fastest, at {ms(v)}")
    if words:
        s += ": " + "; ".join(words)
    s += ". The touches were too close together to see each one's e"
    if _ok(first.get("group_momentum_residual_pct")):
        s += (f"; the group's momentum changed by "
              f"{pm(first['group_momentum_residual_pct'], first.get('group_momentum_residual_sigma_pct'), 1)}%")
    elif _ok(first.get("group_px_in_Ns")) and _f(first.get("group_px_in_Ns")) == 0 == _f(first.get("group_py_in_Ns")):
        s += "; its balls were all at rest before, so their momentum came from other touches"
    if _ok(first.get("group_ke_loss_frac")):
        s += " and " + energy_words(first["group_ke_loss_frac"], first.get("group_ke_loss_sigma_frac"), group=True)
    return s + "."


def group_words(c: dict) -> str:
    """Plain words for one link of a compound event (balls touching within one frame; pure).

    >>> group_words({"group": 2, "group_balls": "blue red yellow", "group_momentum_residual_pct": 3.0,
    ...     "group_momentum_residual_sigma_pct": 1.0, "group_ke_loss_frac": 0.12})
    "one of the touches of group 2 (blue red yellow), all within one frame, so this touch's own e cannot be seen; the group's momentum changed by 3.0 ± 1.0% and it lost 12.0% of its kinetic energy"
    """
    n_balls = len(str(c.get("group_balls", "") or "").split())
    if n_balls == 2:  # a group of one touch: it came within one frame of other touches
        s = "within one frame of other touches, so this touch's own e cannot be seen"
    else:
        s = f"one of the touches of group {int(_f(c['group']))}"
        if str(c.get("group_balls", "") or ""):
            s += f" ({c['group_balls']})"
        s += ", all within one frame, so this touch's own e cannot be seen"
    if _ok(c.get("group_momentum_residual_pct")):
        s += f"; the group's momentum changed by {pm(c['group_momentum_residual_pct'], c.get('group_momentum_residual_sigma_pct'), 1)}%"
    elif _ok(c.get("group_px_in_Ns")) and _f(c.get("group_px_in_Ns")) == 0 == _f(c.get("group_py_in_Ns")):
        s += "; both balls were at rest before, so their momentum came from other touches"
    if _ok(c.get("group_ke_loss_frac")):
        s += " and " + energy_words(c["group_ke_loss_frac"], c.get("group_ke_loss_sigma_frac"), group=True)
    return s


def speed_band(v_mm_s: float) -> str | None:
    """Name of the shot-speed band (Physics of Pool FAQ, Colorado State University; feltlab.standards).

    >>> speed_band(2200.0)
    'fast'
    """
    from feltlab.standards import SHOT_SPEED_BANDS_MM_S

    for name, (lo, hi) in SHOT_SPEED_BANDS_MM_S.items():
        if lo <= v_mm_s < hi:
            return name
    return None


def shot_summary(tracks: pd.DataFrame | None, contacts: pd.DataFrame | None) -> list[str]:
    """A few plain sentences about the whole shot: the striking speed and what was hit."""
    out = []
    if tracks is not None and len(tracks):
        balls = [str(b) for b in tracks["ball"].unique()]
        striker = "cue" if "cue" in balls else None
        sp = np.hypot(tracks["vx_mm_s"].to_numpy(float), tracks["vy_mm_s"].to_numpy(float))
        if striker is None:  # the first ball to move
            moving = tracks[sp > 100.0]
            striker = str(moving.sort_values("t_s")["ball"].iloc[0]) if len(moving) else None
        if striker is not None:
            g = tracks["ball"].astype(str) == striker
            t_first = np.inf
            if contacts is not None and len(contacts):
                inv = contacts[(contacts["ball_a"].astype(str) == striker) | (contacts["ball_b"].astype(str) == striker)]
                if len(inv):
                    t_first = float(inv["t_s"].min())
            before = g & (tracks["t_s"].to_numpy(float) < t_first)
            if before.any() and np.isfinite(sp[before]).any():
                v = float(np.nanmax(sp[before]))
                band = speed_band(v)
                s = f"{striker} moved at up to {ms(v)} before its first contact"
                if band:
                    s += f" (a {band} shot by the Physics of Pool FAQ speed bands)"
                out.append(s + ".")
    if contacts is not None:
        nb = int((contacts["kind"] == "ball-ball").sum()) if len(contacts) else 0
        nc = int((contacts["kind"] == "ball-cushion").sum()) if len(contacts) else 0
        out.append(f"{len(contacts)} contact{'s' if len(contacts) != 1 else ''} found: {nb} ball-ball, "
                   f"{nc} ball-cushion.")
    return out


def embed_png(path: Path, max_width: int = EMBED_MAX_WIDTH_PX) -> str:
    """A ``data:image/png;base64,...`` URI of an image file, scaled down to ``max_width``."""
    img = cv2.imread(str(path), cv2.IMREAD_COLOR)
    if img is None:
        raise ValueError(f"cannot read image {path}")
    if img.shape[1] > max_width:
        f = max_width / img.shape[1]
        img = cv2.resize(img, (max_width, int(round(img.shape[0] * f))), interpolation=cv2.INTER_AREA)
    ok, buf = cv2.imencode(".png", img)
    if not ok:
        raise ValueError(f"cannot encode image {path}")
    return "data:image/png;base64," + base64.b64encode(buf.tobytes()).decode("ascii")


#: Contacts-table columns shown in the report: (column, heading, format).
TABLE_COLUMNS = [
    ("contact", "#", "{}"), ("t_s", "t (s)", "{:.4f}"), ("kind", "kind", "{}"), ("ball_a", "ball a", "{}"),
    ("ball_b", "ball b / cushion", "{}"), ("speed_in_mm_s", "normal speed in (mm/s)", "{:.0f}"),
    ("e", "e", "{:.3f}"), ("e_sigma", "σ(e)", "{:.3f}"), ("impulse_Ns", "impulse (N·s)", "{:.4f}"),
    ("ke_loss_frac", "KE lost (%)", "pct"), ("cut_angle_deg", "cut (°)", "{:.1f}"), ("throw_deg", "throw (°)", "{:.1f}"),
    ("momentum_residual_pct", "momentum residual (%)", "{:.1f}"),
]


def contacts_rows(contacts: pd.DataFrame | None) -> tuple[list[str], list[list[str]]]:
    """Headings and formatted cells of the contacts table."""
    if contacts is None or len(contacts) == 0:
        return [h for _, h, _ in TABLE_COLUMNS], []
    cols = [(c, h, f) for c, h, f in TABLE_COLUMNS if c in contacts.columns]
    rows = []
    for _, r in contacts.iterrows():
        cells = []
        for c, _, f in cols:
            v = r[c]
            if c == "ball_b" and (v is None or str(v) in ("", "nan")):
                v = f"cushion {r.get('cushion', '')}"
            if f == "pct":
                cells.append(f"{100 * _f(v):.1f}" if _ok(v) else "")
            elif f == "{}":
                cells.append("" if v is None or (isinstance(v, float) and not math.isfinite(v)) else str(v))
            else:
                txt = f.format(_f(v)) if _ok(v) else ""
                cells.append(txt[1:] if re.fullmatch(r"-0(\.0*)?", txt) else txt)  # no "-0"
        rows.append(cells)
    return [h for _, h, _ in cols], rows


def render_report(context: dict) -> str:
    """Render the template (autoescaped) to a string (pure)."""
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATE_DIR)), autoescape=True,
                             undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    return env.get_template(TEMPLATE).render(**context)


def build_context(shot: dict, contacts: pd.DataFrame | None, plots: dict[str, Path],
                  contact_images: list[tuple[str, Path]], files: list[str],
                  tracks: pd.DataFrame | None = None) -> dict:
    """Everything the template shows. ``plots``: caption -> PNG; ``contact_images``: (caption, PNG)."""
    cal = shot.get("calibration", {})
    fr = shot.get("friction", {})
    facts = [
        ("clip", shot["clip"]["name"]),
        ("SHA-256", shot["clip"]["sha256"]),
        ("frames", f"{shot['n_frames']} at {shot['fps']:g} frames/s ({shot['fps_source']})"),
        ("duration", f"{shot['duration_s']:.3f} s" if shot.get("duration_s") is not None else "n/a"),
        ("table", f"{shot['table']['preset']} ({shot['table']['length_mm']:.0f} x {shot['table']['width_mm']:.0f} mm)"),
        ("ball", f"{shot['ball']['diameter_mm']:.2f} mm, {shot['ball']['mass_kg'] * 1000:.0f} g"),
        ("calibration", calibration_words(cal)),
        ("balls found", ", ".join(ball_order(str(b.get("ball")) for b in shot.get("balls", []))) or "none"),
        ("cloth sliding friction μs", pm(fr.get("mu_s"), fr.get("mu_s_sigma"))),
        ("rolling resistance μr (deceleration / g)", pm(fr.get("mu_r"), fr.get("mu_r_sigma"), 4)),
        ("software", f"feltlab {shot['software']['version']}"),
    ]
    sentences = describe_contacts(contacts.to_dict(orient="records") if contacts is not None and len(contacts) else [])
    heads, rows = contacts_rows(contacts)
    warnings = [str(w) for w in shot.get("warnings", [])]
    # A calibration note is usually also carried in the run's warnings ("tracking: calibration: ..."); say it once.
    notes = [str(n) for n in cal.get("notes", []) if not any(str(n) in w for w in warnings)]
    return {
        "title": f"Shot report: {shot['clip']['name']}",
        "facts": facts,
        "sentences": sentences,
        "summary": shot_summary(tracks, contacts),
        "warnings": warnings,
        "notes": notes,
        "table_heads": heads,
        "table_rows": rows,
        "plots": [(cap, embed_png(p, 1200)) for cap, p in plots.items()],
        "contact_images": [(cap, embed_png(p)) for cap, p in contact_images],
        "files": sorted(files),
    }


def write_report(path: Path, context: dict) -> Path:
    """Write report.html (UTF-8)."""
    path = Path(path)
    path.write_text(render_report(context), encoding="utf-8")
    return path
