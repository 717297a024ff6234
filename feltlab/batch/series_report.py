"""Series outputs of a batch: all_contacts, series tables, PNG plots and series.html.

Reads each finished clip result (contacts, shot.json, tracks) -- thin I/O around
the pure functions in :mod:`feltlab.batch.stats` and :mod:`feltlab.batch.spec`.
A clip whose content appears more than once in the batch is counted once (its
first path in sorted order); the copies are listed in the report.

Files written into the batch output folder (temporary name, then renamed):
all_contacts.csv/.parquet (every contact with its clip, outlier flag and reason),
series.csv (per contact kind statistics), series_outliers.csv, series_friction.csv
(per clip mu_s, mu_r with sigmas), series_session.csv (per shot: speed, contacts,
cut angle), series_spec.csv (with --spec), series_plots/*.png and series.html
(self-contained: plots embedded as base64 PNG).
"""
from __future__ import annotations

import base64
import json
import math
import os
import uuid
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from feltlab.batch import stats
from feltlab.batch.settings import CONFIDENCE, ROBUST_Z_LIMIT
from feltlab.batch.spec import Spec, SpecResult, evaluate_spec
from feltlab.standards import MU_ROLL_RANGE, MU_SLIDE_CLOTH_RANGE, SHOT_SPEED_BANDS_MM_S

#: Okabe & Ito colour-blind-safe palette ("Color Universal Design", 2008).
OKABE_ITO = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]
SAFETY_NOTE = ("Ball launchers (pendulums, spring or air launchers) can hurt people: guard the launch path, "
               "keep hands and faces clear, and follow your local safety rules first.")


@dataclass
class SeriesData:
    """Per-contact and per-shot tables gathered from finished clip results.

    contacts: all contacts with ``clip`` and ``clip_sha256``; shots: one row per distinct
    clip content (clip, clip_sha256, copies, mu_s, mu_s_sigma, mu_r, mu_r_sigma,
    shot_speed_mm_s, n_contacts, ...); problems: clips whose result files could not be read.
    """

    contacts: pd.DataFrame
    shots: pd.DataFrame
    problems: list[str] = field(default_factory=list)


@dataclass
class SeriesResult:
    contacts: pd.DataFrame  # with outlier flags
    kinds: pd.DataFrame
    fits: dict[str, stats.LineFit | None]
    shots: pd.DataFrame
    spec: SpecResult | None
    confidence: float


@dataclass
class SeriesOutputs:
    files: dict[str, Path]
    result: SeriesResult

    @property
    def html(self) -> Path:
        return self.files["series.html"]


def _find_key(obj: Any, key: str):
    """First value stored under ``key`` anywhere in nested dicts/lists (shot.json layout tolerant)."""
    if isinstance(obj, dict):
        if key in obj:
            return obj[key]
        for v in obj.values():
            r = _find_key(v, key)
            if r is not None:
                return r
    elif isinstance(obj, list):
        for v in obj:
            r = _find_key(v, key)
            if r is not None:
                return r
    return None


def _read_table(result_dir: Path, name: str, columns: list[str] | None = None) -> pd.DataFrame | None:
    pq, csv = result_dir / f"{name}.parquet", result_dir / f"{name}.csv"
    try:
        if pq.is_file():
            return pd.read_parquet(pq, columns=columns) if columns is None else _pq_cols(pq, columns)
        if csv.is_file():
            df = pd.read_csv(csv, keep_default_na=False, na_values=[""])
            return df if columns is None else df[[c for c in columns if c in df.columns]]
    except (OSError, ValueError, pd.errors.EmptyDataError):
        return pd.DataFrame()
    return None


def _pq_cols(path: Path, columns: list[str]) -> pd.DataFrame:
    import pyarrow.parquet as pq

    have = set(pq.read_schema(path).names)
    return pd.read_parquet(path, columns=[c for c in columns if c in have])


def _num(v) -> float:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return math.nan
    return f


def load_series(outcomes) -> SeriesData:
    """Gather contacts and per-shot facts from the finished results in ``outcomes``
    (:class:`~feltlab.batch.runner.ClipOutcome` list), one per distinct content."""
    seen: dict[str, dict] = {}
    frames, problems = [], []
    for o in outcomes:
        if o.status == "failed" or not o.result_dir:
            continue
        if o.clip_sha256 in seen:
            seen[o.clip_sha256]["copies"].append(o.clip_rel)
            continue
        rd = Path(o.result_dir)
        row = {"clip": o.clip_rel, "clip_sha256": o.clip_sha256, "copies": [], "result_dir": str(rd)}
        seen[o.clip_sha256] = row
        try:
            shot = json.loads((rd / "shot.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            shot = {}
        fric = shot.get("friction") if isinstance(shot, dict) and isinstance(shot.get("friction"), dict) else shot
        for k in ("mu_s", "mu_s_sigma", "mu_r", "mu_r_sigma"):
            row[k] = _num(fric.get(k) if isinstance(fric, dict) and k in fric else _find_key(shot, k))
        c = _read_table(rd, "contacts")
        if c is None:
            problems.append(f"{o.clip_rel}: no contacts table in {rd}")
            c = pd.DataFrame()
        c = c.copy()
        c.insert(0, "clip_sha256", o.clip_sha256)
        c.insert(0, "clip", o.clip_rel)
        frames.append(c)
        tr = _read_table(rd, "tracks", ["ball", "vx_mm_s", "vy_mm_s"])
        row["shot_speed_mm_s"], row["speed_ball"] = _peak_speed(tr)
        row.update(_shot_contacts(c))
    contacts = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    for col, default in (("kind", ""), ("e", math.nan), ("e_sigma", math.nan), ("speed_in_mm_s", math.nan)):
        if col not in contacts:
            contacts[col] = default
    shots = pd.DataFrame(list(seen.values()))
    if not shots.empty:
        shots["copies"] = shots["copies"].map(lambda v: "; ".join(v))
    return SeriesData(contacts, shots, problems)


def _peak_speed(tracks: pd.DataFrame | None) -> tuple[float, str]:
    """Peak speed (mm/s) of the cue ball, or of the fastest ball when no ball is labelled cue."""
    if tracks is None or tracks.empty or not {"vx_mm_s", "vy_mm_s"} <= set(tracks.columns):
        return math.nan, ""
    sp = np.hypot(tracks["vx_mm_s"].to_numpy(float), tracks["vy_mm_s"].to_numpy(float))
    if "ball" in tracks and (tracks["ball"] == "cue").any():
        m = (tracks["ball"] == "cue").to_numpy()
        return float(np.nanmax(sp[m])) if np.isfinite(sp[m]).any() else math.nan, "cue"
    if not np.isfinite(sp).any():
        return math.nan, ""
    i = int(np.nanargmax(sp))
    return float(sp[i]), str(tracks["ball"].iloc[i]) if "ball" in tracks else ""


def _shot_contacts(c: pd.DataFrame) -> dict:
    """Per-shot contact counts and the first ball-ball contact's cut angle (deg)."""
    kinds = c["kind"] if "kind" in c else pd.Series([], dtype=str)
    out = {"n_contacts": int(len(c)), "n_ball_ball": int((kinds == "ball-ball").sum()),
           "n_ball_cushion": int((kinds == "ball-cushion").sum()), "first_cut_angle_deg": math.nan,
           "first_object_ball": ""}
    bb = c[kinds == "ball-ball"] if len(c) else c
    if len(bb):
        if "t_s" in bb:
            bb = bb.sort_values("t_s")
        first = bb.iloc[0]
        out["first_cut_angle_deg"] = _num(first.get("cut_angle_deg"))
        a, b = str(first.get("ball_a", "")), str(first.get("ball_b", ""))
        out["first_object_ball"] = b if a == "cue" else a if b == "cue" else b
    return out


def compute_series(data: SeriesData, spec: Spec | None = None, confidence: float = CONFIDENCE,
                   z_limit: float = ROBUST_Z_LIMIT) -> SeriesResult:
    """Outlier flags, per-kind statistics, line fits vs speed, shot table and spec verdict."""
    c = data.contacts
    c = stats.flag_outliers(c, z_limit) if len(c) else c.assign(outlier=False, outlier_reason="")
    kinds = stats.kind_summary(c, confidence) if len(c) else pd.DataFrame()
    fits = {}
    for kind, grp in c.groupby("kind", sort=True) if len(c) else []:
        fits[kind] = stats.wls_line(grp["speed_in_mm_s"], grp["e"], grp["e_sigma"], confidence)
    shots = data.shots.copy()
    if not shots.empty:
        shots["speed_band"] = [stats.speed_band(v, SHOT_SPEED_BANDS_MM_S) for v in shots["shot_speed_mm_s"]]
    spec_res = evaluate_spec(spec, c) if spec is not None else None
    return SeriesResult(c, kinds, fits, shots, spec_res, confidence)


# ---------------------------------------------------------------------------
# plots (matplotlib, Agg)
# ---------------------------------------------------------------------------

def _plt():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def plot_e_vs_speed(res: SeriesResult, path: Path) -> Path | None:
    """e against normal impact speed per kind: error bars, outliers, WLS line + band, spec bands."""
    c = res.contacts
    kinds = sorted(k for k in c["kind"].dropna().unique() if k) if len(c) else []
    if not kinds:
        return None
    plt = _plt()
    fig, axes = plt.subplots(1, len(kinds), figsize=(6.2 * len(kinds), 4.6), squeeze=False)
    pct = f"{res.confidence:.0%}"
    for ax, kind, colour in zip(axes[0], kinds, OKABE_ITO):
        g = c[c["kind"] == kind]
        v = g["speed_in_mm_s"].to_numpy(float) / 1000.0
        e = g["e"].to_numpy(float)
        s = g["e_sigma"].to_numpy(float)
        out = g["outlier"].to_numpy(bool)
        # touches whose e could not be measured (compound events) are not points of this plot
        has_e = np.isfinite(e) & np.isfinite(v)
        v, e, s, out = v[has_e], e[has_e], s[has_e], out[has_e]
        if res.spec is not None:
            for r in res.spec.bands:
                if r.band.kind != kind:
                    continue
                x0 = r.band.speed_min_mm_s / 1000
                x1 = r.band.speed_max_mm_s / 1000 if math.isfinite(r.band.speed_max_mm_s) else max(
                    np.nanmax(v) * 1.1 if np.isfinite(v).any() else 1.0, x0 + 0.5)
                ax.fill_between([x0, x1], r.band.e_min, r.band.e_max, color="#999999", alpha=0.18, lw=0,
                                label="acceptance band (spec)")
        ax.errorbar(v[~out], e[~out], yerr=np.nan_to_num(s[~out]), fmt="o", ms=4, color=colour, ecolor=colour,
                    alpha=0.85, capsize=2, label=f"contacts (n={int((~out).sum())})")
        if out.any():
            ax.errorbar(v[out], e[out], yerr=np.nan_to_num(s[out]), fmt="D", ms=6, mfc="none", color="#000000",
                        capsize=2, label=f"flagged outliers (n={int(out.sum())})")
        fit = res.fits.get(kind)
        if fit is not None and np.isfinite(v).any():
            xs = np.linspace(np.nanmin(v), np.nanmax(v), 100)
            lo, hi = fit.band(xs * 1000)
            ax.plot(xs, fit.predict(xs * 1000), color=OKABE_ITO[2] if colour != OKABE_ITO[2] else OKABE_ITO[3],
                    lw=1.8, label=f"WLS line, slope {fit.b * 1000:+.3f} ± {fit.b_se * 1000:.3f} per m/s")
            ax.fill_between(xs, lo, hi, color=OKABE_ITO[4], alpha=0.25, lw=0, label=f"{pct} band of the line")
        row = res.kinds[res.kinds["kind"] == kind]
        if len(row) and np.isfinite(row["e_combined"].iloc[0]):
            ax.axhline(row["e_combined"].iloc[0], color="#555555", ls="--", lw=1,
                       label=f"combined e {row['e_combined'].iloc[0]:.4f} (DerSimonian-Laird)")
        ax.set_title(f"{kind}: restitution vs normal impact speed")
        ax.set_xlabel("normal impact speed (m/s)")
        ax.set_ylabel("coefficient of restitution e")
        ax.grid(alpha=0.3)
        handles, labels = ax.get_legend_handles_labels()
        uniq = dict(zip(labels, handles))
        ax.legend(uniq.values(), uniq.keys(), fontsize=8, loc="best")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def plot_session(res: SeriesResult, path: Path) -> Path | None:
    """Coach's view: shot speed per shot (speed bands shaded) and a cut-angle histogram."""
    sh = res.shots
    if sh.empty:
        return None
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(12, 4.4), gridspec_kw={"width_ratios": [1.6, 1]})
    x = np.arange(len(sh))
    sp = sh["shot_speed_mm_s"].to_numpy(float) / 1000
    top = max(float(np.nanmax(sp)) * 1.1 if np.isfinite(sp).any() else 1.0, 1.0)
    for (name, (lo, hi)), col in zip(SHOT_SPEED_BANDS_MM_S.items(), ["#F3F3F3", "#E4E4E4", "#D3D3D3", "#C2C2C2"]):
        if lo / 1000 >= top:
            continue
        a1.axhspan(lo / 1000, hi / 1000, color=col, zorder=0)
        a1.text(1.01, (lo + min(hi, top * 1000)) / 2000, name, fontsize=8, va="center", ha="left", color="#444444",
                transform=a1.get_yaxis_transform(), clip_on=False)
    a1.set_ylim(0, top)
    a1.bar(x, np.nan_to_num(sp), color=OKABE_ITO[0], zorder=2)
    a1.set_xticks(x)
    a1.set_xticklabels([Path(c).stem[:18] for c in sh["clip"]], rotation=60, ha="right", fontsize=7)
    a1.set_ylabel("peak cue-ball speed (m/s)")
    a1.set_title("shot speed per shot (bands: Physics of Pool FAQ, CSU)")
    cut = sh["first_cut_angle_deg"].to_numpy(float)
    cut = cut[np.isfinite(cut)]
    if cut.size:
        a2.hist(cut, bins=np.arange(0, 95, 7.5), color=OKABE_ITO[1], edgecolor="white")
    else:
        a2.text(0.5, 0.5, "no ball-ball contacts", ha="center", va="center", transform=a2.transAxes)
    a2.set_xlabel("cut angle at the first ball-ball contact (deg)")
    a2.set_ylabel("shots")
    a2.yaxis.get_major_locator().set_params(integer=True)
    a2.set_title("cut angles")
    for a in (a1, a2):
        a.grid(alpha=0.3, axis="y")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def plot_friction(res: SeriesResult, path: Path) -> Path | None:
    """Sliding and rolling friction coefficients per clip with their sigmas."""
    sh = res.shots
    if sh.empty or not (np.isfinite(sh.get("mu_s", pd.Series(dtype=float))).any()
                        or np.isfinite(sh.get("mu_r", pd.Series(dtype=float))).any()):
        return None
    plt = _plt()
    fig, axes = plt.subplots(1, 2, figsize=(12, 3.8))
    x = np.arange(len(sh))
    for ax, key, label, col, rng in (
            (axes[0], "mu_s", "sliding friction mu_s (ball on cloth)", OKABE_ITO[0], MU_SLIDE_CLOTH_RANGE),
            (axes[1], "mu_r", "rolling resistance mu_r (deceleration / g)", OKABE_ITO[1], MU_ROLL_RANGE)):
        lo, hi = rng
        ax.axhspan(lo, hi, color="#DDDDDD", alpha=0.5, lw=0, label="published range (Physics of Pool FAQ, CSU)")
        ax.errorbar(x, sh[key].to_numpy(float), yerr=np.nan_to_num(sh[f"{key}_sigma"].to_numpy(float)), fmt="o",
                    color=col, capsize=3, label="this clip (±1 sigma)")
        ax.set_ylabel(key)
        ax.legend(fontsize=8, loc="upper right")
        ax.set_xticks(x)
        ax.set_xticklabels([Path(c).stem[:18] for c in sh["clip"]], rotation=60, ha="right", fontsize=7)
        ax.set_title(label)
        ax.grid(alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------

def _replace_write(path: Path, write) -> Path:
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        write(tmp)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def _csv(df: pd.DataFrame, path: Path, digits: int = 6) -> Path:
    """CSV with ``digits`` significant digits, written to a temporary name then renamed."""
    return _replace_write(path, lambda p: df.to_csv(p, index=False, float_format=f"%.{digits}g"))


def _fmt(v, digits: int = 4) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(f):
        return "–"
    return f"{f:.{digits}f}"


def _pm(v, s) -> str:
    """``v ± s`` with s to two significant digits and v to the same decimals ("–" when missing).

    >>> _pm(0.007021, 4.71e-05), _pm(0.9451, float("nan"))
    ('0.007021 ± 0.000047', '0.9451')
    """
    try:
        v, s = float(v), float(s)
    except (TypeError, ValueError):
        return "–"
    if not math.isfinite(v):
        return "–"
    if not (math.isfinite(s) and s > 0):
        return _fmt(v)
    d = min(max(0, 1 - math.floor(math.log10(s))), 9)
    return f"{v:.{d}f} ± {s:.{d}f}"


def _range(lo, hi, digits: int = 4) -> str:
    """``lo–hi`` or "–" when either end is missing."""
    a, b = _fmt(lo, digits), _fmt(hi, digits)
    return "–" if "–" in (a, b) else f"{a}–{b}"


def write_series(out_dir: Path, outcomes, spec: Spec | None = None, confidence: float = CONFIDENCE,
                 settings: dict | None = None, failures: list | None = None) -> SeriesOutputs:
    """Compute the series statistics from ``outcomes`` and write every series file."""
    out_dir = Path(out_dir)
    data = load_series(outcomes)
    res = compute_series(data, spec, confidence)
    files: dict[str, Path] = {}
    allc = res.contacts
    files["all_contacts.csv"] = _csv(allc, out_dir / "all_contacts.csv", digits=10)  # measurements: keep them
    files["all_contacts.parquet"] = _replace_write(out_dir / "all_contacts.parquet",
                                                   lambda p: allc.to_parquet(p, index=False))
    files["series.csv"] = _csv(res.kinds, out_dir / "series.csv")
    outl = allc[allc["outlier"]] if len(allc) else allc
    keep = [c for c in ("clip", "contact", "t_s", "kind", "ball_a", "ball_b", "cushion", "speed_in_mm_s", "e",
                        "e_sigma", "momentum_residual_pct", "outlier_reason") if c in outl.columns]
    files["series_outliers.csv"] = _csv(outl[keep], out_dir / "series_outliers.csv")
    shots = res.shots
    fric_cols = [c for c in ("clip", "mu_s", "mu_s_sigma", "mu_r", "mu_r_sigma", "copies") if c in shots.columns]
    files["series_friction.csv"] = _csv(shots[fric_cols] if len(shots) else pd.DataFrame(columns=fric_cols),
                                        out_dir / "series_friction.csv")
    sess_cols = [c for c in ("clip", "shot_speed_mm_s", "speed_ball", "speed_band", "n_contacts", "n_ball_ball",
                             "n_ball_cushion", "first_object_ball", "first_cut_angle_deg", "copies")
                 if c in shots.columns]
    files["series_session.csv"] = _csv(shots[sess_cols] if len(shots) else pd.DataFrame(columns=sess_cols),
                                       out_dir / "series_session.csv")
    if res.spec is not None:
        files["series_spec.csv"] = _csv(res.spec.table(), out_dir / "series_spec.csv")
    plots_dir = out_dir / "series_plots"
    plots_dir.mkdir(exist_ok=True)
    images = []
    for name, fn, caption in (
        ("e_vs_speed.png", plot_e_vs_speed, "Restitution against normal impact speed, per contact kind."),
        ("session.png", plot_session, "Session: shot speeds and cut angles."),
        ("friction.png", plot_friction, "Friction coefficients per clip (±1 sigma)."),
    ):
        target = plots_dir / name
        made = _plot_atomic(fn, res, target)
        if made is None:
            target.unlink(missing_ok=True)  # no stale picture from an earlier run
        else:
            files[f"series_plots/{name}"] = made
            images.append((caption, base64.b64encode(made.read_bytes()).decode("ascii")))
    html = render_html(res, data, images, outcomes, settings or {}, failures or [])
    files["series.html"] = _replace_write(out_dir / "series.html", lambda p: p.write_text(html, encoding="utf-8"))
    return SeriesOutputs(files, res)


def _plot_atomic(fn, res: SeriesResult, target: Path) -> Path | None:
    tmp = target.with_name(f".{target.stem}.{uuid.uuid4().hex[:8]}.png")
    try:
        made = fn(res, tmp)
        if made is None:
            return None
        os.replace(tmp, target)
        return target
    finally:
        if tmp.exists():
            tmp.unlink()


def render_html(res: SeriesResult, data: SeriesData, images, outcomes, settings: dict, failures) -> str:
    """series.html text (jinja2, autoescaped; images given as base64 PNG)."""
    import jinja2

    env = jinja2.Environment(loader=jinja2.PackageLoader("feltlab", "templates"),
                             autoescape=jinja2.select_autoescape(["html", "j2"]))
    env.filters["f"] = _fmt
    env.globals.update(pm=_pm, rng=_range, pct1=lambda v: "–" if _fmt(v) == "–" else f"{float(v) * 100:.1f}%")
    pct = f"{res.confidence:.0%}"
    kinds = []
    for _, r in res.kinds.iterrows():
        kinds.append({**r.to_dict(), "sentence": _kind_sentence(r, pct)})
    counts = {s: sum(o.status == s for o in outcomes) for s in ("analysed", "skipped", "copied", "failed")}
    ctx = {
        "generated": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "counts": counts, "n_clips": len(outcomes), "n_distinct": len(res.shots),
        "kinds": kinds, "pct": pct, "z_limit": ROBUST_Z_LIMIT,
        "outliers": res.contacts[res.contacts["outlier"]].to_dict("records") if len(res.contacts) else [],
        "shots": res.shots.to_dict("records") if len(res.shots) else [],
        "spec": res.spec, "images": images, "failures": failures, "problems": data.problems,
        "settings_json": json.dumps(settings, indent=1, sort_keys=True, default=str)[:4000],
        "safety": SAFETY_NOTE, "session": _session_summary(res.shots),
    }
    return env.get_template("series.html.j2").render(**ctx)


def _kind_sentence(r: pd.Series, pct: str) -> str:
    if not r["n"]:
        return ""
    s = f"{int(r['n'])} {r['kind']} contact{'s' if r['n'] != 1 else ''}: mean e = {_fmt(r['e_mean'])}"
    if math.isfinite(r["e_ci_low"]):
        s += f" ({pct} CI {_fmt(r['e_ci_low'])}–{_fmt(r['e_ci_high'])}, SD {_fmt(r['e_sd'])})"
    if math.isfinite(r["e_combined"]):
        s += (f"; combined with each contact's sigma (DerSimonian-Laird) e = {_fmt(r['e_combined'])} "
              f"({pct} CI {_fmt(r['e_combined_ci_low'])}–{_fmt(r['e_combined_ci_high'])})")
        if math.isfinite(r["birge_ratio"]):
            s += f", Birge ratio {_fmt(r['birge_ratio'], 2)}"
    return s + "."


def _session_summary(shots: pd.DataFrame) -> list[str]:
    """Plain sentences for a coach: shots, speeds, contacts per shot, cut angles."""
    if shots.empty:
        return []
    out = [f"{len(shots)} distinct shots."]
    sp = shots["shot_speed_mm_s"].to_numpy(float)
    if np.isfinite(sp).any():
        bands = shots["speed_band"].value_counts()
        out.append(f"Peak cue-ball speed {np.nanmin(sp) / 1000:.2f}–{np.nanmax(sp) / 1000:.2f} m/s "
                   f"(median {np.nanmedian(sp) / 1000:.2f} m/s); "
                   + ", ".join(f"{n} {b}" for b, n in bands.items() if b) + ".")
    out.append(f"Contacts per shot: mean {shots['n_contacts'].mean():.1f} "
               f"({shots['n_ball_ball'].mean():.1f} ball-ball, {shots['n_ball_cushion'].mean():.1f} cushion).")
    cut = shots["first_cut_angle_deg"].to_numpy(float)
    if np.isfinite(cut).any():
        out.append(f"Cut angle at the first ball-ball contact: median {np.nanmedian(cut):.0f}°, "
                   f"range {np.nanmin(cut):.0f}–{np.nanmax(cut):.0f}°.")
    return out
