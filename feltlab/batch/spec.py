"""Acceptance spec: restitution bands a series must meet (our own TOML schema).

A spec file holds an optional ``title``, ``confidence`` (default 0.95) and
``statistic`` and one ``[[band]]`` table per requirement::

    title = "Bench series: ball set, medium shots"
    confidence = 0.95
    statistic = "mean"        # "mean": Student-t interval of the plain mean (default)
                              # "combined": DerSimonian-Laird interval using each e_sigma

    [[band]]
    name = "ball-ball, medium speed"
    kind = "ball-ball"        # or "ball-cushion"
    e_min = 0.92
    e_max = 0.98
    speed_min_mm_s = 890      # normal impact speed window [min, max), optional
    speed_max_mm_s = 1900
    min_contacts = 5          # optional, default 3
    cushion = ["x0", "xL"]    # optional: only these cushions (ball-cushion bands)

A band PASSES when at least ``min_contacts`` contacts fall in it and the whole
confidence interval of the chosen statistic lies inside [e_min, e_max]. A band
with too few contacts is "NO DATA" and counts as not passed. The overall verdict
is PASS only when every band passes. Outliers are flagged in the report but
stay in the statistics.

Safety: ball launchers (pendulums, spring or air launchers) can hurt people.
Follow your local safety rules first; this spec only describes measurements.
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from feltlab.batch.settings import CONFIDENCE
from feltlab.batch.stats import t_mean_ci, weighted_mean
from feltlab.errors import FeltlabError

KINDS = ("ball-ball", "ball-cushion")
CUSHIONS = ("x0", "xL", "y0", "yW")
STATISTICS = ("mean", "combined")
_TOP_KEYS = {"title", "confidence", "statistic", "band"}
_BAND_KEYS = {"name", "kind", "e_min", "e_max", "speed_min_mm_s", "speed_max_mm_s", "min_contacts", "cushion"}
DEFAULT_MIN_CONTACTS = 3


@dataclass(frozen=True)
class Band:
    """One acceptance band: e in [e_min, e_max] for ``kind`` contacts with normal impact speed in
    [speed_min_mm_s, speed_max_mm_s) (mm/s)."""

    name: str
    kind: str
    e_min: float
    e_max: float
    speed_min_mm_s: float = 0.0
    speed_max_mm_s: float = math.inf
    min_contacts: int = DEFAULT_MIN_CONTACTS
    cushions: tuple[str, ...] = ()


@dataclass(frozen=True)
class Spec:
    title: str
    bands: tuple[Band, ...]
    confidence: float = CONFIDENCE
    statistic: str = "mean"
    source: str = ""


@dataclass
class BandResult:
    band: Band
    n: int
    estimate: float
    ci_low: float
    ci_high: float
    verdict: str  # "PASS", "FAIL" or "NO DATA"
    why: str = ""


@dataclass
class SpecResult:
    spec: Spec
    bands: list[BandResult] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return bool(self.bands) and all(b.verdict == "PASS" for b in self.bands)

    @property
    def verdict(self) -> str:
        return "PASS" if self.passed else "FAIL"

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{
            "band": r.band.name, "kind": r.band.kind, "e_min": r.band.e_min, "e_max": r.band.e_max,
            "speed_min_mm_s": r.band.speed_min_mm_s, "speed_max_mm_s": r.band.speed_max_mm_s,
            "statistic": self.spec.statistic, "confidence": self.spec.confidence,
            "n": r.n, "e_estimate": r.estimate, "ci_low": r.ci_low, "ci_high": r.ci_high,
            "verdict": r.verdict, "why": r.why,
        } for r in self.bands])


def _bad(path: str, what: str) -> FeltlabError:
    return FeltlabError(f"spec {path}: {what}; see clips/example_spec.toml for the format", stage="spec")


def _num(d: dict, key: str, where: str, path: str, default=None) -> float:
    if key not in d:
        if default is None:
            raise _bad(path, f"{where} needs {key}")
        return default
    v = d[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise _bad(path, f"{where}: {key} must be a number, got {v!r}")
    return float(v)


def parse_spec(data: dict, path: str = "<spec>") -> Spec:
    """Validate parsed TOML ``data`` into a :class:`Spec`; FeltlabError names the first problem."""
    unknown = set(data) - _TOP_KEYS
    if unknown:
        raise _bad(path, f"unknown key(s) {', '.join(sorted(unknown))} (allowed: {', '.join(sorted(_TOP_KEYS))})")
    conf = _num(data, "confidence", "top level", path, CONFIDENCE)
    if not 0.5 <= conf < 1.0:
        raise _bad(path, f"confidence must be between 0.5 and 1 (e.g. 0.95), got {conf}")
    stat = data.get("statistic", "mean")
    if stat not in STATISTICS:
        raise _bad(path, f"statistic must be one of {', '.join(STATISTICS)}, got {stat!r}")
    raw = data.get("band")
    if not isinstance(raw, list) or not raw:
        raise _bad(path, "no [[band]] tables")
    bands = []
    for i, b in enumerate(raw, 1):
        where = f"band {i}"
        if not isinstance(b, dict):
            raise _bad(path, f"{where} must be a table ([[band]])")
        unknown = set(b) - _BAND_KEYS
        if unknown:
            raise _bad(path, f"{where}: unknown key(s) {', '.join(sorted(unknown))} "
                             f"(allowed: {', '.join(sorted(_BAND_KEYS))})")
        kind = b.get("kind")
        if kind not in KINDS:
            raise _bad(path, f"{where}: kind must be one of {', '.join(KINDS)}, got {kind!r}")
        e_min, e_max = _num(b, "e_min", where, path), _num(b, "e_max", where, path)
        if not 0.0 <= e_min < e_max <= 1.5:
            raise _bad(path, f"{where}: need 0 <= e_min < e_max (got {e_min}, {e_max})")
        v0 = _num(b, "speed_min_mm_s", where, path, 0.0)
        v1 = _num(b, "speed_max_mm_s", where, path, math.inf)
        if not 0.0 <= v0 < v1:
            raise _bad(path, f"{where}: need 0 <= speed_min_mm_s < speed_max_mm_s (got {v0}, {v1})")
        mc = b.get("min_contacts", DEFAULT_MIN_CONTACTS)
        if isinstance(mc, bool) or not isinstance(mc, int) or mc < 2:
            raise _bad(path, f"{where}: min_contacts must be a whole number >= 2, got {mc!r}")
        cush = b.get("cushion", [])
        cush = [cush] if isinstance(cush, str) else cush
        if not isinstance(cush, list) or any(c not in CUSHIONS for c in cush):
            raise _bad(path, f"{where}: cushion must be a list of {', '.join(CUSHIONS)}, got {b.get('cushion')!r}")
        if cush and kind != "ball-cushion":
            raise _bad(path, f"{where}: cushion only applies to kind = \"ball-cushion\"")
        name = str(b.get("name") or f"{kind} {e_min:g}-{e_max:g}")
        bands.append(Band(name, kind, e_min, e_max, v0, v1, mc, tuple(cush)))
    return Spec(str(data.get("title", "")), tuple(bands), conf, stat, path)


def load_spec(path: Path | str) -> Spec:
    """Read and validate a spec TOML file."""
    p = Path(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise FeltlabError(f"spec file {p} not found; pass an existing TOML file to --spec", stage="spec") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise FeltlabError(f"spec {p} is not valid TOML ({exc}); fix the syntax", stage="spec") from None
    return parse_spec(data, str(p))


def band_contacts(contacts: pd.DataFrame, band: Band) -> pd.DataFrame:
    """The contacts a band judges: its kind, cushions and speed window."""
    if contacts.empty:
        return contacts
    sel = contacts["kind"] == band.kind
    v = contacts["speed_in_mm_s"].astype(float)
    sel &= (v >= band.speed_min_mm_s) & (v < band.speed_max_mm_s)
    if band.cushions and "cushion" in contacts:
        sel &= contacts["cushion"].isin(band.cushions)
    return contacts[sel & np.isfinite(contacts["e"].astype(float))]


def evaluate_spec(spec: Spec, contacts: pd.DataFrame) -> SpecResult:
    """Judge every band against the series' contacts (columns kind, e, e_sigma, speed_in_mm_s)."""
    res = SpecResult(spec)
    for band in spec.bands:
        sub = band_contacts(contacts, band)
        if spec.statistic == "combined":
            wm = weighted_mean(sub["e"], sub.get("e_sigma", pd.Series(np.nan, index=sub.index)), spec.confidence)
            n_used, est, lo, hi = wm.n, wm.combined_mean, wm.combined_ci_low, wm.combined_ci_high
        else:
            m = t_mean_ci(sub["e"], spec.confidence)
            n_used, est, lo, hi = m.n, m.mean, m.ci_low, m.ci_high
        pct = f"{spec.confidence:.0%}"
        if n_used < band.min_contacts or not (np.isfinite(lo) and np.isfinite(hi)):
            verdict, why = "NO DATA", f"{n_used} contacts in the band, need {band.min_contacts}"
        elif band.e_min <= lo and hi <= band.e_max:
            verdict, why = "PASS", f"{pct} CI {lo:.4f}-{hi:.4f} inside {band.e_min:g}-{band.e_max:g}"
        else:
            side = "below e_min" if lo < band.e_min else "above e_max"
            verdict, why = "FAIL", f"{pct} CI {lo:.4f}-{hi:.4f} reaches {side} ({band.e_min:g}-{band.e_max:g})"
        res.bands.append(BandResult(band, n_used, est, lo, hi, verdict, why))
    return res
