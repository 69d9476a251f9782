"""Wave profile: the distribution of the measure at each wave."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.results import Result, plain
from paneldiag.summaries.moments import WaveMoments


@dataclass(frozen=True)
class WaveRow(Result):
    wave: str
    n: int
    mean: float
    sd: float
    min: float
    max: float
    skewness: float
    floor_share: float
    ceiling_share: float
    distinct: int


@dataclass(frozen=True)
class WaveProfile(Result):
    rows: tuple[WaveRow, ...]
    floor: float
    ceiling: float

    def to_dict(self) -> list[dict]:  # the JSON key holds the list of rows
        return plain([row.to_dict() for row in self.rows])


def wave_profile(moments: WaveMoments, wave_labels: tuple[str, ...]) -> WaveProfile:
    """Per-wave n, mean, SD (n - 1 divisor), extremes, skewness, floor and ceiling shares.

    Skewness is the moment coefficient g1 = m3 / m2^(3/2) with population moments
    (Joanes and Gill 1998, J. Royal Statistical Society D, eq. for g1; scipy.stats.skew's
    default). The floor and ceiling are the lowest and highest values observed at any
    wave, so shares are comparable across waves (floor and ceiling effects in the sense
    of Terwee et al. 2007, J. Clinical Epidemiology). With weights (rescaled to average 1,
    ``summaries.relative_weights``) the mean, SD, skewness and shares are weighted, the
    SD with divisor sum(w) - 1 (statsmodels' DescrStatsW with ddof=1); n stays a count.
    """
    n = moments.n
    mass = moments.mass
    weighted = moments.w is not None
    floor = float(np.min(moments.minimum))
    ceiling = float(np.max(moments.maximum))
    at_min = moments.w_at_min if weighted else moments.n_at_min
    at_max = moments.w_at_max if weighted else moments.n_at_max
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.where((n > 1) & (mass > 1), np.sqrt(moments.m2 / (mass - 1)), np.nan)
        skew = np.where(moments.m2 > 0, (moments.m3 / mass) / (moments.m2 / mass) ** 1.5,
                        np.nan)
        floor_share = np.where(moments.minimum == floor, at_min, 0) / mass
        ceiling_share = np.where(moments.maximum == ceiling, at_max, 0) / mass
    rows = []
    for t, label in enumerate(wave_labels):
        has = n[t] > 0
        rows.append(WaveRow(
            wave=label, n=int(n[t]), mean=float(moments.mean[t]) if has else np.nan,
            sd=float(sd[t]), min=float(moments.minimum[t]) if has else np.nan,
            max=float(moments.maximum[t]) if has else np.nan, skewness=float(skew[t]),
            floor_share=float(floor_share[t]), ceiling_share=float(ceiling_share[t]),
            distinct=int(len(moments.distinct[t]))))
    return WaveProfile(rows=tuple(rows), floor=floor, ceiling=ceiling)


# ------------------------------------------------------------------ distribution caveats

@dataclass(frozen=True)
class WaveShape(Result):
    wave: str
    n: int
    skewness: float           # g1 = m3 / m2^(3/2)
    excess_kurtosis: float    # g2 = m4 / m2^2 - 3
    largest_z: float          # Grubbs' G: largest |value - mean| / SD (divisor n - 1)
    grubbs_critical: float    # G beyond which one unit is an outlier at outlier_alpha


@dataclass(frozen=True)
class DistributionCheck(Result):
    """Waves whose scores are strongly skewed, heavy-tailed or hold an outlying unit,
    with the thresholds used and a caveat sentence for each kind found."""

    waves: tuple[WaveShape, ...]
    skewed: tuple[str, ...]
    heavy_tailed: tuple[str, ...]
    outlying: tuple[str, ...]
    thresholds: dict
    caveats: tuple[str, ...]


def grubbs_critical(n: np.ndarray, alpha: float) -> np.ndarray:
    """Two-sided critical value of Grubbs' statistic G = max |x - mean| / s for one
    outlier among n normal values: (n - 1) / sqrt(n) * sqrt(t^2 / (n - 2 + t^2)), t the
    upper alpha / (2 n) quantile of Student's t on n - 2 degrees of freedom (Grubbs
    1969, Technometrics 11, 1-21, eq. for the two-sided test)."""
    from paneldiag import distributions as dist
    n = np.asarray(n, dtype=float)
    out = np.full(n.shape, np.nan)
    ok = n >= 3
    t = np.asarray(dist.t_ppf(1 - alpha / (2 * n[ok]), n[ok] - 2), dtype=float)
    out[ok] = (n[ok] - 1) / np.sqrt(n[ok]) * np.sqrt(t * t / (n[ok] - 2 + t * t))
    return out


CAVEATS = {
    "skew": "Strong skew at wave(s) {waves} (skewness up to {top.skewness:.2f}; above {skew:g} "
            "in size): Pearson correlations and the normal-theory structure fits understate "
            "the dependence between skewed waves and the kurtosis scaling of the tests does "
            "not correct it, so shares and reliabilities may read low; a transformation of "
            "the scores, or the ordinal screen (--ordinal), is worth comparing.",
    "tails": "Heavy tails at wave(s) {waves} (excess kurtosis up to "
             "{top.excess_kurtosis:.1f}; above {kurtosis:g}): the tests and BIC are scaled "
             "for kurtosis, but the estimates and their normal-theory intervals rest on a "
             "few extreme scores.",
    "outlier": "An outlying unit at wave(s) {waves} (a score {top.largest_z:.1f} SDs from the "
               "wave mean at {top.wave}; Grubbs' test at {alpha:g}): one unit moves that "
               "wave's variance and correlations and so the verdicts; check the value and "
               "rerun without the unit to see whether the verdicts hold.",
}


def _waves_text(waves) -> str:
    return ", ".join(waves) if len(waves) <= 4 else f"{', '.join(waves[:3])} and {len(waves) - 3} more"


def distribution_check(moments: WaveMoments, wave_labels: tuple[str, ...],
                       max_abs_skew: float, max_excess_kurtosis: float,
                       outlier_alpha: float) -> DistributionCheck:
    """Strong skew, heavy tails and an outlying unit, wave by wave, from the one-pass
    moments (no second pass over the data).

    Skewness g1 = m3 / m2^(3/2) and excess kurtosis g2 = m4 / m2^2 - 3 are the moment
    coefficients with divisor n (Joanes and Gill 1998, J. Royal Statistical Society D,
    47, 183-189; scipy.stats.skew and scipy.stats.kurtosis by default). A wave is
    strongly skewed when |g1| exceeds ``max_abs_skew`` and heavy-tailed when g2
    exceeds ``max_excess_kurtosis`` (Curran, West and Finch 1996, Psychological
    Methods 1, 16-29: skew 2 and kurtosis 7 mark the non-normality at which
    normal-theory tests of covariance structures start to fail). A wave holds an
    outlying unit when Grubbs' statistic, the largest distance of a value from the
    wave mean in SDs, exceeds its critical value at ``outlier_alpha`` for the wave's n
    (Grubbs 1969, Technometrics 11, 1-21); a second outlier can mask the first, so the
    check finds the clearest case, not every one.
    """
    n, mass = moments.n, moments.mass   # weight sums with weights (see wave_profile)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = moments.m2 / mass
        skew = np.where(moments.m2 > 0, (moments.m3 / mass) / var ** 1.5, np.nan)
        kurt = np.where(moments.m2 > 0, (moments.m4 / mass) / var ** 2 - 3.0, np.nan)
        sd = np.where((n > 1) & (mass > 1), np.sqrt(moments.m2 / (mass - 1)), np.nan)
        mean = moments.mean
        far = np.maximum(moments.maximum - mean, mean - moments.minimum)
        g = np.where((sd > 0) & (n > 2), far / sd, np.nan)
    crit = grubbs_critical(n, outlier_alpha)
    rows = tuple(WaveShape(label, int(n[t]), float(skew[t]), float(kurt[t]), float(g[t]),
                           float(crit[t])) for t, label in enumerate(wave_labels))
    skewed = tuple(r.wave for r in rows if abs(r.skewness) > max_abs_skew)
    heavy = tuple(r.wave for r in rows if r.excess_kurtosis > max_excess_kurtosis)
    outlying = tuple(r.wave for r in rows if r.largest_z > r.grubbs_critical)
    found = {"skew": skewed, "tails": heavy, "outlier": outlying}
    sizes = {"skew": lambda r: abs(r.skewness), "tails": lambda r: r.excess_kurtosis,
             "outlier": lambda r: r.largest_z}
    caveats = []
    for kind, waves in found.items():   # a loop over the three kinds of departure
        if waves:
            top = max((r for r in rows if r.wave in waves), key=sizes[kind])
            caveats.append(CAVEATS[kind].format(
                waves=_waves_text(waves), top=top, skew=max_abs_skew,
                kurtosis=max_excess_kurtosis, alpha=outlier_alpha))
    return DistributionCheck(rows, skewed, heavy, outlying,
                             {"max_abs_skew": max_abs_skew,
                              "max_excess_kurtosis": max_excess_kurtosis,
                              "outlier_alpha": outlier_alpha}, tuple(caveats))


def distribution_section(ctx) -> DistributionCheck:
    from paneldiag.rules.thresholds import default_thresholds
    th = ctx.options.rules or default_thresholds()
    return distribution_check(ctx.summary(WaveMoments), ctx.panel.wave_labels,
                              th["max_abs_skew"], th["max_excess_kurtosis"],
                              th["outlier_alpha"])
