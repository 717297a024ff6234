"""Series statistics for restitution testing: pure functions on arrays and tables.

Methods (each named, so a reader can check it):

* Mean with a Student-t confidence interval: mean +/- t_{(1+c)/2, n-1} s / sqrt(n),
  s the sample standard deviation (ddof = 1). Uses the scatter only.
* Inverse-variance weighted mean of the per-contact e with their e_sigma
  (fixed-effect: mean = sum(w e) / sum(w), w = 1/sigma^2, se = 1/sqrt(sum w)) and
  its Birge ratio R_B = sqrt(chi^2 / (n-1)) (R. T. Birge, Phys. Rev. 40:207, 1932):
  R_B ~ 1 means the scatter is what the sigmas predict, R_B >> 1 that it is not.
* How scatter and sigma are combined: DerSimonian-Laird random effects
  (DerSimonian & Laird, Controlled Clinical Trials 7:177, 1986). Scatter beyond
  what the sigmas explain becomes a between-contact variance tau^2 (moment
  estimate, floored at 0); each contact then weighs 1/(sigma^2 + tau^2); the
  combined mean's CI is mean +/- z_{(1+c)/2} se. With tau^2 = 0 this is the
  inverse-variance weighted mean. This is the "combined" e we report.
* Outliers: modified z-score z = 0.6745 (x - median) / MAD (Iglewicz & Hoaglin,
  1993), |z| > 3.5 flags; applied per contact kind to e (both sides), to
  log(e_sigma) and |momentum residual| (high side only). Flagged, listed, never
  dropped: every statistic includes them.
* e versus normal impact speed: straight line e = a + b v by weighted least
  squares (weights 1/e_sigma^2, parameter covariance scaled by the reduced
  chi^2, as scipy.optimize.curve_fit does with absolute_sigma=False) and the
  confidence band of the mean response, yhat +/- t_{(1+c)/2, n-2} sqrt(x0' C x0)
  (standard regression result, e.g. Draper & Smith, Applied Regression Analysis).

Units: e dimensionless, speeds mm/s.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
from scipy import stats as sps

from feltlab.batch.settings import (CONFIDENCE, MAD_TO_Z, MEANAD_SCALE, MIN_N_LINE, MIN_N_MEAN,
                                    ROBUST_Z_LIMIT)

NAN = float("nan")


@dataclass(frozen=True)
class MeanCI:
    """Sample mean with a Student-t confidence interval (NaN where n < 2)."""

    n: int
    mean: float
    sd: float
    sem: float
    ci_low: float
    ci_high: float
    confidence: float


def t_mean_ci(x, confidence: float = CONFIDENCE) -> MeanCI:
    """Mean, sample SD and t-interval of the finite values of ``x``.

    >>> r = t_mean_ci([0.93, 0.95, 0.94])
    >>> round(r.mean, 3), round(r.ci_low, 4), round(r.ci_high, 4)
    (0.94, 0.9152, 0.9648)
    """
    v = np.asarray(x, dtype=float)
    v = v[np.isfinite(v)]
    n = int(v.size)
    if n == 0:
        return MeanCI(0, NAN, NAN, NAN, NAN, NAN, confidence)
    mean = float(v.mean())
    if n < MIN_N_MEAN:
        return MeanCI(n, mean, NAN, NAN, NAN, NAN, confidence)
    sd = float(v.std(ddof=1))
    sem = sd / math.sqrt(n)
    half = float(sps.t.ppf(0.5 + confidence / 2, n - 1)) * sem
    return MeanCI(n, mean, sd, sem, mean - half, mean + half, confidence)


@dataclass(frozen=True)
class WeightedMean:
    """Inverse-variance (fixed-effect) and DerSimonian-Laird (random-effects) means.

    n: contacts with a usable sigma; fixed_*: weights 1/sigma^2; fixed_se_scaled: fixed_se
    times the Birge ratio (scatter sets the scale, sigmas the relative weights); q: Cochran's Q
    (= chi^2 about the fixed mean); birge_ratio: sqrt(q/(n-1)); tau: between-contact
    SD (DL); combined_*: DL mean, its standard error and z-interval.
    """

    n: int
    fixed_mean: float
    fixed_se: float
    fixed_se_scaled: float
    q: float
    birge_ratio: float
    tau: float
    combined_mean: float
    combined_se: float
    combined_ci_low: float
    combined_ci_high: float
    confidence: float


def weighted_mean(x, sigma, confidence: float = CONFIDENCE) -> WeightedMean:
    """Weighted means of ``x`` with standard uncertainties ``sigma`` (pairs with sigma <= 0 or
    non-finite are left out).

    >>> w = weighted_mean([1.0, 2.0], [1.0, 1.0])
    >>> w.fixed_mean, round(w.fixed_se, 4), round(w.tau, 4)
    (1.5, 0.7071, 0.0)
    """
    x = np.asarray(x, dtype=float)
    s = np.asarray(sigma, dtype=float)
    ok = np.isfinite(x) & np.isfinite(s) & (s > 0)
    x, s = x[ok], s[ok]
    n = int(x.size)
    if n == 0:
        return WeightedMean(0, NAN, NAN, NAN, NAN, NAN, NAN, NAN, NAN, NAN, NAN, confidence)
    w = 1.0 / s**2
    sw = w.sum()
    mu = float((w * x).sum() / sw)
    se = float(1.0 / math.sqrt(sw))
    q = float((w * (x - mu) ** 2).sum())
    if n >= 2:
        birge = math.sqrt(q / (n - 1))
        denom = sw - (w**2).sum() / sw
        tau2 = max(0.0, (q - (n - 1)) / denom) if denom > 0 else 0.0
    else:
        birge, tau2 = NAN, 0.0
    wr = 1.0 / (s**2 + tau2)
    mu_r = float((wr * x).sum() / wr.sum())
    se_r = float(1.0 / math.sqrt(wr.sum()))
    z = float(sps.norm.ppf(0.5 + confidence / 2))
    return WeightedMean(n, mu, se, se * birge, q, birge, math.sqrt(tau2), mu_r, se_r, mu_r - z * se_r, mu_r + z * se_r,
                        confidence)


def robust_z(x) -> np.ndarray:
    """Modified z-scores 0.6745 (x - median) / MAD (Iglewicz & Hoaglin 1993).

    When MAD is 0 the mean absolute deviation times 1.2533 stands in; when that is
    0 too every score is 0. NaN stays NaN.

    >>> np.round(robust_z([1.0, 2.0, 3.0, 4.0, 100.0]), 2).tolist()
    [-1.35, -0.67, 0.0, 0.67, 65.43]
    """
    v = np.asarray(x, dtype=float)
    out = np.full(v.shape, NAN)
    ok = np.isfinite(v)
    if not ok.any():
        return out
    med = float(np.median(v[ok]))
    dev = np.abs(v[ok] - med)
    mad = float(np.median(dev))
    if mad > 0:
        out[ok] = MAD_TO_Z * (v[ok] - med) / mad
        return out
    meanad = float(dev.mean()) * MEANAD_SCALE
    out[ok] = (v[ok] - med) / meanad if meanad > 0 else 0.0
    return out


def flag_outliers(contacts: pd.DataFrame, limit: float = ROBUST_Z_LIMIT) -> pd.DataFrame:
    """Copy of ``contacts`` with ``outlier`` (bool) and ``outlier_reason`` columns.

    Per contact kind, three checks (rows are never removed):

    * e: distance from the kind's median in units of sqrt(s^2 + e_sigma^2), where s is the
      robust series scatter (MAD x 1.4826) -- a contact is flagged when it is far from the
      series given both the series scatter and its own uncertainty, so an imprecise slow
      shot is not an outlier merely for being imprecise (two-sided, |z| > limit);
    * measurement quality: log of e_sigma x speed_in_mm_s (the velocity uncertainty in mm/s
      behind e; e_sigma alone grows as 1/speed for the same tracking noise), or log e_sigma
      when the speed is missing (high side only);
    * |momentum_residual_pct| (ball-ball; high side only).
    """
    df = contacts.copy()
    reasons = [[] for _ in range(len(df))]
    pos = {idx: i for i, idx in enumerate(df.index)}
    for _, grp in df.groupby("kind", sort=True):
        rows = [pos[i] for i in grp.index]
        checks = []
        sig = grp["e_sigma"].to_numpy(float) if "e_sigma" in grp else np.full(len(grp), NAN)
        if "e" in grp:
            checks.append(("e robust z", _e_z(grp["e"].to_numpy(float), sig), True))
        if "e_sigma" in grp:
            scale = sig
            label = "e_sigma"
            if "speed_in_mm_s" in grp:
                spd = np.abs(grp["speed_in_mm_s"].to_numpy(float))
                scale = np.where(np.isfinite(spd) & (spd > 0), sig * spd, sig)
                label = "e_sigma x speed"
            with np.errstate(divide="ignore", invalid="ignore"):
                checks.append((f"{label} robust z", robust_z(np.where(scale > 0, np.log(scale), np.nan)), False))
        if "momentum_residual_pct" in grp:
            checks.append(("momentum residual robust z",
                           robust_z(np.abs(grp["momentum_residual_pct"].to_numpy(float))), False))
        for name, z, two_sided in checks:
            hit = (np.abs(z) > limit) if two_sided else (z > limit)
            for k in np.flatnonzero(np.nan_to_num(hit, nan=False)):
                reasons[rows[k]].append(f"{name} {z[k]:+.1f}")
    df["outlier"] = [bool(r) for r in reasons]
    df["outlier_reason"] = ["; ".join(r) for r in reasons]
    return df


def _e_z(e: np.ndarray, e_sigma: np.ndarray) -> np.ndarray:
    """(e - median) / sqrt(s^2 + e_sigma^2); s = robust scatter of e (MAD / 0.6745).

    Falls back to :func:`robust_z` scaling where e_sigma is unknown.
    """
    z = robust_z(e)
    ok = np.isfinite(e)
    if not ok.any():
        return z
    med = float(np.median(e[ok]))
    mad = float(np.median(np.abs(e[ok] - med)))
    s = mad / MAD_TO_Z if mad > 0 else float(np.abs(e[ok] - med).mean()) * MEANAD_SCALE
    sig = np.where(np.isfinite(e_sigma) & (e_sigma > 0), e_sigma, 0.0)
    den = np.sqrt(s**2 + sig**2)
    with np.errstate(divide="ignore", invalid="ignore"):
        zz = np.where(den > 0, (e - med) / den, 0.0)
    return np.where(ok, zz, NAN)


@dataclass(frozen=True)
class LineFit:
    """Straight line y = a + b x by weighted least squares, with a confidence band.

    a, b: intercept and slope; cov: 2x2 covariance of (a, b) scaled by the reduced
    chi^2; dof: n - 2; chi2_red: reduced chi^2 of the weighted residuals;
    t_crit: t_{(1+c)/2, dof}; weighted: True when e_sigma weights were used.
    """

    n: int
    a: float
    b: float
    cov: tuple[tuple[float, float], tuple[float, float]]
    dof: int
    chi2_red: float
    t_crit: float
    confidence: float
    weighted: bool

    @property
    def a_se(self) -> float:
        return math.sqrt(self.cov[0][0])

    @property
    def b_se(self) -> float:
        return math.sqrt(self.cov[1][1])

    def predict(self, x) -> np.ndarray:
        return self.a + self.b * np.asarray(x, dtype=float)

    def band(self, x) -> tuple[np.ndarray, np.ndarray]:
        """Confidence band of the mean response at ``x``: (low, high)."""
        x = np.asarray(x, dtype=float)
        c = np.asarray(self.cov)
        var = c[0, 0] + 2 * x * c[0, 1] + x**2 * c[1, 1]
        half = self.t_crit * np.sqrt(np.maximum(var, 0.0))
        y = self.predict(x)
        return y - half, y + half


def wls_line(x, y, sigma=None, confidence: float = CONFIDENCE) -> LineFit | None:
    """Weighted least-squares straight line (None when fewer than 3 usable points or x constant).

    ``sigma``: per-point standard uncertainties (weights 1/sigma^2); points with a missing
    or non-positive sigma are left out when any sigma is usable, else all weigh 1.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    weighted = False
    if sigma is not None:
        s = np.asarray(sigma, dtype=float)
        good = ok & np.isfinite(s) & (s > 0)
        if good.sum() >= MIN_N_LINE:
            ok, weighted = good, True
    x, y = x[ok], y[ok]
    n = int(x.size)
    if n < MIN_N_LINE or np.ptp(x) == 0:
        return None
    w = 1.0 / np.asarray(sigma, dtype=float)[ok] ** 2 if weighted else np.ones(n)
    X = np.column_stack([np.ones(n), x])
    xtwx = X.T @ (w[:, None] * X)
    beta = np.linalg.solve(xtwx, X.T @ (w * y))
    resid = y - X @ beta
    dof = n - 2
    chi2_red = float((w * resid**2).sum() / dof)
    cov = np.linalg.inv(xtwx) * chi2_red
    t_crit = float(sps.t.ppf(0.5 + confidence / 2, dof))
    return LineFit(n, float(beta[0]), float(beta[1]), ((float(cov[0, 0]), float(cov[0, 1])),
                   (float(cov[1, 0]), float(cov[1, 1]))), dof, chi2_red, t_crit, confidence, weighted)


def kind_summary(contacts: pd.DataFrame, confidence: float = CONFIDENCE) -> pd.DataFrame:
    """One row per contact kind: plain mean + t-CI, weighted and DL means, line fit vs speed.

    Expects columns kind, e, e_sigma, speed_in_mm_s (outlier flags and ke_loss_frac, the
    fraction of translational kinetic energy lost, optional). The line
    slope is reported per m/s (e change per 1000 mm/s) for readability.
    """
    rows = []
    for kind, grp in contacts.groupby("kind", sort=True):
        e = grp["e"].to_numpy(float)
        sig = grp["e_sigma"].to_numpy(float) if "e_sigma" in grp else np.full(len(grp), NAN)
        v = grp["speed_in_mm_s"].to_numpy(float) if "speed_in_mm_s" in grp else np.full(len(grp), NAN)
        m = t_mean_ci(e, confidence)
        wm = weighted_mean(e, sig, confidence)
        fit = wls_line(v, e, sig, confidence)
        rows.append({
            "kind": kind,
            "n": m.n,
            "e_mean": m.mean, "e_sd": m.sd, "e_sem": m.sem, "e_ci_low": m.ci_low, "e_ci_high": m.ci_high,
            "n_weighted": wm.n, "e_weighted": wm.fixed_mean, "e_weighted_se": wm.fixed_se,
            "e_weighted_se_birge": wm.fixed_se_scaled,
            "birge_ratio": wm.birge_ratio, "tau_dl": wm.tau,
            "e_combined": wm.combined_mean, "e_combined_se": wm.combined_se,
            "e_combined_ci_low": wm.combined_ci_low, "e_combined_ci_high": wm.combined_ci_high,
            "fit_n": fit.n if fit else 0,
            "fit_e_at_0": fit.a if fit else NAN, "fit_e_at_0_se": fit.a_se if fit else NAN,
            "fit_slope_per_m_s": fit.b * 1000 if fit else NAN,
            "fit_slope_per_m_s_se": fit.b_se * 1000 if fit else NAN,
            "fit_chi2_red": fit.chi2_red if fit else NAN,
            "speed_min_mm_s": float(np.nanmin(v)) if np.isfinite(v).any() else NAN,
            "speed_max_mm_s": float(np.nanmax(v)) if np.isfinite(v).any() else NAN,
            "ke_loss_frac_mean": float(np.nanmean(grp["ke_loss_frac"].to_numpy(float)))
            if "ke_loss_frac" in grp and np.isfinite(grp["ke_loss_frac"].to_numpy(float)).any() else NAN,
            "n_outliers": int(grp["outlier"].sum()) if "outlier" in grp else 0,
            "confidence": confidence,
        })
    return pd.DataFrame(rows)


def speed_band(speed_mm_s: float, bands: dict[str, tuple[float, float]]) -> str:
    """Name of the shot-speed band holding ``speed_mm_s`` ("" if none).

    >>> speed_band(1000.0, {"slow": (450.0, 890.0), "medium": (890.0, 1900.0)})
    'medium'
    """
    if not np.isfinite(speed_mm_s):
        return ""
    for name, (lo, hi) in bands.items():
        if lo <= speed_mm_s < hi:
            return name
    first = min(bands.values())[0]
    return "below slow" if speed_mm_s < first else "above " + list(bands)[-1]


def as_dict(obj) -> dict:
    """Dataclass result as a plain dict (for tables and JSON)."""
    return asdict(obj)
