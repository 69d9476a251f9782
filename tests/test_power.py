"""Power of the verdicts' part tests (paneldiag.power; docs/validation.md, "The
information limit").

Sources: simulations from the processes of known truth in paneldiag.simulate (the
population covariance against large samples; the likelihood-ratio statistic of simulated
complete panels against its predicted distribution, Satorra and Saris 1985,
Psychometrika 50, 83-90); the rules' own fits (paneldiag.rules.verdicts) for the
statistic the rules compute; scipy.stats (reference library) for the chi-square tails.
The Monte Carlo check of the power runs on 400 panels in the ordinary suite (about 12
seconds on an idle machine) and on 1,000 with --full-grid (marked slow, about 30 seconds).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from paneldiag import power
from paneldiag.rules import verdicts
from paneldiag.rules.thresholds import default_thresholds
from paneldiag.simulate import (FAMILIES, family_process, family_values,
                                population_covariance, population_mean, simulate)

ALPHA = default_thresholds()["alpha"]


@pytest.mark.parametrize("family", FAMILIES)
def test_population_covariance_matches_large_samples(family):
    """Simulation from the process (200,000 units, six waves, reliability 0.6): the
    sample covariance and means agree with the analytic ones within 5 standard errors
    of a covariance (Var s_st = (S_ss S_tt + S_st^2) / n for normal scores)."""
    times = np.arange(6.0)
    process = family_process(family, times, 0.6)
    n = 200_000
    y = simulate(process, n, times, np.random.default_rng(20240612))
    sigma = population_covariance(process, times)
    se = np.sqrt((np.outer(np.diag(sigma), np.diag(sigma)) + sigma ** 2) / n)
    assert np.all(np.abs(np.cov(y.T) - sigma) < 5 * se), family
    mean_se = np.sqrt(np.diag(sigma) / n)
    assert np.all(np.abs(y.mean(axis=0) - population_mean(process, times)) < 5 * mean_se)


@pytest.mark.parametrize("test, family", [("trait", "autoregressive"),
                                          ("carry", "stable_trait"),
                                          ("growth", "trait_autoregressive"),
                                          ("growth_carry", "linear_growth")])
def test_noncentrality_vanishes_when_the_simpler_family_is_true(test, family):
    """The simpler structure reproduces the population covariance of its own family
    exactly (simulation process with known truth), so the noncentrality is ~0 and the
    power equals the level; the same test on the richer family's process is far from 0."""
    res = power.part_test_power(test, family, 1000, 6, 0.6)
    assert res.noncentrality < 1e-3, res
    assert res.power == pytest.approx(ALPHA, rel=0.01 if res.boundary else 0.05)
    richer = {"trait": "trait_autoregressive", "carry": "trait_autoregressive",
              "growth": "growth_autoregressive", "growth_carry": "growth_autoregressive"}
    assert power.part_test_power(test, richer[test], 1000, 6, 0.6).noncentrality > 5.0


def test_level_and_power_are_inverse():
    """alpha_for_power inverts lr_power (both one df on the boundary and two df in the
    interior); with one df off the boundary lr_power is scipy.stats.ncx2's tail
    (reference library), and on the boundary at lambda = 0 the size is alpha (Self and
    Liang 1987, JASA 82, 605-610: the 50:50 mixture of chi-square(0) and chi-square(1))."""
    for df, boundary in ((1, True), (2, False)):
        for lam in (3.0, 7.4, 17.8):
            level = power.alpha_for_power(lam, df, boundary, 0.8)
            got = power.lr_power(lam, df, level, boundary)[0]
            assert got == pytest.approx(0.8, abs=1e-6)
    crit = stats.chi2.isf(0.01, 1)
    assert power.lr_power(7.4, 1, 0.01)[0] == pytest.approx(stats.ncx2.sf(crit, 1, 7.4))
    assert power.lr_power(0.0, 1, 0.01, boundary=True)[0] == pytest.approx(0.01)


def test_screen_power_matches_the_population_tests():
    """On one simulated complete panel (trait + carry-over, N 1000, T 6, reliability
    0.6), the noncentrality the screen reports for each part test at its estimated
    parameters (verdicts.PartPower, full-information patterns at population moments)
    equals the rules' statistic computed on the richer fit's implied covariance by the
    complete-data path (power.population_tests): two code paths, one quantity."""
    n, t = 1000, 6
    y = family_values("trait_autoregressive", n, t, 0.6, "none", np.random.default_rng(7))
    times = np.arange(t, dtype=float)
    s = np.cov(y.T, bias=True)
    inp = verdicts.Inputs(mu=y.mean(axis=0), sigma=s, pair_n=np.full((t, t), float(n)),
                          times=times, n_units=n, retention=1.0, dropout_smd=np.nan,
                          categories=1000)
    judgement = verdicts.judge(inp)
    rows = {row.test: row for row in judgement.power}
    sample = power.population_tests(s, y.mean(axis=0), times, n)
    for key in ("trait", "carry"):
        rich = sample[key][4]
        at_rich = power.population_tests(rich.sigma, y.mean(axis=0), times, n)
        assert rows[key].noncentrality == pytest.approx(at_rich[key][0], rel=1e-3, abs=1e-3)


def _monte_carlo(panels: int):
    """Trait test on complete simulated panels of trait + carry-over at N 1000, T 6,
    reliability 0.6: the rejection count at the thresholds' alpha and the root of the
    likelihood-ratio statistic of each panel, as the rules compute them."""
    n, t = 1000, 6
    times = np.arange(t, dtype=float)
    seeds = np.random.SeedSequence(20240613).spawn(panels)
    rejected, roots = 0, []
    for seed in seeds:  # a loop over panels
        y = family_values("trait_autoregressive", n, t, 0.6, "none",
                          np.random.default_rng(seed))
        s = np.cov(y.T, bias=True)  # the ML covariance, as the rules' moments
        stat, _, p, _, _ = power.population_tests(s, y.mean(axis=0), times, n,
                                                  tests=("trait",))["trait"]
        rejected += p < ALPHA
        roots.append(np.sqrt(stat))
    return rejected, np.array(roots)


def _check_monte_carlo(panels: int):
    """Simulation from a process with known truth against the predicted power
    (Satorra and Saris 1985): the predicted power lies in the exact (Clopper-Pearson)
    99.9% binomial interval of the simulated rejection rate (scipy.stats.binomtest), and
    the power a test ignoring the boundary would predict (chi-square(1) critical value
    instead of the 50:50 mixture's; Self and Liang 1987) lies outside it, so the check
    tells the two apart; the mean root of the statistic lies within 3 standard errors of
    E max(0, Z), Z ~ N(sqrt(lambda), 1) (the boundary statistic's root)."""
    pred = power.part_test_power("trait", "trait_autoregressive", 1000, 6, 0.6)
    assert pred.boundary and 0.4 < pred.power < 0.8  # a cell where the power is moderate
    rejected, roots = _monte_carlo(panels)
    interval = stats.binomtest(rejected, panels).proportion_ci(0.999)
    assert interval.low <= pred.power <= interval.high, (rejected, panels, pred.power)
    ignoring_boundary = stats.ncx2.sf(stats.chi2.isf(pred.alpha, 1), 1, pred.noncentrality)
    assert not interval.low <= ignoring_boundary <= interval.high, (interval, ignoring_boundary)
    mu = np.sqrt(pred.noncentrality)
    expected_root = mu * stats.norm.cdf(mu) + stats.norm.pdf(mu)
    assert abs(roots.mean() - expected_root) <= 3 * roots.std(ddof=1) / np.sqrt(panels), \
        (roots.mean(), expected_root)


def test_power_agrees_with_simulated_panels():
    # 400 panels: the 99.9% interval is about +-0.08 wide, enough to exclude the power
    # that ignores the boundary (0.56 against 0.66)
    _check_monte_carlo(400)


@pytest.mark.slow
def test_power_agrees_with_simulated_panels_full():
    _check_monte_carlo(1000)


def _direct_ml_trait_statistic(y: np.ndarray) -> float:
    """The likelihood-ratio statistic of the trait test written out: the normal ML
    discrepancy log|Sigma| + tr(Sigma^-1 S) (S the ML covariance; the means are
    saturated in both structures, so they drop out) of Sigma = trait 11' + carry
    rho^|s - t| + error I, minimised by scipy.optimize.minimize (L-BFGS-B, three
    starts) with and without the trait; the statistic is n times the difference."""
    n, t = y.shape
    s = np.cov(y.T, bias=True)
    lag = np.abs(np.subtract.outer(np.arange(t), np.arange(t)))

    def discrepancy(theta):
        trait, carry, rho, error = theta
        sigma = trait + carry * rho ** lag + error * np.eye(t)
        sign, logdet = np.linalg.slogdet(sigma)
        return logdet + np.trace(np.linalg.solve(sigma, s)) if sign > 0 else np.inf

    def minimum(with_trait):
        bounds = [(0, None) if with_trait else (0, 0), (1e-8, None), (0, 0.9999), (1e-8, None)]
        v = np.diag(s).mean()
        starts = [(0.3, 0.4, 0.3), (0.1, 0.6, 0.7), (0.5, 0.2, 0.5)]
        return min(optimize.minimize(discrepancy, [a * v * with_trait, b * v, r, 0.3 * v],
                                     method="L-BFGS-B", bounds=bounds,
                                     options={"ftol": 1e-15, "gtol": 1e-12, "maxiter": 5000}).fun
                   for a, b, r in starts)

    return n * (minimum(False) - minimum(True))


def test_power_study_statistic_matches_a_direct_ml_fit():
    """The trait test's statistic of the power study (power.population_tests, as the
    Monte Carlo above uses it) on three simulated panels equals the statistic of a
    direct ML fit with scipy (_direct_ml_trait_statistic; reference library). The
    tolerance, 1e-5 relative, is the two optimisers' convergence."""
    n, t = 1000, 6
    for seed in np.random.SeedSequence(20240613).spawn(3):  # a loop over panels
        y = family_values("trait_autoregressive", n, t, 0.6, "none",
                          np.random.default_rng(seed))
        stat, df, _, simple, rich = power.population_tests(
            np.cov(y.T, bias=True), y.mean(axis=0), np.arange(t, dtype=float), n)["trait"]
        # the rich specification the rules chose is the one written out above
        assert [type(p).__name__ for p in rich.structure.parts] == ["Trait", "Carry", "Error"]
        assert rich.structure.parts[-1].kind == "equal" and df == 1
        assert stat == pytest.approx(_direct_ml_trait_statistic(y), rel=1e-5)


def test_unit_counts_for_power_are_rounded_up_to_three_figures():
    # a planned sample size is never rounded down (common practice): the count shown
    # reaches the power; three figures because the later ones follow the fits' rounding
    from paneldiag.rules.verdicts import units_needed
    assert [units_needed(x) for x in (1, 12.2, 999.5, 1001, 661_331, 2_193_540.2)] == \
        [1, 13, 1000, 1010, 662_000, 2_200_000]
