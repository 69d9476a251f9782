"""The growth screen: per-unit trajectories, the spread of their slopes against their
sampling error, the shape of the mean trajectory, the fanning of the variance, the
share of variance between units, and the carry-over left in detrended residuals.

Everything here is a pure function of two mergeable summaries: the per-unit
trajectory summary (``TrajectorySummary``, fitted pattern by pattern) and the
pairwise moments of the waves (``PairwiseMoments``). Uncertainty comes from the
delete-a-group jackknife over replicate groups where no closed form is used.
With weights, every mean, spread, slope, reliability and correlation here is weighted
(the summaries carry weighted sums); the counts of units stay counts.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from paneldiag import distributions as dist
from paneldiag.results import Result
from paneldiag.summaries.jackknife import jackknife_ci, jackknife_ci_bounded, jackknife_se
from paneldiag.summaries.trajectories import LINEAR_MIN_WAVES, TrajectorySummary


# ----------------------------------------------------------------------------- pattern constants

@dataclass(frozen=True)
class _PatternDesign:
    k: np.ndarray        # observed waves per pattern
    ss_t: np.ndarray     # sum of squared deviations of the observed times from their mean
    tr_m: np.ndarray     # trace of the residual maker M of the linear fit (k - 2)
    tr_ml: np.ndarray    # trace of M L (L the symmetric lag-1 operator)
    r0: np.ndarray       # tr(M L) / tr(M): expected lag-1 ratio under independent errors
    c_var: np.ndarray    # tr((M (L - r0 I))^2): variance factor of the centred form
    n_pairs: np.ndarray  # adjacent observed pairs per unit


def _pattern_design(summary: TrajectorySummary) -> _PatternDesign:
    """The design quantities of every response pattern, patterns with the same number
    k of observed waves in one batch. The residual maker of a straight-line fit on the
    observed times t is M = I - 11'/k - c c' / (c'c), c = t - mean(t)."""
    tc = summary.times - summary.centre
    observed = np.asarray(summary.patterns, dtype=bool)
    counts = observed.sum(axis=1)
    out = {key: np.zeros(len(observed)) for key in _PatternDesign.__dataclass_fields__}
    out["k"] = counts.astype(float)
    for k in np.unique(counts[counts >= LINEAR_MIN_WAVES]):  # a loop over wave counts
        rows = np.flatnonzero(counts == k)
        # the observed waves of each pattern, in wave order
        waves = np.sort(np.argsort(~observed[rows], axis=1, kind="stable")[:, :k], axis=1)
        c = tc[waves] - tc[waves].mean(axis=1, keepdims=True)
        ss = (c * c).sum(axis=1)
        varies = ss > 0
        inverse = np.divide(1.0, ss, out=np.zeros_like(ss), where=varies)
        m = np.eye(k) - 1.0 / k - inverse[:, None, None] * c[:, :, None] * c[:, None, :]
        adjacent = 0.5 * (np.diff(waves, axis=1) == 1)   # links of adjacent panel waves
        lag = np.zeros((len(rows), k, k))
        step = np.arange(k - 1)
        lag[:, step, step + 1] = adjacent
        lag[:, step + 1, step] = adjacent
        tr_m = k - 1.0 - varies               # the residual degrees of freedom
        ml = m @ lag
        tr_ml = np.einsum("pii->p", ml)
        fitted = tr_m > 0.5
        r0 = np.divide(tr_ml, tr_m, out=np.zeros_like(tr_ml), where=fitted)
        a = ml - r0[:, None, None] * m
        out["ss_t"][rows] = ss
        out["tr_m"][rows] = tr_m
        out["n_pairs"][rows] = 2 * lag.sum(axis=(1, 2))
        out["tr_ml"][rows] = np.where(fitted, tr_ml, 0.0)
        out["r0"][rows] = r0
        out["c_var"][rows] = np.where(fitted, np.einsum("pij,pji->p", a, a), 0.0)
    return _PatternDesign(**out)


# ----------------------------------------------------------------------------- results

@dataclass(frozen=True)
class TrajectoryFits(Result):
    n_units: int | None     # units with a fitted line (>= 2 observed waves)
    n_units_curvature: int | None  # units with a curvature (>= 4 observed waves)
    time_centre: float
    mean_intercept: float
    sd_intercept: float
    mean_slope: float
    mean_slope_ci_low: float
    mean_slope_ci_high: float
    sd_slope: float
    intercept_slope_correlation: float
    mean_curvature: float
    mean_curvature_ci_low: float
    mean_curvature_ci_high: float


@dataclass(frozen=True)
class SlopeReliability(Result):
    estimate: float
    ci_low: float
    ci_high: float
    slope_variance: float          # tau: variance of true slopes (weighted moment estimate)
    residual_variance: float       # sigma^2: pooled within-unit residual variance
    mean_sampling_variance: float  # mean of sigma^2 / SS_t over units
    pooled_slope: float            # precision-weighted mean slope
    chi_square: float
    df: int
    pvalue: float
    n_units: int | None  # None: withheld (disclosure control)
    impossible: bool
    problem: str | None
    interval_scale: str = "logit"   # "linear" when the estimate or a replicate is not in (0, 1)


@dataclass(frozen=True)
class ResidualAutocorrelation(Result):
    lag1: float
    expected_under_independence: float
    excess: float
    ci_low: float
    ci_high: float
    z: float
    pvalue: float
    n_units: int | None  # None: withheld (disclosure control)
    n_pairs: int


@dataclass(frozen=True)
class ShapeComponent(Result):
    component: str
    estimate: float
    se: float | None
    chi_square: float
    df: int
    pvalue: float
    share_of_change: float


@dataclass(frozen=True)
class MeanShape(Result):
    wave_means: tuple[float, ...]
    mean_change_per_time: float
    components: tuple[ShapeComponent, ...]
    any_change: ShapeComponent
    covariance_basis: str   # "pairwise_complete" or "jackknife" (over replicate groups)
    basis: str = "available_case"  # the wave means: "available_case" or "em_missing_at_random"


@dataclass(frozen=True)
class VarianceTrend(Result):
    variances: tuple[float, ...]
    log_variance_slope: float
    se: float
    t: float
    df: int
    pvalue: float
    ratio_last_first: float
    basis: str = "pairwise_complete"  # the variances: or "em_missing_at_random"


@dataclass(frozen=True)
class IntraclassCorrelation(Result):
    estimate: float
    ci_low: float
    ci_high: float
    between_mean_square: float
    within_mean_square: float
    n0: float
    f: float
    df_between: int
    df_within: int
    pvalue: float
    impossible: bool
    problem: str | None
    interval_scale: str = "logit"   # "linear" when the estimate or a replicate is not in (0, 1)


@dataclass(frozen=True)
class GrowthScreen(Result):
    trajectories: TrajectoryFits
    slope_reliability: SlopeReliability
    residual_autocorrelation: ResidualAutocorrelation
    mean_shape: MeanShape
    variance_trend: VarianceTrend
    icc: IntraclassCorrelation


# ----------------------------------------------------------------------------- pooled moments

def _slope_parts(s: TrajectorySummary, pd_: _PatternDesign):
    """Units (weight sums with weights), pattern means and centred sums of the linear
    coefficients (pooled)."""
    use = pd_.k >= LINEAR_MIN_WAVES
    n = s.mass[0] * use
    return n, s.lin_mean[0], s.lin_m2[0]


def _trajectory_point(s: TrajectorySummary, pd_: _PatternDesign) -> dict:
    n, mean, m2 = _slope_parts(s, pd_)
    j = n.sum()
    out = {"n": (s.n[0] * (pd_.k >= LINEAR_MIN_WAVES)).sum()}   # a count of units
    with np.errstate(invalid="ignore", divide="ignore"):
        centre = (n[:, None] * mean).sum(axis=0) / j
        dev = mean - centre
        cross = (m2 * (n > 0)[:, None, None]).sum(axis=0) + \
            (n[:, None, None] * dev[:, :, None] * dev[:, None, :]).sum(axis=0)
        cov = cross / (j - 1)
        out.update(mean_intercept=centre[0], mean_slope=centre[1],
                   sd_intercept=np.sqrt(cov[0, 0]), sd_slope=np.sqrt(cov[1, 1]),
                   correlation=cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]),
                   slope_ss=cross[1, 1])
        nq = s.mass[0] * (pd_.k >= 4)
        out["n_curvature"] = (s.n[0] * (pd_.k >= 4)).sum()
        out["mean_curvature"] = (nq * s.quad_mean[0][:, 2]).sum() / nq.sum()
    return out


def _slope_reliability_point(s: TrajectorySummary, pd_: _PatternDesign) -> dict:
    """Raudenbush and Bryk (2002, ch. 3) moment estimates from pooled sums."""
    n, mean, m2 = _slope_parts(s, pd_)
    n = n * (pd_.ss_t > 0)
    j = n.sum()
    df_resid = (s.mass[0] * pd_.tr_m).sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma2 = s.rss[0].sum() / df_resid
        v = np.where(n > 0, sigma2 / pd_.ss_t, np.inf)
        mean_v = (n * np.where(n > 0, v, 0.0)).sum() / j
        w = np.where(n > 0, 1.0 / v, 0.0)
        sum_w, sum_w2 = (n * w).sum(), (n * w * w).sum()
        pooled = (n * w * mean[:, 1]).sum() / sum_w
        chi2 = (w * (m2[:, 1, 1] * (n > 0) + n * (mean[:, 1] - pooled) ** 2)).sum()
        tau = (chi2 - (j - 1)) / (sum_w - sum_w2 / sum_w)
        lam = np.where(n > 0, tau / (tau + v), 0.0)
        reliability = (n * lam).sum() / j
    units = (s.n[0] * (pd_.k >= LINEAR_MIN_WAVES) * (pd_.ss_t > 0)).sum()
    return {"n": units, "sigma2": sigma2, "tau": tau, "mean_v": mean_v, "reliability": reliability,
            "pooled": pooled, "chi2": chi2, "df_resid": df_resid}


def _autocorrelation_point(s: TrajectorySummary, pd_: _PatternDesign) -> dict:
    use = (pd_.tr_m > 0.5) & (pd_.n_pairs > 0)
    rss, lag, rss_sq = s.rss[0] * use, s.lag_cross[0] * use, s.rss_sq[0] * use
    with np.errstate(invalid="ignore", divide="ignore"):
        denom = rss.sum()
        r = lag.sum() / denom
        expected = (pd_.r0 * rss).sum() / denom
        # a pattern with one residual degree of freedom has e' L e = r0 e' e exactly: it
        # tells nothing, and its rounding would be all the test saw on such panels
        tested = use & (pd_.tr_m > 1.5)
        q = np.where(tested, lag - pd_.r0 * rss, 0.0).sum()
        df = pd_.tr_m
        sigma4 = np.where(tested, rss_sq / (df * (df + 2)), 0.0)
        var_q = 2.0 * (pd_.c_var * sigma4).sum()
        z = q / np.sqrt(var_q)
    return {"r": r, "expected": expected, "z": z, "n": (s.n[0] * use).sum(),
            "pairs": (s.n[0] * use * pd_.n_pairs).sum()}


def _icc_point(s: TrajectorySummary, pd_: _PatternDesign) -> dict:
    """One-way random-effects ANOVA with units as classes and waves as replicates."""
    n, k = s.mass[0], pd_.k
    units = n * (k > 0)
    j = units.sum()
    n_obs = (units * k).sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        grand = (units * k * s.unit_mean[0]).sum() / n_obs
        ssb = (k * (s.unit_mean_m2[0] + units * (s.unit_mean[0] - grand) ** 2)).sum()
        ssw = s.within_ss[0].sum()
        df_b, df_w = j - 1, n_obs - j
        msb, msw = ssb / df_b, ssw / df_w
        n0 = (n_obs - (units * k * k).sum() / n_obs) / df_b
        icc = (msb - msw) / (msb + (n0 - 1) * msw)
    return {"icc": icc, "msb": msb, "msw": msw, "n0": n0, "df_b": df_b, "df_w": df_w}


# ----------------------------------------------------------------------------- the sections

def trajectory_fits(summary: TrajectorySummary, level: float = 0.95,
                    prepared=None) -> TrajectoryFits:
    """Means and spreads of the per-unit least-squares lines on centred wave times.

    Each unit with at least two observed waves gets an ordinary least-squares line
    (Rogosa, Brandt and Zimowski 1982, Psychological Bulletin: the growth-curve view
    of change); units with at least four also get a quadratic whose curvature is
    summarised. Intervals are delete-a-group jackknife intervals (Kott 2001, Journal
    of Official Statistics).

    References
    ----------
    Rogosa, D., Brandt, D., and Zimowski, M. (1982). A growth curve approach to the
    measurement of change. Psychological Bulletin, 92(3), 726-748.
    """
    pooled, parts, pd_ = prepared or prepare(summary)
    point = _trajectory_point(pooled, pd_)
    reps = [_trajectory_point(part, pd_) for part in parts]
    slope_ci = _ci(point["mean_slope"], [r["mean_slope"] for r in reps], level)
    curve_ci = _ci(point["mean_curvature"], [r["mean_curvature"] for r in reps], level)
    return TrajectoryFits(
        n_units=int(point["n"]), n_units_curvature=int(point["n_curvature"]),
        time_centre=float(summary.centre),
        mean_intercept=float(point["mean_intercept"]), sd_intercept=float(point["sd_intercept"]),
        mean_slope=float(point["mean_slope"]), mean_slope_ci_low=slope_ci[0],
        mean_slope_ci_high=slope_ci[1], sd_slope=float(point["sd_slope"]),
        intercept_slope_correlation=float(point["correlation"]),
        mean_curvature=float(point["mean_curvature"]), mean_curvature_ci_low=curve_ci[0],
        mean_curvature_ci_high=curve_ci[1])


def slope_reliability(summary: TrajectorySummary, level: float = 0.95,
                      prepared=None) -> SlopeReliability:
    """Reliability of the per-unit least-squares slopes, and the test of slope variance.

    With sigma^2 the pooled within-unit residual variance of the linear fits and
    SS_t,j the sum of squared deviations of unit j's observed times, the sampling
    variance of its slope is v_j = sigma^2 / SS_t,j. The homogeneity test is
    chi^2 = sum (b_j - b_pooled)^2 / v_j on J - 1 degrees of freedom, b_pooled the
    precision-weighted mean slope. The variance of true slopes is the precision-
    weighted moment estimate that goes with that statistic, tau = (chi^2 - (J - 1)) /
    (sum w_j - sum w_j^2 / sum w_j) with w_j = 1 / v_j (DerSimonian and Laird 1986;
    with equal v_j it is the one-way ANOVA estimate, equal to REML when positive),
    and the reliability is the average of lambda_j = tau / (tau + v_j) over the J
    units. A negative tau (slopes vary less than sampling error alone would make
    them) is reported with the reason; the reliability is then not a proportion and
    is not clipped. The jackknife interval is formed on the logit scale, so it stays
    inside 0-1 (``_bounded_ci``).

    Serial dependence of the residuals (carry-over) inflates the spread of OLS slopes
    beyond sigma^2 / SS_t, so a panel with carry-over and no growth can show a high
    slope "reliability": read it together with the residual autocorrelation.

    References
    ----------
    Raudenbush, S. W., and Bryk, A. S. (2002). Hierarchical Linear Models:
    Applications and Data Analysis Methods (2nd ed.), ch. 3 (reliability of OLS
    coefficients; homogeneity test of the coefficients' variance). Thousand Oaks: Sage.
    DerSimonian, R., and Laird, N. (1986). Meta-analysis in clinical trials.
    Controlled Clinical Trials, 7(3), 177-188.
    """
    pooled, parts, pd_ = prepared or prepare(summary)
    point = _slope_reliability_point(pooled, pd_)
    reps = [_slope_reliability_point(part, pd_)["reliability"] for part in parts]
    low, high, scale = _bounded_ci(point["reliability"], reps, level)
    df = int(point["n"]) - 1
    problem, impossible = None, False
    if not np.isfinite(point["sigma2"]):
        problem = "no unit has three or more observed waves, so the residual variance is unknown"
    elif point["tau"] < 0:
        impossible = True
        problem = ("slope variance estimate negative: the per-unit slopes vary less than their "
                   "sampling error alone would make them; the reliability is not a proportion")
    return SlopeReliability(
        estimate=float(point["reliability"]), ci_low=low, ci_high=high,
        slope_variance=float(point["tau"]), residual_variance=float(point["sigma2"]),
        mean_sampling_variance=float(point["mean_v"]), pooled_slope=float(point["pooled"]),
        chi_square=float(point["chi2"]), df=df,
        pvalue=float(dist.chi2_sf(point["chi2"], df)) if df > 0 else float("nan"),
        n_units=int(point["n"]), impossible=impossible, problem=problem,
        interval_scale=scale)


def residual_autocorrelation(summary: TrajectorySummary, level: float = 0.95,
                             prepared=None) -> ResidualAutocorrelation:
    """Lag-1 autocorrelation of within-unit residuals after each unit's own line.

    The pooled statistic is r = sum_j e_j' L e_j / sum_j e_j' e_j over units with at
    least three observed waves, L the symmetric lag-1 operator over adjacent observed
    waves. Under independent errors of constant variance within a unit, E[e' A e] =
    sigma^2 tr(M A) for the residual maker M (Durbin and Watson 1950, Biometrika), so
    r is expected near sum r0_p RSS / sum RSS with r0 = tr(M L) / tr(M) per response
    pattern: negative for short series (the small-sample bias of detrended
    autocorrelations; Nickell 1981, Econometrica), not 0. The test uses the centred
    form Q = sum_j e_j' (L - r0 I) e_j, which has mean 0 under independence whatever
    each unit's error variance, and normal-theory variance 2 sum_j sigma_j^4
    tr((M (L - r0 I))^2), with sigma_j^4 estimated without bias by
    RSS_j^2 / (df (df + 2)). A positive excess points to carry-over (autoregression)
    beyond the units' own lines. The interval for r is a delete-a-group jackknife.

    References
    ----------
    Durbin, J., and Watson, G. S. (1950). Testing for serial correlation in least
    squares regression. I. Biometrika, 37(3/4), 409-428.
    Nickell, S. (1981). Biases in dynamic models with fixed effects. Econometrica,
    49(6), 1417-1426.
    """
    pooled, parts, pd_ = prepared or prepare(summary)
    point = _autocorrelation_point(pooled, pd_)
    reps = [_autocorrelation_point(part, pd_)["r"] for part in parts]
    low, high = _ci(point["r"], reps, level)
    z = float(point["z"])
    return ResidualAutocorrelation(
        lag1=float(point["r"]), expected_under_independence=float(point["expected"]),
        excess=float(point["r"] - point["expected"]), ci_low=low, ci_high=high, z=z,
        pvalue=float(2 * dist.norm_sf(abs(z))) if np.isfinite(z) else float("nan"),
        n_units=int(point["n"]), n_pairs=int(point["pairs"]))


def intraclass_correlation(summary: TrajectorySummary, level: float = 0.95,
                           prepared=None) -> IntraclassCorrelation:
    """ICC(1): share of variance between units, one-way random-effects ANOVA.

    Units are the classes and their observed waves the replicates: MSB and MSW are
    the between- and within-unit mean squares, n0 = (N - sum n_i^2 / N) / (J - 1) the
    average class size corrected for unequal sizes, and ICC = (MSB - MSW) /
    (MSB + (n0 - 1) MSW), tested by F = MSB / MSW on (J - 1, N - J) degrees of
    freedom. A negative estimate (MSB < MSW) is reported with the reason, not
    clipped. Any trend over waves counts as within-unit variance here. The jackknife
    interval is formed on the logit scale, so it stays inside 0-1 (``_bounded_ci``).

    References
    ----------
    Shrout, P. E., and Fleiss, J. L. (1979). Intraclass correlations: uses in
    assessing rater reliability. Psychological Bulletin, 86(2), 420-428 (ICC(1,1)).
    Snedecor, G. W., and Cochran, W. G. (1989). Statistical Methods (8th ed.),
    Iowa State University Press (n0 for unequal class sizes).
    """
    pooled, parts, pd_ = prepared or prepare(summary)
    point = _icc_point(pooled, pd_)
    reps = [_icc_point(part, pd_)["icc"] for part in parts]
    low, high, scale = _bounded_ci(point["icc"], reps, level)
    f = point["msb"] / point["msw"] if point["msw"] > 0 else float("nan")
    problem = None
    if np.isfinite(point["icc"]) and point["icc"] < 0:
        problem = ("negative: the between-unit mean square is below the within-unit mean "
                   "square, so the variance share is not a proportion")
    df_b, df_w = int(point["df_b"]), int(point["df_w"])
    return IntraclassCorrelation(
        estimate=float(point["icc"]), ci_low=low, ci_high=high,
        between_mean_square=float(point["msb"]), within_mean_square=float(point["msw"]),
        n0=float(point["n0"]), f=float(f), df_between=df_b, df_within=df_w,
        pvalue=float(dist.f_sf(f, df_b, df_w)) if np.isfinite(f) and df_w > 0 else float("nan"),
        impossible=problem is not None, problem=problem, interval_scale=scale)


def orthogonal_polynomials(times: np.ndarray) -> np.ndarray:
    """Orthonormal polynomial contrasts on the actual (possibly unequal) wave times.

    The QR decomposition of the Vandermonde matrix of the standardised times gives
    columns orthonormal to each other and to the constant: column 1 the linear,
    column 2 the quadratic contrast and so on, each signed to rise with its leading
    power (Kirk 1995, Experimental Design, 3rd ed., on contrasts for unequal spacing;
    computed as in Emerson 1968, Biometrics).
    """
    t = np.asarray(times, dtype=float)
    z = (t - t.mean()) / t.std()
    q, r = np.linalg.qr(np.vander(z, len(z), increasing=True))
    return q * np.sign(np.diag(r))


def _wave_means_and_covariance(moments) -> tuple[np.ndarray, np.ndarray]:
    p = moments.pooled()
    n = p.mass[0]
    nt = np.diag(n)
    means = moments.shift + np.diag(p.sum_x[0]) / nt
    cov = moments.covariance()
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_cov = cov * n / np.outer(nt, nt)
    return means, np.where(n > 1, mean_cov, 0.0)


def mean_shape(moments, times: np.ndarray, em=None) -> MeanShape:
    """Shape of the mean trajectory by orthogonal polynomial contrasts of the wave means.

    The wave means are the available-case means, with covariance
    Cov(mean_s, mean_t) = S_st n_st / (n_s n_t), S_st the pairwise-complete covariance
    and n_st the units seen at both waves; or, given ``em`` (an EM basis with
    leave-one-group-out copies, see ``paneldiag.diagnostics.reliability.em_basis``), the
    ML means under missing at random with their delete-a-group jackknife covariance.
    Each component (linear, quadratic, and the
    remainder of higher powers together) is tested by a Wald chi-square; the share of
    change is its part of the squared deviations of the wave means from their mean.

    References
    ----------
    Emerson, P. L. (1968). Numerical construction of orthogonal polynomials from a
    general recurrence formula. Biometrics, 24(3), 695-701.
    Wald, A. (1943). Tests of statistical hypotheses concerning several parameters
    when the number of observations is large. Transactions of the American
    Mathematical Society, 54(3), 426-482.
    """
    if em is not None and em.means is not None and len(em.part_means) > 1:
        means = np.asarray(em.means, dtype=float)
        reps = np.asarray(em.part_means, dtype=float)
        k = len(reps)
        dev = reps - reps.mean(axis=0)
        cov = (k - 1) / k * dev.T @ dev
        basis, cov_basis = "em_missing_at_random", "jackknife"
    else:
        means, cov = _wave_means_and_covariance(moments)
        basis, cov_basis = "available_case", "pairwise_complete"
    poly = orthogonal_polynomials(times)
    contrast = poly.T @ means
    total = float((contrast[1:] ** 2).sum())
    t = np.asarray(times, dtype=float)
    slope = float(((t - t.mean()) * means).sum() / ((t - t.mean()) ** 2).sum())
    n_waves = len(times)
    parts = [("linear", [1]), ("quadratic", [2]), ("remainder", list(range(3, n_waves)))]
    components = [_wald(name, cols, poly, means, cov, total) for name, cols in parts
                  if cols and cols[-1] < n_waves]
    return MeanShape(wave_means=tuple(float(m) for m in means), mean_change_per_time=slope,
                     components=tuple(components),
                     any_change=_wald("any_change", list(range(1, n_waves)), poly, means, cov,
                                      total),
                     covariance_basis=cov_basis, basis=basis)


def _wald(name, cols, poly, means, cov, total) -> ShapeComponent:
    c = poly[:, cols]
    est = c.T @ means
    v = c.T @ cov @ c
    try:
        chi2 = float(est @ np.linalg.solve(v, est))
    except np.linalg.LinAlgError:
        chi2 = float("nan")
    share = float((est ** 2).sum() / total) if total > 0 else float("nan")
    single = len(cols) == 1
    return ShapeComponent(
        component=name, estimate=float(est[0]) if single else float(np.sqrt((est ** 2).sum())),
        se=float(np.sqrt(v[0, 0])) if single else None, chi_square=chi2, df=len(cols),
        pvalue=float(dist.chi2_sf(chi2, len(cols))) if np.isfinite(chi2) else float("nan"),
        share_of_change=share)


def _log_variance_slope(moments, times) -> tuple[float, np.ndarray]:
    var = np.diag(moments.covariance() if hasattr(moments, "covariance") else moments)
    t = np.asarray(times, dtype=float) - np.mean(times)
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.log(var)
    ok = np.isfinite(y)
    tt = t[ok] - t[ok].mean()
    return float((tt * y[ok]).sum() / (tt ** 2).sum()), var


def variance_trend(moments, times: np.ndarray, em=None) -> VarianceTrend:
    """Fanning: the trend of the measure's variance over time.

    The least-squares slope of the log variance on time (Bartlett and Kendall 1946:
    the log of a sample variance has nearly constant sampling variance), so
    exp(slope) is the factor by which the variance changes per unit of time. Waves
    share units, so the standard error is the delete-a-group jackknife over
    replicate groups (Kott 2001), with a t test on K - 1 degrees of freedom. Given
    ``em`` (see ``mean_shape``), the variances are the ML ones under missing at random.

    References
    ----------
    Bartlett, M. S., and Kendall, D. G. (1946). The statistical analysis of
    variance-heterogeneity and the logarithmic transformation. Supplement to the
    Journal of the Royal Statistical Society, 8(1), 128-138.
    Kott, P. S. (2001). The delete-a-group jackknife. Journal of Official Statistics,
    17(4), 521-526.
    """
    source = moments if em is None else em
    slope, var = _log_variance_slope(source, times)
    reps = np.array([_log_variance_slope(part, times)[0] for part in source.leave_one_out()])
    k = len(reps)
    se = float(jackknife_se(slope, reps))
    t_stat = slope / se if se > 0 else float("nan")
    finite = var[np.isfinite(var)]
    return VarianceTrend(
        variances=tuple(float(v) for v in var), log_variance_slope=slope, se=se, t=t_stat,
        df=k - 1, pvalue=float(2 * dist.t_sf(abs(t_stat), k - 1)) if k > 1 else float("nan"),
        ratio_last_first=float(finite[-1] / finite[0]) if len(finite) > 1 else float("nan"),
        basis="pairwise_complete" if em is None else "em_missing_at_random")


def growth_screen(trajectories: TrajectorySummary, moments, times: np.ndarray,
                  level: float = 0.95, em=None) -> GrowthScreen:
    """Every part of the growth screen (see the functions for methods and references)."""
    prepared = prepare(trajectories)
    return GrowthScreen(
        trajectories=trajectory_fits(trajectories, level, prepared),
        slope_reliability=slope_reliability(trajectories, level, prepared),
        residual_autocorrelation=residual_autocorrelation(trajectories, level, prepared),
        mean_shape=mean_shape(moments, times, em),
        variance_trend=variance_trend(moments, times, em),
        icc=intraclass_correlation(trajectories, level, prepared))


# ----------------------------------------------------------------------------- helpers

def prepare(summary: TrajectorySummary):
    """(pooled summary, leave-one-group-out summaries, pattern constants), shared by
    the sections so the pooling and the per-pattern algebra are done once."""
    pooled = summary.pooled()
    return pooled, list(summary.leave_one_out()), _pattern_design(pooled)


def _ci(point, reps, level) -> tuple[float, float]:
    reps = np.asarray(reps, dtype=float)
    if len(reps) < 2 or not np.all(np.isfinite(reps)):
        return float("nan"), float("nan")
    low, high = jackknife_ci(point, reps, level)
    return float(low), float(high)


def _bounded_ci(point, reps, level) -> tuple[float, float, str]:
    """The jackknife interval of a share (0-1) on the logit scale (see
    ``jackknife_ci_bounded``); NaN when a replicate is undefined."""
    reps = np.asarray(reps, dtype=float)
    if len(reps) < 2 or not np.all(np.isfinite(reps)):
        return float("nan"), float("nan"), "linear"
    return jackknife_ci_bounded(point, reps, level)


def growth_section(ctx) -> GrowthScreen:
    """The screen's ``growth`` section for one measure (see paneldiag.pipeline).

    With missing cells and converging EM fits, the mean shape and the variance trend
    use the ML moments under missing at random (as the reliability section does); the
    per-unit trajectories use each unit's observed waves.
    """
    from paneldiag.diagnostics.reliability import em_basis
    from paneldiag.summaries.pairwise import PairwiseMoments
    from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments

    em = None
    if np.isnan(ctx.values).any() and ReplicatePatternMoments in ctx.summaries:
        em = em_basis(ctx.summary(ReplicatePatternMoments),
                      getattr(ctx.results.get("missingness"), "em", None))
    screen = growth_screen(ctx.summary(TrajectorySummary), ctx.summary(PairwiseMoments),
                           ctx.panel.wave_times, em=em)
    em_units = getattr(getattr(ctx.results.get("missingness"), "em", None), "n_units", None)
    return withhold_unit_counts(screen, ctx.panel.n_units, ctx.options.min_cell,
                                [] if em_units is None else [em_units])


# the unit counts of the growth screen: units with enough observed waves for a fit
UNIT_COUNTS = (("trajectories", "n_units"), ("slope_reliability", "n_units"),
               ("residual_autocorrelation", "n_units"), ("trajectories", "n_units_curvature"))


def withhold_unit_counts(screen: GrowthScreen, n_panel_units: int, min_cell: int,
                         shown_elsewhere: list[int] = ()) -> GrowthScreen:
    """Disclosure control of the unit counts (common practice: no count of 1 to
    ``min_cell`` - 1 units is shown, nor one that follows by subtraction).

    Each count is of the units with enough observed waves for a fit (2, 3 or 4), so
    the difference of two of them, or of one from the panel's unit count, counts the
    units observed at a given number of waves. From the largest down, a count is
    shown only when it is at least ``min_cell`` and differs from the panel's count,
    from the counts ``shown_elsewhere`` in the report (the units with any observed
    value) and from every count already shown by 0 or by at least ``min_cell``;
    otherwise it becomes None. Degrees of freedom, being model output, are shown (common practice
    in output checking)."""
    shown, withheld = [n_panel_units, *shown_elsewhere], {}
    for part, name in sorted(UNIT_COUNTS, key=lambda place: -getattr(getattr(screen, place[0]),
                                                                      place[1])):
        count = getattr(getattr(screen, part), name)
        if count >= min_cell and all(c == count or abs(c - count) >= min_cell for c in shown):
            shown.append(count)
        else:
            withheld.setdefault(part, {})[name] = None
    return replace(screen, **{part: replace(getattr(screen, part), **names)
                              for part, names in withheld.items()})
