"""Series statistics and acceptance spec checked against outside libraries and textbook formulas.

Outside references: scipy.stats (t.interval, sem, median_abs_deviation), statsmodels
(meta-analysis combine_effects with DerSimonian-Laird, WLS with prediction intervals),
scipy.optimize.curve_fit. Textbook: mean +/- t s / sqrt(n).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats as sps

from feltlab.batch import stats
from feltlab.batch.spec import evaluate_spec, load_spec, parse_spec
from feltlab.errors import FeltlabError
from feltlab.standards import SHOT_SPEED_BANDS_MM_S

REPO = Path(__file__).resolve().parents[1]
RNG = np.random.default_rng(20261202)


def test_t_interval_matches_scipy_and_the_textbook_formula() -> None:
    x = RNG.normal(0.94, 0.01, size=17)
    r = stats.t_mean_ci(x, 0.95)
    # scipy.stats: t.interval(confidence, df=n-1, loc=mean, scale=sem)
    lo, hi = sps.t.interval(0.95, df=16, loc=x.mean(), scale=sps.sem(x))
    assert r.ci_low == pytest.approx(lo, abs=1e-12) and r.ci_high == pytest.approx(hi, abs=1e-12)
    # textbook: mean +/- t_{0.975, n-1} s / sqrt(n), s with n-1 in the denominator
    s = math.sqrt(sum((v - x.mean()) ** 2 for v in x) / 16)
    half = sps.t.ppf(0.975, 16) * s / math.sqrt(17)
    assert r.sd == pytest.approx(s, rel=1e-12) and r.ci_high - r.mean == pytest.approx(half, rel=1e-12)
    # 99% is wider; n=1 gives no interval
    assert stats.t_mean_ci(x, 0.99).ci_high > r.ci_high
    one = stats.t_mean_ci([0.9, float("nan")])
    assert one.n == 1 and math.isnan(one.ci_low)


def test_t_interval_covers_the_true_mean_at_its_nominal_rate() -> None:
    """Coverage of the Student-t interval on normal samples (n=5) is 95% (Student 1908)."""
    hits = 0
    reps = 4000
    for _ in range(reps):
        r = stats.t_mean_ci(RNG.normal(0.8, 0.05, size=5))
        hits += r.ci_low <= 0.8 <= r.ci_high
    # binomial SD of the rate at 4000 reps is 0.0034: allow ~4 SD
    assert abs(hits / reps - 0.95) < 0.014


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
def test_weighted_and_dersimonian_laird_match_statsmodels() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    sig = RNG.uniform(0.003, 0.01, size=12)
    for tau in (0.0, 0.012):  # consistent scatter, then extra scatter beyond the sigmas
        e = 0.93 + RNG.normal(0, 1, 12) * np.sqrt(sig**2 + tau**2)
        w = stats.weighted_mean(e, sig, 0.95)
        ref = combine_effects(e, sig**2, method_re="dl", use_t=False)
        fr = ref.summary_frame()
        assert w.fixed_mean == pytest.approx(fr.loc["fixed effect", "eff"], rel=1e-10)
        assert w.fixed_se == pytest.approx(fr.loc["fixed effect", "sd_eff"], rel=1e-10)
        # statsmodels' "fixed effect wls" scales the se by the Birge ratio sqrt(Q/(n-1))
        assert w.fixed_se_scaled == pytest.approx(fr.loc["fixed effect wls", "sd_eff"], rel=1e-8)
        assert w.q == pytest.approx(ref.q, rel=1e-10)
        if ref.tau2 <= 0:
            # DerSimonian & Laird (1986) floor the moment estimate at 0: then the random-effects
            # mean is the fixed-effect one (statsmodels reports the unfloored tau2)
            assert w.tau == 0.0 and w.combined_mean == pytest.approx(w.fixed_mean, rel=1e-12)
            assert w.combined_se == pytest.approx(w.fixed_se, rel=1e-12)
            continue
        assert w.tau**2 == pytest.approx(ref.tau2, rel=1e-8)
        assert w.combined_mean == pytest.approx(fr.loc["random effect", "eff"], rel=1e-10)
        assert w.combined_ci_low == pytest.approx(fr.loc["random effect", "ci_low"], rel=1e-10)
        assert w.combined_ci_high == pytest.approx(fr.loc["random effect", "ci_upp"], rel=1e-10)
    assert ref.tau2 > 0  # the second case did exercise the random-effects branch
    # bad sigmas are left out, not used with infinite weight
    w = stats.weighted_mean([0.9, 0.95, 0.2], [0.01, 0.01, 0.0])
    assert w.n == 2 and w.fixed_mean == pytest.approx(0.925)


def test_wls_line_and_band_match_statsmodels_and_curve_fit() -> None:
    import statsmodels.api as sm

    v = RNG.uniform(500, 3000, 25)
    sig = RNG.uniform(0.003, 0.008, 25)
    e = 0.95 - 8e-6 * v + RNG.normal(0, 1, 25) * sig
    fit = stats.wls_line(v, e, sig, 0.95)
    ref = sm.WLS(e, sm.add_constant(v), weights=1 / sig**2).fit()
    assert (fit.a, fit.b) == pytest.approx(tuple(ref.params), rel=1e-9)
    assert (fit.a_se, fit.b_se) == pytest.approx(tuple(ref.bse), rel=1e-8)
    x0 = np.array([600.0, 1500.0, 2900.0])
    lo, hi = fit.band(x0)
    ci = ref.get_prediction(sm.add_constant(x0)).conf_int(alpha=0.05)  # mean-response interval
    assert lo == pytest.approx(ci[:, 0], rel=1e-8) and hi == pytest.approx(ci[:, 1], rel=1e-8)
    # scipy.optimize.curve_fit with sigma, absolute_sigma=False: same parameters and covariance
    p, pcov = optimize.curve_fit(lambda x, a, b: a + b * x, v, e, sigma=sig, absolute_sigma=False)
    assert (fit.a, fit.b) == pytest.approx(tuple(p), rel=1e-6)
    assert np.asarray(fit.cov) == pytest.approx(pcov, rel=1e-5)
    # too few points or one speed only: no line
    assert stats.wls_line([1.0, 2.0], [0.9, 0.8]) is None
    assert stats.wls_line([1.0, 1.0, 1.0], [0.9, 0.8, 0.85]) is None


def test_robust_z_matches_scipy_mad_and_flags_planted_outliers_without_dropping() -> None:
    x = RNG.normal(0.94, 0.006, 40)
    med = np.median(x)
    mad_normal = sps.median_abs_deviation(x, scale="normal")  # MAD x 1.4826
    assert stats.robust_z(x) == pytest.approx((x - med) / mad_normal, rel=2e-4)

    n = 30
    df = pd.DataFrame({"kind": ["ball-ball"] * n, "e": RNG.normal(0.94, 0.006, n),
                       "e_sigma": RNG.uniform(0.004, 0.006, n), "momentum_residual_pct": RNG.normal(0, 1, n),
                       "speed_in_mm_s": RNG.uniform(800, 2500, n)})
    df.loc[3, "e"] = 0.80  # far below the rest
    df.loc[7, "e_sigma"] = 0.2  # an uncertainty far beyond the rest
    df.loc[11, "momentum_residual_pct"] = 40.0  # momentum not conserved: a bad measurement
    flagged = stats.flag_outliers(df)
    assert len(flagged) == n  # listed, never dropped
    assert set(np.flatnonzero(flagged["outlier"])) == {3, 7, 11}
    assert "e robust z" in flagged.loc[3, "outlier_reason"]
    assert "e_sigma" in flagged.loc[7, "outlier_reason"]
    assert "momentum residual" in flagged.loc[11, "outlier_reason"]
    # a cushion series has its own centre: not flagged just for differing from ball-ball
    cush = df.assign(kind="ball-cushion", e=df["e"] - 0.15).drop(index=[3, 7, 11])
    both = stats.flag_outliers(pd.concat([df, cush], ignore_index=True))
    assert both["outlier"].sum() == 3


def test_slow_imprecise_shots_are_not_outliers_but_a_precise_stray_is() -> None:
    # Same tracking noise behind every contact: the velocity uncertainty is fixed, so
    # e_sigma = dv / speed (first-order error propagation of e = -dv_out/dv_in). A slow shot
    # is imprecise, not wrong; a precise shot far from the series is.
    n = 40
    speed = np.concatenate([RNG.uniform(1500, 2500, n - 4), [150.0, 180.0, 200.0, 1800.0]])
    sig = 6.0 / speed
    e = 0.94 + RNG.normal(0, 1, n) * np.sqrt(0.004**2 + sig**2)
    e[-4:-1] = [0.94 - 2 * sig[-4], 0.94 + 2 * sig[-3], 0.94 - 1.5 * sig[-2]]  # within their own 2 sigma
    e[-1] = 0.94 + 0.05  # a precise contact 0.05 off: about 12 combined sigma
    df = pd.DataFrame({"kind": "ball-ball", "e": e, "e_sigma": sig, "speed_in_mm_s": speed,
                       "momentum_residual_pct": RNG.normal(0, 1, n)})
    flagged = stats.flag_outliers(df)
    assert not flagged["outlier"].iloc[-4:-1].any(), flagged["outlier_reason"].iloc[-4:-1].tolist()
    assert flagged["outlier"].iloc[-1]
    assert "e robust z" in flagged["outlier_reason"].iloc[-1]


def test_kind_summary_uses_each_kind_separately() -> None:
    df = pd.DataFrame({"kind": ["ball-ball"] * 4 + ["ball-cushion"] * 3,
                       "e": [0.93, 0.95, 0.94, 0.96, 0.7, 0.8, 0.75],
                       "e_sigma": [0.01] * 7, "speed_in_mm_s": [800, 1200, 1600, 2000, 900, 1500, 2100]})
    k = stats.kind_summary(df).set_index("kind")
    assert k.loc["ball-ball", "n"] == 4 and k.loc["ball-cushion", "n"] == 3
    lo, hi = sps.t.interval(0.95, 2, loc=0.75, scale=sps.sem([0.7, 0.8, 0.75]))
    assert k.loc["ball-cushion", "e_ci_low"] == pytest.approx(lo) and k.loc["ball-cushion", "e_ci_high"] == \
        pytest.approx(hi)
    res = sps.linregress([800, 1200, 1600, 2000], [0.93, 0.95, 0.94, 0.96])  # equal sigmas: plain OLS
    assert k.loc["ball-ball", "fit_slope_per_m_s"] == pytest.approx(res.slope * 1000)
    assert k.loc["ball-ball", "fit_slope_per_m_s_se"] == pytest.approx(res.stderr * 1000)


def test_speed_bands_follow_the_published_table() -> None:
    # Physics of Pool FAQ, Colorado State University: slow 0.45-0.89, medium 0.89-1.9, fast 1.9-3.2,
    # power 3.2-4.5 m/s (copied into feltlab.standards with that source)
    assert stats.speed_band(500.0, SHOT_SPEED_BANDS_MM_S) == "slow"
    assert stats.speed_band(1000.0, SHOT_SPEED_BANDS_MM_S) == "medium"
    assert stats.speed_band(2500.0, SHOT_SPEED_BANDS_MM_S) == "fast"
    assert stats.speed_band(4000.0, SHOT_SPEED_BANDS_MM_S) == "power"
    assert stats.speed_band(6000.0, SHOT_SPEED_BANDS_MM_S) == "above power"


# ---------------------------------------------------------------------------
# acceptance spec
# ---------------------------------------------------------------------------

def test_example_spec_loads_and_carries_the_safety_caution() -> None:
    path = REPO / "clips" / "example_spec.toml"
    spec = load_spec(path)
    assert [b.kind for b in spec.bands] == ["ball-ball", "ball-ball", "ball-cushion"]
    assert spec.statistic == "mean" and spec.confidence == 0.95
    assert "can hurt people" in path.read_text() and "local safety rules" in path.read_text()


def _contacts(e, speeds, kind="ball-ball", sigma=0.005):
    return pd.DataFrame({"kind": kind, "e": e, "e_sigma": sigma, "speed_in_mm_s": speeds})


def test_band_passes_only_when_the_whole_ci_lies_inside() -> None:
    spec = parse_spec({"band": [{"name": "bb", "kind": "ball-ball", "e_min": 0.92, "e_max": 0.98,
                                 "speed_min_mm_s": 890, "speed_max_mm_s": 1900, "min_contacts": 5}]})
    e = np.array([0.94, 0.95, 0.945, 0.955, 0.935, 0.95])
    inside = _contacts(e, np.linspace(900, 1800, 6))
    r = evaluate_spec(spec, inside).bands[0]
    lo, hi = sps.t.interval(0.95, 5, loc=e.mean(), scale=sps.sem(e))
    assert (r.ci_low, r.ci_high) == pytest.approx((lo, hi)) and r.verdict == "PASS"
    # mean inside the band but the interval reaches past e_max: FAIL
    wide = _contacts(np.array([0.93, 0.99, 0.94, 0.985, 0.96]), np.linspace(900, 1800, 5))
    r = evaluate_spec(spec, wide).bands[0]
    assert 0.92 < r.estimate < 0.98 and r.ci_high > 0.98 and r.verdict == "FAIL"
    # contacts outside the speed window do not count: too few -> NO DATA, not passed
    fast = _contacts(e, np.linspace(2000, 3000, 6))
    res = evaluate_spec(spec, pd.concat([fast, inside.iloc[:3]]))
    assert res.bands[0].verdict == "NO DATA" and res.bands[0].n == 3 and not res.passed
    assert res.verdict == "FAIL"


def test_combined_statistic_uses_the_dl_interval() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    spec = parse_spec({"statistic": "combined", "band": [{"kind": "ball-cushion", "e_min": 0.6, "e_max": 0.9}]})
    e = np.array([0.74, 0.76, 0.75, 0.78, 0.73])
    s = np.array([0.01, 0.02, 0.015, 0.01, 0.012])
    r = evaluate_spec(spec, _contacts(e, [1000] * 5, "ball-cushion", s)).bands[0]
    fr = combine_effects(e, s**2, method_re="dl", use_t=False).summary_frame()
    assert r.ci_low == pytest.approx(fr.loc["random effect", "ci_low"])
    assert r.verdict == "PASS"


@pytest.mark.parametrize("data, match", [
    ({"band": []}, "no \\[\\[band\\]\\]"),
    ({"band": [{"kind": "ball-rail", "e_min": 0.9, "e_max": 0.95}]}, "kind must be"),
    ({"band": [{"kind": "ball-ball", "e_min": 0.95, "e_max": 0.9}]}, "e_min < e_max"),
    ({"band": [{"kind": "ball-ball", "e_min": 0.9}]}, "needs e_max"),
    ({"band": [{"kind": "ball-ball", "e_min": 0.9, "e_max": 0.95, "emax": 1}]}, "unknown key"),
    ({"treshold": 1, "band": [{"kind": "ball-ball", "e_min": 0.9, "e_max": 0.95}]}, "unknown key"),
    ({"statistic": "median", "band": [{"kind": "ball-ball", "e_min": 0.9, "e_max": 0.95}]}, "statistic"),
    ({"band": [{"kind": "ball-ball", "e_min": 0.9, "e_max": 0.95, "cushion": ["x0"]}]}, "only applies"),
])
def test_bad_specs_are_one_line_errors(data, match) -> None:
    with pytest.raises(FeltlabError, match=match) as exc:
        parse_spec(data)
    assert "\n" not in str(exc.value)


def test_unreadable_spec_files(tmp_path: Path) -> None:
    with pytest.raises(FeltlabError, match="not found"):
        load_spec(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[[band]\nkind = ")
    with pytest.raises(FeltlabError, match="not valid TOML"):
        load_spec(bad)


def test_mean_energy_loss_per_kind_matches_the_closed_form() -> None:
    """Equal masses, head-on, target at rest: the fraction of kinetic energy lost is (1 - e^2) / 2
    (from KE loss = (1 - e^2) (m1 m2 / (m1 + m2)) v^2 / 2 over KE = m v^2 / 2; REFERENCES.md)."""
    e = np.array([0.92, 0.94, 0.96])
    df = pd.DataFrame({"kind": "ball-ball", "e": e, "e_sigma": 0.01, "speed_in_mm_s": [900.0, 1400.0, 2000.0],
                       "ke_loss_frac": (1 - e**2) / 2})
    k = stats.kind_summary(df).set_index("kind")
    assert k.loc["ball-ball", "ke_loss_frac_mean"] == pytest.approx(np.mean((1 - e**2) / 2))
    assert math.isnan(stats.kind_summary(df.drop(columns="ke_loss_frac"))["ke_loss_frac_mean"].iloc[0])


def test_e_plot_counts_only_contacts_with_a_measured_e(tmp_path: Path, monkeypatch) -> None:
    """Touches of a compound event carry no e (NaN): they are not points of the e-vs-speed plot,
    its legend counts only the drawn contacts, and the fitted line spans their speeds only."""
    from feltlab.batch import series_report as sr

    rng = np.random.default_rng(5)
    v = np.array([900.0, 1200.0, 1500.0, 1800.0, 2700.0, 2900.0])
    e = np.array([0.95, 0.94, 0.95, 0.94, np.nan, np.nan])
    c = pd.DataFrame({"clip": "a.mp4", "clip_sha256": "0" * 64, "kind": "ball-ball", "speed_in_mm_s": v,
                      "e": e + np.where(np.isfinite(e), rng.normal(0, 0.002, 6), 0.0),
                      "e_sigma": np.where(np.isfinite(e), 0.004, np.nan)})
    shots = pd.DataFrame({"clip": ["a.mp4"], "clip_sha256": ["0" * 64], "shot_speed_mm_s": [2000.0]})
    res = sr.compute_series(sr.SeriesData(c, shots))
    plt = sr._plt()
    kept = []
    monkeypatch.setattr(plt, "close", lambda fig=None: kept.append(fig))
    sr.plot_e_vs_speed(res, tmp_path / "e.png")
    ax = kept[-1].axes[0]
    labels = ax.get_legend_handles_labels()[1]
    assert "contacts (n=4)" in labels
    line = next(l for l in ax.get_lines() if l.get_label().startswith("WLS line"))
    assert max(line.get_xdata()) == pytest.approx(1.8)
    plt.close(kept[-1])
