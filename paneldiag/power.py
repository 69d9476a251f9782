"""Power of the verdicts' part tests: how much information a panel carries about a part.

The verdicts add a part (a stable trait, carry-over, unit-specific growth, carry-over in
the deviations from growth) to a family only when a likelihood-ratio test of the nested
simpler structure rejects at ``alpha`` (``paneldiag.rules.verdicts``). How often that
test can reject for a given true process follows from the population alone: fit the
simpler structure to the population covariance Sigma_0 of the true process; the
minimised discrepancy, times (n - 1), is the noncentrality lambda of the test, and the
statistic is asymptotically noncentral chi-square(df, lambda) (Satorra and Saris 1985).
With a variance on its boundary under the null (the trait test), the critical value
comes from the 50:50 mixture of chi-square(0) and chi-square(df) (Self and Liang 1987).

A second figure bounds every test, not only the one the rules use: any test of the
simpler family at level alpha has level alpha at the simpler structure closest to
Sigma_0 (the fit above), so its power at Sigma_0 is at most that of the Neyman-Pearson
test of these two normal distributions (Neyman and Pearson 1933). The bound uses the
normal approximation to the sum of the per-unit log likelihood ratios (quadratic forms
with closed-form mean and variance).

These are asymptotic figures for complete normal data with the sample size ``n``; the
screen's effective n with missing data is the mean pairwise-complete count, so
dropout lowers the power further. Recall of a family cannot exceed the power of the
test that adds its defining part, since the rules require that test to reject.

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
from paneldiag.rules.thresholds import default_thresholds
from paneldiag.rules.verdicts import PART_TESTS, structure_plan
from paneldiag.simulate import family_process, population_covariance, population_mean


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
    noncentrality: float     # (n - 1)(F_simple - F_rich) at the population covariance
    critical_value: float
    power: float             # of the rules' likelihood-ratio test at alpha
    bound: float             # of the most powerful test against the closest simpler fit
    alpha_for_95: float      # level at which the rules' test would reach power 0.95


def structures_of(times, mean=None) -> dict:
    """The structures the part tests compare, as ``verdicts.structure_plan`` gives
    them, with the time-basis growth structures under 'growth' and 'growth_ar'.

    Given a ``mean`` that departs from its quadratic fit, the mean-shape structures
    come too, under 'growth:mean' and 'growth_ar:mean' (the rules switch to them when
    the remainder test rejects and they reproduce the covariances better).
    """
    times = np.asarray(times, dtype=float)
    mb = None
    if mean is not None and len(times) >= 4:
        u = st.time_basis(times)
        x2 = np.column_stack([np.ones(len(u)), u, u ** 2])
        departure = np.max(np.abs(mean - x2 @ np.linalg.lstsq(x2, mean, rcond=None)[0]))
        if departure > 1e-8 * max(1.0, float(np.max(np.abs(mean)))):
            mb = st.mean_basis(np.asarray(mean, dtype=float), times)
    plan = structure_plan(times, mb)
    plan["growth"], plan["growth_ar"] = plan.pop("growth:time"), plan.pop("growth_ar:time")
    return plan


def lr_power(noncentrality: float, df: int, alpha: float, boundary: bool = False
             ) -> tuple[float, float]:
    """(power, critical value) of the likelihood-ratio test at level ``alpha`` when the
    statistic is asymptotically noncentral chi-square(df, noncentrality) (Satorra and
    Saris 1985).

    ``boundary``: the null distribution is the 50:50 mixture of chi-square(0) and
    chi-square(df) (Self and Liang 1987), so the critical value is chi-square(df)'s
    upper 2 alpha point. With one df the statistic is then max(0, Z)^2 with
    Z ~ N(sqrt(lambda), 1), and the power is P(Z > sqrt(critical)), which equals alpha
    at lambda = 0; with more df the noncentral chi-square is used at that critical value.
    """
    lam = max(float(noncentrality), 0.0)
    level = 2.0 * alpha if boundary else alpha
    critical = float(stats.chi2.isf(level, df))
    if boundary and df == 1:
        return float(stats.norm.sf(np.sqrt(critical) - np.sqrt(lam))), critical
    return float(stats.ncx2.sf(critical, df, lam)), critical


def alpha_for_power(noncentrality: float, df: int, boundary: bool = False,
                    power: float = 0.95) -> float:
    """The level at which the likelihood-ratio test of ``lr_power`` would reach
    ``power`` (the inverse of ``lr_power`` in alpha)."""
    lam = max(float(noncentrality), 0.0)
    if boundary and df == 1:
        return float(stats.norm.sf(np.sqrt(lam) - stats.norm.isf(1.0 - power)))
    critical = float(stats.ncx2.isf(power, df, max(lam, 1e-12)))
    tail = float(stats.chi2.sf(critical, df))
    return 0.5 * tail if boundary else tail


def neyman_pearson_bound(sigma_true: np.ndarray, sigma_null: np.ndarray, n: float,
                         alpha: float) -> float:
    """Power at ``sigma_true`` of the most powerful level-``alpha`` test of the normal
    distribution with covariance ``sigma_null`` against the one with ``sigma_true``
    (Neyman and Pearson 1933), from n - 1 independent units, by the normal
    approximation to the summed log likelihood ratio."""
    inv1, inv0 = np.linalg.inv(sigma_true), np.linalg.inv(sigma_null)
    a = inv1 - inv0
    const = 0.5 * (np.linalg.slogdet(sigma_null)[1] - np.linalg.slogdet(sigma_true)[1])
    m = n - 1.0

    def moments(sigma):
        as_ = a @ sigma
        return m * (const - 0.5 * np.trace(as_)), np.sqrt(m * 0.5 * np.trace(as_ @ as_))

    mean0, sd0 = moments(sigma_null)
    mean1, sd1 = moments(sigma_true)
    if not (sd0 > 0 and sd1 > 0):
        return alpha
    critical = mean0 + stats.norm.isf(alpha) * sd0
    return float(stats.norm.sf((critical - mean1) / sd1))


def noncentrality(test: str, sigma: np.ndarray, times, n: float, mean=None
                  ) -> tuple[float, st.Fit, st.Fit]:
    """(lambda, simpler fit, richer fit) of a part test at the covariance ``sigma``:
    lambda = (n - 1)(F_simple - F_rich), both structures fitted to ``sigma``."""
    simple, rich, _, _ = PART_TESTS[test]
    times = np.asarray(times, dtype=float)
    structures = structures_of(times, mean)
    if "growth:mean" in structures and {simple, rich} & {"growth", "growth_ar"}:
        # the rules keep the basis whose growth fit (without carry-over) is closer
        by_time = st.fit_structure(structures["growth"], sigma, times, n)
        by_mean = st.fit_structure(structures["growth:mean"], sigma, times, n)
        if by_mean.discrepancy < by_time.discrepancy:
            structures["growth"] = structures["growth:mean"]
            structures["growth_ar"] = structures["growth_ar:mean"]
    fits = {key: st.fit_structure(structures[key], sigma, times, n)
            for key in (simple, rich)}
    lam = max(0.0, (n - 1.0) * (fits[simple].discrepancy - fits[rich].discrepancy))
    return float(lam), fits[simple], fits[rich]


def part_test_power(test: str, family: str, n_units: int, n_waves: int,
                    reliability: float = 1.0, alpha: float | None = None,
                    n_effective: float | None = None) -> TestPower:
    """Asymptotic power of the rules' part test ``test`` (a key of ``PART_TESTS``) when
    the data come from ``simulate.family_process(family, ...)`` at waves 0..T-1.

    ``alpha`` defaults to the thresholds table's; ``n_effective`` to ``n_units`` (the
    rules' effective n for complete data; with dropout pass the mean pairwise-complete
    count).
    """
    alpha = float(default_thresholds()["alpha"] if alpha is None else alpha)
    n = float(n_units if n_effective is None else n_effective)
    times = np.arange(n_waves, dtype=float)
    process = family_process(family, times, reliability)
    sigma = population_covariance(process, times)
    simple, rich, df, boundary = PART_TESTS[test]
    lam, simple_fit, _ = noncentrality(test, sigma, times, n,
                                       population_mean(process, times))
    power, critical = lr_power(lam, df, alpha, boundary)
    bound = neyman_pearson_bound(sigma, simple_fit.sigma, n, alpha)
    return TestPower(test=test, family=family, simple=simple, rich=rich, n_units=n,
                     n_waves=int(n_waves), reliability=float(reliability), alpha=alpha,
                     df=df, boundary=boundary, noncentrality=lam, critical_value=critical,
                     power=power, bound=bound,
                     alpha_for_95=alpha_for_power(lam, df, boundary, 0.95))
