"""Power of the verdicts' part tests for a known process: how much information a panel
carries about a part.

The verdicts add a part (a stable trait, carry-over, unit-specific growth, carry-over in
the deviations from growth) to a family only when a likelihood-ratio test against the
simpler structure nested in the richer family's chosen specification rejects at
``alpha`` (``paneldiag.rules.verdicts``). How often it can reject for a given true process
follows from the population alone: run the rules' fits on the population moments; the
statistic they compute there, N (F_simple - F_rich), is the noncentrality lambda, and
the statistic is asymptotically noncentral chi-square(df, lambda) (Satorra and Saris
1985). The screen reports the same figure for the panel at hand, at its estimated
parameters and response patterns (``verdicts.PartPower``).

A second figure bounds every test, not only the one the rules use: any test of the
simpler family at level alpha has level alpha at the simpler structure closest to
Sigma_0, so its power at Sigma_0 is at most that of the Neyman-Pearson test of these two
normal distributions (Neyman and Pearson 1933), by the normal approximation to the sum
of the per-unit log likelihood ratios.

These are asymptotic figures for complete normal data; dropout lowers the power
further. Recall of a family cannot exceed the power of the test that adds its part.

References
----------
Satorra, A. and Saris, W. E. (1985). Power of the likelihood ratio test in covariance
structure analysis. Psychometrika, 50, 83-90.
Self, S. G. and Liang, K.-Y. (1987). Asymptotic properties of maximum likelihood
estimators and likelihood ratio tests under nonstandard conditions. Journal of the
American Statistical Association, 82, 605-610.
Neyman, J. and Pearson, E. S. (1933). On the problem of the most efficient tests of
statistical hypotheses. Philosophical Transactions of the Royal Society A, 231, 289-337.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from paneldiag.results import Result
from paneldiag.rules import structures as st
from paneldiag.rules import verdicts
from paneldiag.rules.thresholds import default_thresholds
from paneldiag.rules.verdicts import lr_power
from paneldiag.simulate import family_process, population_covariance, population_mean

__all__ = ["TestPower", "part_test_power", "population_tests", "lr_power",
           "alpha_for_power", "neyman_pearson_bound"]


@dataclass(frozen=True)
class TestPower(Result):
    """The asymptotic power of one part test for one true process."""

    __test__ = False  # not a pytest test class

    test: str
    family: str
    simple: str
    rich: str
    n_units: float
    n_waves: int
    reliability: float
    alpha: float
    df: int
    boundary: bool
    noncentrality: float     # N (F_simple - F_rich) at the population moments
    critical_value: float
    power: float             # of the rules' likelihood-ratio test at alpha
    bound: float             # of the most powerful test against the closest simpler fit
    alpha_for_95: float      # level at which the rules' test would reach power 0.95


def alpha_for_power(noncentrality: float, df: int, boundary: bool = False,
                    power: float = 0.95) -> float:
    """The level at which the likelihood-ratio test of ``lr_power`` would reach
    ``power`` (the inverse of ``lr_power`` in alpha)."""
    lam = max(float(noncentrality), 0.0)
    if boundary and df == 1:
        return float(stats.norm.sf(np.sqrt(lam) - stats.norm.isf(1.0 - power)))
    if boundary:
        from scipy.optimize import brentq
        if lr_power(lam, df, 0.5, True)[0] < power:   # not even at level 0.5
            return float("nan")
        if lr_power(lam, df, 1e-15, True)[0] >= power:  # at any level worth stating
            return 1e-15
        return float(brentq(lambda a: lr_power(lam, df, a, True)[0] - power, 1e-15, 0.5))
    critical = float(stats.ncx2.isf(power, df, max(lam, 1e-12)))
    return float(stats.chi2.sf(critical, df))


def neyman_pearson_bound(sigma_true: np.ndarray, sigma_null: np.ndarray, n: float,
                         alpha: float) -> float:
    """Power at ``sigma_true`` of the most powerful level-``alpha`` test of the normal
    distribution with covariance ``sigma_null`` against the one with ``sigma_true``
    (Neyman and Pearson 1933), from n independent units, by the normal approximation to
    the summed log likelihood ratio."""
    inv1, inv0 = np.linalg.inv(sigma_true), np.linalg.inv(sigma_null)
    a = inv1 - inv0
    const = 0.5 * (np.linalg.slogdet(sigma_null)[1] - np.linalg.slogdet(sigma_true)[1])

    def moments(sigma):
        as_ = a @ sigma
        return n * (const - 0.5 * np.trace(as_)), np.sqrt(n * 0.5 * np.trace(as_ @ as_))

    mean0, sd0 = moments(sigma_null)
    mean1, sd1 = moments(sigma_true)
    if not (sd0 > 0 and sd1 > 0):
        return alpha
    critical = mean0 + stats.norm.isf(alpha) * sd0
    return float(stats.norm.sf((critical - mean1) / sd1))


def monotone_patterns(n_waves: int, hazard: float) -> tuple[np.ndarray, np.ndarray]:
    """Response patterns of monotone dropout with a constant hazard after each wave:
    (observed (T, T) booleans, shares) for units seen through wave 1, 2, ..., T."""
    observed = np.tril(np.ones((n_waves, n_waves), dtype=bool))
    stay = (1.0 - hazard) ** np.arange(n_waves)
    shares = np.append(stay[:-1] * hazard, stay[-1])
    return observed, shares


def pattern_population(sigma: np.ndarray, observed: np.ndarray, shares: np.ndarray,
                       n: float) -> st.PatternLikelihood:
    """The full-information likelihood of n units split over response patterns in the
    given shares, each pattern's moments at their expectation under ``sigma``: N times
    a structure's discrepancy from it is the noncentrality of a test at these patterns."""
    from types import SimpleNamespace

    from paneldiag.diagnostics.missingness import _groups
    t = sigma.shape[0]
    counts = np.asarray(shares, dtype=float) * n
    m2 = counts[:, None, None] * sigma[None] * (observed[:, :, None] & observed[:, None, :])
    patterns = SimpleNamespace(observed=observed, n=counts, mass=counts,
                               mean=np.zeros(observed.shape), m2=m2)
    return st.PatternLikelihood(_groups(patterns, np.ones(t, dtype=bool)), t)


def population_tests(sigma: np.ndarray, mean: np.ndarray, times, n: float,
                     alpha: float | None = None, hazard: float = 0.0, tests=None) -> dict:
    """The rules' part tests run on population moments (N = n): by test,
    (noncentrality, df, p, simpler fit, richer fit), for every test, or with ``tests``
    for those named (and any other test on the same richer family; the rest are None).
    With a dropout ``hazard`` the units fall into the response patterns of monotone
    dropout (``monotone_patterns``) and the tests use the full-information likelihood of
    those patterns."""
    times = np.asarray(times, dtype=float)
    t = len(times)
    sigma = np.asarray(sigma, float)
    likelihood, pair_n = None, np.full((t, t), float(n))
    if hazard > 0:
        observed, shares = monotone_patterns(t, hazard)
        likelihood = pattern_population(sigma, observed, shares, n)
        pair_n = n * (observed.T * shares) @ observed.astype(float)
    inp = verdicts.Inputs(mu=np.asarray(mean, float), sigma=sigma, pair_n=pair_n,
                          times=times, n_units=int(n), retention=1.0, dropout_smd=np.nan,
                          categories=10 ** 6, likelihood=likelihood)
    table = default_thresholds()
    alpha = float(table["alpha"] if alpha is None else alpha)
    with verdicts._one_thread():
        families = None if tests is None else \
            {verdicts.PART_TESTS[test][1] for test in tests} | \
            ({verdicts.GROWTH_WITHOUT_CARRY[1]} if "growth" in tests else set())
        return verdicts._fit_all(inp, alpha, int(table["max_waves_per_wave"]),
                                 families=families).tests


def part_test_power(test: str, family: str, n_units: int, n_waves: int,
                    reliability: float = 1.0, alpha: float | None = None,
                    hazard: float = 0.0) -> TestPower:
    """Asymptotic power of the rules' part test ``test`` (a key of
    ``verdicts.PART_TESTS``) when the data come from ``simulate.family_process(family,
    ...)`` at waves 0..T-1 with ``n_units`` units: complete, or with monotone dropout
    at the given ``hazard`` (the response patterns of the validation's dropout)."""
    alpha = float(default_thresholds()["alpha"] if alpha is None else alpha)
    times = np.arange(n_waves, dtype=float)
    process = family_process(family, times, reliability)
    sigma = population_covariance(process, times)
    res = population_tests(sigma, population_mean(process, times), times, n_units, alpha,
                           hazard, tests=(test,))
    lam, df, _, simple_fit, rich_fit = res[test]
    boundary = verdicts.PART_TESTS[test][4]
    power, critical = lr_power(lam, df, alpha, boundary)
    bound = neyman_pearson_bound(sigma, simple_fit.sigma, float(n_units), alpha)
    return TestPower(test=test, family=family, simple=simple_fit.structure.name,
                     rich=rich_fit.structure.name, n_units=float(n_units),
                     n_waves=int(n_waves), reliability=float(reliability), alpha=alpha,
                     df=int(df), boundary=boundary, noncentrality=float(lam),
                     critical_value=critical, power=power, bound=bound,
                     alpha_for_95=alpha_for_power(lam, df, boundary, 0.95))
