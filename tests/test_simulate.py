"""Departures from the textbook assumptions in the processes of known truth
(paneldiag.simulate.apply_departure).

Sources: simulations with known truth (large samples from paneldiag.simulate against
the analytic population covariance and means, and against the parameters that define
each departure); scipy.stats (reference library: skew, kurtosis) for the sample shape
statistics; the cumulants of the centred chi-square and Student t distributions (third
cumulant of chi-square(k): 8k, so skewness sqrt(8 / k); excess kurtosis of t(nu): 6 /
(nu - 4); Johnson, Kotz and Balakrishnan 1994, Continuous Univariate Distributions,
vol. 1 ch. 18 and vol. 2 ch. 28) for the population skewness and kurtosis of a wave.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from paneldiag import simulate as sim
from paneldiag.simulate import (DEPARTURE_FAMILIES, FAMILIES, family_process, family_values,
                                population_covariance, population_mean)

TIMES = np.arange(6.0)
N = 200_000
SEED = 20240613
MOMENT_CASES = [(dep, fam) for dep in ("wave_error", "rising_variance", "unit_curvature",
                                       "skewed", "heavy_tails")
                for fam in DEPARTURE_FAMILIES[dep]]


def _large_sample(family, departure, reliability=0.6, n=N, seed=SEED):
    process = family_process(family, TIMES, reliability, departure)
    return process, sim.simulate(process, n, TIMES, np.random.default_rng(seed))


@pytest.mark.parametrize("departure, family", MOMENT_CASES)
def test_departure_moments_match_population_covariance(departure, family):
    """Simulation with known truth (200,000 units, six waves, reliability 0.6): every
    sample covariance and mean is within 5 standard errors of population_covariance and
    population_mean. The standard error of a covariance is taken from the sample itself
    (the SD of the centred cross-products over sqrt(n)), so it is right for skewed and
    heavy-tailed scores too."""
    process, y = _large_sample(family, departure)
    sigma = population_covariance(process, TIMES)
    centred = y - y.mean(axis=0)
    products = centred[:, :, None] * centred[:, None, :]
    se = products.std(axis=0) / np.sqrt(N)
    assert np.all(np.abs(np.cov(y.T) - sigma) < 5 * se), (departure, family)
    mean_se = y.std(axis=0) / np.sqrt(N)
    assert np.all(np.abs(y.mean(axis=0) - population_mean(process, TIMES)) < 5 * mean_se)


def test_shape_departures_keep_the_textbook_covariance():
    """skewed and heavy_tails rescale their draws to the parts' variances, so the
    population covariance is the textbook process's (definition of the departures)."""
    for family in FAMILIES:
        plain = population_covariance(family_process(family, TIMES, 0.6), TIMES)
        for departure in ("skewed", "heavy_tails", "ordinal5"):
            other = population_covariance(family_process(family, TIMES, 0.6, departure), TIMES)
            np.testing.assert_array_equal(other, plain)


@pytest.mark.parametrize("family", FAMILIES)
def test_wave_error_sd_ratio(family):
    """Simulation with known truth: the measurement error is the difference between the
    scores with and without it from one seed (the error is drawn last), and its SD at the
    last wave is 3 times the first's (WAVE_ERROR_SD_RATIO), rising geometrically; with an
    error-free measure the first wave's reliability is 0.9."""
    process, y = _large_sample(family, "wave_error", reliability=1.0)
    true = sim.simulate(replace(process, reliability=1.0), N, TIMES,
                        np.random.default_rng(SEED))
    error_sd = (y - true).std(axis=0)
    assert error_sd[-1] / error_sd[0] == pytest.approx(3.0, rel=0.02)
    assert np.diff(np.log(error_sd)) == pytest.approx(np.full(5, np.log(3.0) / 5), abs=0.02)
    reliability = true[:, 0].var() / y[:, 0].var()
    assert reliability == pytest.approx(0.9, abs=0.005)


@pytest.mark.parametrize("family", DEPARTURE_FAMILIES["rising_variance"])
def test_rising_variance_is_carry_over_whose_variance_rises(family):
    """Simulation with known truth (error-free): the true-score variance at the last wave
    is 3.5 times the first's (VARIANCE_RISE), the wave means stay flat (no growth), and the
    covariance keeps the simplex form of carry-over: cov(y_s, y_u) = cov(y_s, y_t) *
    cov(y_t, y_u) / var(y_t) for s < t < u of the carry-over part (Joreskog 1970, British
    Journal of Mathematical and Statistical Psychology 23, 121-145: the simplex)."""
    process, y = _large_sample(family, "rising_variance", reliability=1.0)
    var = y.var(axis=0)
    assert var[-1] / var[0] == pytest.approx(3.5, rel=0.03)
    assert np.all(np.diff(var) > 0)
    assert np.all(np.abs(y.mean(axis=0)) < 5 * np.sqrt(var / N))
    ar = np.cov(y.T) - process.trait_var
    for s, t, u in ((0, 2, 5), (1, 3, 4), (0, 1, 5)):
        assert ar[s, u] == pytest.approx(ar[s, t] * ar[t, u] / ar[t, t], abs=0.02)


def test_unit_curvature_is_unit_specific():
    """Simulation with known truth (quadratic growth, error-free): each unit's least-
    squares curvature over the six waves varies across units by the curvature variance
    (CURVE_SD_OVER_SPAN over the span) plus the occasion noise's share (noise variance
    times the curvature element of (X'X)^-1), around the mean curvature."""
    process, y = _large_sample("quadratic_growth", "unit_curvature", reliability=1.0)
    design = np.column_stack([np.ones(6), TIMES, TIMES ** 2])
    xtx_inv = np.linalg.inv(design.T @ design)
    coef = y @ design @ xtx_inv           # one row of (intercept, slope, curvature) a unit
    span = TIMES[-1] - TIMES[0]
    assert process.curve_var == pytest.approx((sim.CURVE_SD_OVER_SPAN / span ** 2) ** 2)
    expected = process.curve_var + process.occasion_var * xtx_inv[2, 2]
    assert coef[:, 2].var() == pytest.approx(expected, rel=0.02)
    assert coef[:, 2].mean() == pytest.approx(sim.CURVE_OVER_SPAN / span ** 2, abs=0.002)


def _wave_one_parts(process, error_var):
    """Variances of the first wave's parts, by kind of draws (slope, curvature and the
    free shape are 0 at the first wave)."""
    parts = [(process.trait_draws, process.trait_var), (process.shock_draws, process.ar_var),
             (process.shock_draws, process.occasion_var), (process.error_draws, error_var)]
    return [(d, v) for d, v in parts if v > 0]


@pytest.mark.parametrize("family", FAMILIES)
def test_skewed_scores(family):
    """Simulation with known truth (reliability 0.6): every wave is right-skewed
    (scipy.stats.skew > 0), and the first wave's skewness is the population value, the
    skewed part's third cumulant sqrt(8 / 2) v^1.5 over the wave's variance^1.5."""
    process, y = _large_sample(family, "skewed")
    skew = stats.skew(y, axis=0)
    assert np.all(skew > 0.05), skew
    total = population_covariance(process, TIMES)[0, 0]
    error_var = total * (1 - process.reliability)
    third = sum(np.sqrt(8.0 / d.df) * v ** 1.5
                for d, v in _wave_one_parts(process, error_var) if d.kind == "chisquare")
    expected = third / total ** 1.5
    assert expected > 0.3
    assert skew[0] == pytest.approx(expected, rel=0.1)


@pytest.mark.parametrize("family", FAMILIES)
def test_heavy_tailed_scores(family):
    """Simulation with known truth (reliability 0.6): the first wave's kurtosis
    (scipy.stats.kurtosis, Pearson's, 3 for normal scores) is well above 3: its excess is
    at least half the population excess, 6 / (5 - 4) times the sum of the t parts' squared
    variances over the wave's squared variance, which is itself above 1; the textbook
    process's first wave has excess kurtosis near 0."""
    process, y = _large_sample(family, "heavy_tails")
    total = population_covariance(process, TIMES)[0, 0]
    error_var = total * (1 - process.reliability)
    expected = sum(6.0 / (d.df - 4.0) * v ** 2
                   for d, v in _wave_one_parts(process, error_var) if d.kind == "t") / total ** 2
    assert expected > 1.0
    assert stats.kurtosis(y[:, 0], fisher=False) > 3.0 + 0.5 * expected
    _, plain = _large_sample(family, "none")
    assert abs(stats.kurtosis(plain[:, 0])) < 0.05


@pytest.mark.parametrize("family", FAMILIES)
def test_ordinal5_codes(family):
    """Simulation with known truth: the scores are the codes 1..5, all five used at every
    wave; at the first wave the category shares are the differences of the cut points'
    population quantiles (ORDINAL_CUMULATIVE) within 5 binomial standard errors; NaN
    marks dropout as before."""
    n = 50_000
    y = family_values(family, n, 6, 1.0, "mcar", np.random.default_rng(SEED), "ordinal5")
    seen = y[~np.isnan(y)]
    assert set(np.unique(seen)) == {1.0, 2.0, 3.0, 4.0, 5.0}
    for t in range(6):
        assert len(np.unique(y[~np.isnan(y[:, t]), t])) == 5
    assert np.isnan(y[:, -1]).mean() > 0.2          # MCAR dropout, 8 % a wave
    share = np.array([(y[:, 0] == k).mean() for k in range(1, 6)])
    truth = np.diff(np.concatenate([[0.0], sim.ORDINAL_CUMULATIVE, [1.0]]))
    assert np.all(np.abs(share - truth) < 5 * np.sqrt(truth * (1 - truth) / n)), share


def test_ordinal5_codes_are_ordinal_to_the_screen():
    """The screen's own auto rule (paneldiag.diagnostics.dependence.decide_scale, common
    practice: at most 7 distinct integer values) calls the codes ordinal."""
    from paneldiag.diagnostics.dependence import decide_scale
    from paneldiag.summaries import Chunk
    from paneldiag.summaries.contingency import PairwiseTables
    y = family_values("linear_growth", 1000, 6, 1.0, "mcar", np.random.default_rng(3),
                      "ordinal5")
    chunk = Chunk(values=y, weights=None, replicate=np.arange(1000) % 20, times=TIMES,
                  n_replicates=20)
    kind, basis = decide_scale(PairwiseTables.from_chunk(chunk))
    assert kind == "ordinal", basis


def test_ordinal5_keeps_the_mean_change_of_growth():
    """Fixed cut points (a fixed rating scale): the mean code of a growth family rises
    over the waves, that of a flat family does not (simulation with known truth)."""
    rise = family_values("linear_growth", 20_000, 6, 1.0, "none",
                         np.random.default_rng(4), "ordinal5").mean(axis=0)
    flat = family_values("autoregressive", 20_000, 6, 1.0, "none",
                         np.random.default_rng(4), "ordinal5").mean(axis=0)
    assert rise[-1] - rise[0] > 0.5
    assert abs(flat[-1] - flat[0]) < 0.05


def test_departures_apply_only_where_defined():
    """rising_variance belongs to the carry-over families, unit_curvature to quadratic
    growth; 'none' is the textbook process."""
    with pytest.raises(ValueError, match="does not apply"):
        family_process("linear_growth", TIMES, 1.0, "rising_variance")
    with pytest.raises(ValueError, match="does not apply"):
        family_process("linear_growth", TIMES, 1.0, "unit_curvature")
    with pytest.raises(ValueError, match="unknown departure"):
        family_process("linear_growth", TIMES, 1.0, "bimodal")
    for family in FAMILIES:
        assert family_process(family, TIMES, 0.6, "none") == family_process(family, TIMES, 0.6)


def test_departure_values_are_seeded():
    """Same seed, same panel (determinism)."""
    for departure in sim.DEPARTURES:
        family = DEPARTURE_FAMILIES[departure][0]
        one = family_values(family, 300, 6, 1.0, "mcar", np.random.default_rng(9), departure)
        two = family_values(family, 300, 6, 1.0, "mcar", np.random.default_rng(9), departure)
        np.testing.assert_array_equal(one, two)


def _derived_moments(family: str, reliability: float) -> tuple[np.ndarray, np.ndarray]:
    """The covariance and means of six waves at times 0..5, derived by hand from the
    processes as docs/rules.md states them (u = t / 5 runs over the span; parts are
    independent, so their covariances add; J is the matrix of ones, |s - t| the lag)."""
    t = np.arange(6.0)
    u = t / 5
    lag = np.abs(t[:, None] - t[None, :])
    ones, eye = np.ones((6, 6)), np.eye(6)
    logistic = 1 / (1 + np.exp(-12 * (u - 0.5)))
    s_curve = (logistic - logistic[0]) / (logistic[-1] - logistic[0])
    growth = ones + 0.8 ** 2 * np.outer(u, u)          # random intercept 1, slope SD 0.8
    true, mean = {
        "occasion_noise": (eye, 0 * u),
        "stable_trait": (0.5 * ones + 0.5 * eye, 0 * u),
        "autoregressive": (0.7 ** lag, 0 * u),
        "trait_autoregressive": (0.5 * ones + 0.5 * 0.5 ** lag, 0 * u),
        "linear_growth": (growth + 0.5 * eye, 1.0 * u),
        "quadratic_growth": (growth + 0.5 * eye, 2.5 * u - 1.5 * u ** 2),
        "free_shape_growth": (ones + 0.5 ** 2 * np.outer(1.5 * s_curve, 1.5 * s_curve)
                              + 0.5 * eye, 1.5 * s_curve),
        "growth_autoregressive": (growth + 0.5 * 0.6 ** lag, 1.0 * u),
    }[family]
    # measurement error: (1 - reliability) / reliability of the first wave's true variance
    error = (1 - reliability) / reliability * true[0, 0]
    return true + error * eye, mean


@pytest.mark.parametrize("family", FAMILIES)
def test_simulated_moments_match_the_derivation(family):
    """Simulation with known truth against the covariance and means derived by hand in
    _derived_moments (not from population_covariance): 200,000 units at reliability
    0.6; every sample covariance within 5 standard errors (Var s_st = (S_ss S_tt +
    S_st^2) / n for normal scores) and every mean within 5 standard errors; and
    population_covariance / population_mean equal the derivation (1e-12: rounding)."""
    sigma, mean = _derived_moments(family, 0.6)
    process = family_process(family, TIMES, 0.6)
    y = sim.simulate(process, N, TIMES, np.random.default_rng(SEED))
    se = np.sqrt((np.outer(np.diag(sigma), np.diag(sigma)) + sigma ** 2) / N)
    assert np.all(np.abs(np.cov(y.T) - sigma) < 5 * se), family
    assert np.all(np.abs(y.mean(axis=0) - mean) < 5 * np.sqrt(np.diag(sigma) / N)), family
    np.testing.assert_allclose(population_covariance(process, TIMES), sigma, atol=1e-12)
    np.testing.assert_allclose(population_mean(process, TIMES), mean, atol=1e-12)
