"""Panels from processes whose truth is known: for the demo data and for validation.

One generator covers the families paneldiag screens for, by switching parts on:

    y_it = mean_t + trait_i + slope_i * (t - t_0) + curve_i * (t - t_0)^2 + a_it + e_it

with a_it a first-order autoregression in continuous time (carry-over ``rho`` per unit
of time, so unequal spacing is honoured; stationary unless its variance is set to rise),
and e_it occasion-specific noise (measurement error) whose variance is set by the
reliability of the measure (the same at every wave unless set to rise).

Departures from the textbook assumptions (``DEPARTURES``) change one thing each and keep
the truth (the family) and, where a covariance exists, ``population_covariance`` right:
error variances that differ by wave, a carry-over variance that rises over time, unit-
specific curvature, skewed or heavy-tailed draws, and ordinal scores.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np


@dataclass(frozen=True)
class Draws:
    """The distribution of a part's random draws, always rescaled to mean 0 and the
    part's variance: normal, a centred chi-square with ``df`` degrees of freedom (right-
    skewed: skewness sqrt(8 / df)) or Student t with ``df`` > 4 degrees of freedom (heavy
    tails: kurtosis 3 + 6 / (df - 4))."""

    kind: str = "normal"   # "normal", "chisquare" or "t"
    df: float = 0.0

    def sample(self, rng: np.random.Generator, sd, size) -> np.ndarray:
        """Draws of standard deviation ``sd`` (a number, or one per column)."""
        if self.kind == "normal":
            return rng.normal(0.0, sd, size)
        if self.kind == "t":
            return rng.standard_t(self.df, size) * (np.sqrt((self.df - 2.0) / self.df) * sd)
        if self.kind == "chisquare":
            return (rng.chisquare(self.df, size) - self.df) * (sd / np.sqrt(2.0 * self.df))
        raise ValueError(f"unknown kind of draws {self.kind!r}")


NORMAL = Draws()


@dataclass(frozen=True)
class Process:
    """Parts of the process; variances refer to the true score (before noise)."""

    trait_var: float = 0.0        # stable unit effect
    ar_var: float = 0.0           # stationary variance of the carry-over part
    rho: float = 0.0              # carry-over per unit of time
    slope_mean: float = 0.0
    slope_var: float = 0.0
    curve_mean: float = 0.0
    curve_var: float = 0.0
    mean_shape: tuple[float, ...] | None = None  # free-shape mean per wave (added)
    shape_loading_var: float = 0.0               # unit-specific amount of the shape
    occasion_var: float = 0.0     # occasion noise that is part of the true score
    reliability: float = 1.0      # share of observed variance that is not error, at wave 1
    intercept: float = 0.0
    error_sd_ratio: float = 1.0   # error SD at the last wave / at the first (geometric path)
    ar_var_ratio: float = 1.0     # carry-over variance at the last wave / at the first
    trait_draws: Draws = NORMAL   # the stable unit effect (trait, random intercept)
    shock_draws: Draws = NORMAL   # occasion noise and the carry-over's start and innovations
    error_draws: Draws = NORMAL   # measurement error


def _span_share(times: np.ndarray) -> np.ndarray:
    """(t - t_0) / (t_last - t_0): 0 at the first wave, 1 at the last."""
    dt = times - times[0]
    span = float(dt[-1]) if len(dt) > 1 else 0.0
    return dt / span if span > 0 else np.zeros_like(dt)


def error_sds(process: Process, times, error_var: float) -> np.ndarray | float:
    """Measurement-error SD per wave: sqrt(error_var) at the first wave, rising
    geometrically to ``error_sd_ratio`` times that at the last (a number if constant)."""
    sd = np.sqrt(error_var)
    if process.error_sd_ratio == 1.0:
        return sd
    return sd * process.error_sd_ratio ** _span_share(np.asarray(times, dtype=float))


def carry_over_variances(process: Process, times) -> np.ndarray:
    """Carry-over variance per wave: ``ar_var`` at the first wave, rising (or falling)
    geometrically to ``ar_var_ratio`` times that at the last."""
    times = np.asarray(times, dtype=float)
    return process.ar_var * process.ar_var_ratio ** _span_share(times)


def simulate(process: Process, n_units: int, times, rng: np.random.Generator) -> np.ndarray:
    """An (n_units, n_waves) matrix of observed scores from ``process``."""
    times = np.asarray(times, dtype=float)
    dt = times - times[0]
    n_waves = len(times)
    y = np.full((n_units, n_waves), process.intercept)
    if process.trait_var:
        y += process.trait_draws.sample(rng, np.sqrt(process.trait_var), (n_units, 1))
    if process.slope_mean or process.slope_var:
        slope = process.slope_mean + rng.normal(0.0, np.sqrt(process.slope_var), (n_units, 1))
        y += slope * dt
    if process.curve_mean or process.curve_var:
        curve = process.curve_mean + rng.normal(0.0, np.sqrt(process.curve_var), (n_units, 1))
        y += curve * dt ** 2
    if process.mean_shape is not None:
        amount = 1.0 + rng.normal(0.0, np.sqrt(process.shape_loading_var), (n_units, 1))
        y += amount * np.asarray(process.mean_shape, dtype=float)
    if process.ar_var:
        y += carry_over(n_units, times, process.rho, process.ar_var, rng,
                        variance_ratio=process.ar_var_ratio, draws=process.shock_draws)
    if process.occasion_var:
        y += process.shock_draws.sample(rng, np.sqrt(process.occasion_var), (n_units, n_waves))
    if process.reliability < 1.0:
        true_var = float(np.var(y[:, 0])) if n_units > 1 else 1.0
        error_var = true_var * (1.0 - process.reliability) / process.reliability
        y += process.error_draws.sample(rng, error_sds(process, times, error_var),
                                        (n_units, n_waves))
    return y


def carry_over(n_units: int, times, rho: float, variance: float,
               rng: np.random.Generator, *, variance_ratio: float = 1.0,
               draws: Draws = NORMAL) -> np.ndarray:
    """AR(1) in continuous time, corr(a_s, a_t) = rho ** |t - s| when stationary.

    With ``variance_ratio`` != 1 the variance runs geometrically from ``variance`` at the
    first wave to ``variance_ratio`` times that at the last (a non-stationary simplex): the
    innovation at wave t has variance v_t - keep^2 v_(t-1), and cov(a_s, a_t) =
    rho ** (t - s) v_s for s <= t.
    """
    times = np.asarray(times, dtype=float)
    v = variance * variance_ratio ** _span_share(times)
    out = np.empty((n_units, len(times)))
    out[:, 0] = draws.sample(rng, np.sqrt(v[0]), n_units)
    for t in range(1, len(times)):  # a loop over waves, not units
        keep = rho ** (times[t] - times[t - 1])
        innovation = (variance * (1 - keep ** 2) if variance_ratio == 1.0
                      else v[t] - keep ** 2 * v[t - 1])
        if innovation < 0:
            raise ValueError("the carry-over variance falls faster than the carry-over allows")
        out[:, t] = keep * out[:, t - 1] + draws.sample(rng, np.sqrt(innovation), n_units)
    return out


def population_covariance(process: Process, times) -> np.ndarray:
    """The T x T covariance of the observed scores that ``simulate`` draws from.

    The parts are independent, so their covariances add: trait_var 11' + slope_var
    d d' + curve_var d2 d2' + shape_loading_var m m' + v_min(s,t) rho^|t_s - t_t| +
    occasion_var I + diag(error variances), with d = t - t_0, d2 = d^2, m the free-shape
    mean, v_t the carry-over variance of wave t (``carry_over_variances``; constant
    ``ar_var`` when stationary) and the first wave's error variance (1 - reliability) /
    reliability times the true-score variance at the first wave (``simulate`` scales the
    error by the sample variance of the first wave, whose expectation, up to the factor
    (n - 1) / n, this is), rising by ``error_sd_ratio`` ** 2 to the last wave. The kind
    of draws (``Draws``) does not change it: every kind is rescaled to the part's variance.
    """
    times = np.asarray(times, dtype=float)
    dt = times - times[0]
    n_waves = len(times)
    sigma = np.zeros((n_waves, n_waves))
    sigma += process.trait_var
    sigma += process.slope_var * np.outer(dt, dt)
    sigma += process.curve_var * np.outer(dt ** 2, dt ** 2)
    if process.mean_shape is not None:
        shape = np.asarray(process.mean_shape, dtype=float)
        sigma += process.shape_loading_var * np.outer(shape, shape)
    if process.ar_var:
        earlier = np.minimum.outer(np.arange(n_waves), np.arange(n_waves))
        sigma += (carry_over_variances(process, times)[earlier]
                  * process.rho ** np.abs(dt[:, None] - dt[None, :]))
    sigma += process.occasion_var * np.eye(n_waves)
    if process.reliability < 1.0:
        error_var = sigma[0, 0] * (1.0 - process.reliability) / process.reliability
        sigma += error_var * np.diag(process.error_sd_ratio ** (2 * _span_share(times)))
    return sigma


def population_mean(process: Process, times) -> np.ndarray:
    """The wave means of the observed scores that ``simulate`` draws from."""
    times = np.asarray(times, dtype=float)
    dt = times - times[0]
    mean = process.intercept + process.slope_mean * dt + process.curve_mean * dt ** 2
    if process.mean_shape is not None:
        mean = mean + np.asarray(process.mean_shape, dtype=float)
    return mean


def dropout_after(scores: np.ndarray, rng: np.random.Generator, base_rate: float,
                  log_odds_per_sd: float = 0.0) -> np.ndarray:
    """Monotone dropout: True where a unit has left. The hazard of leaving after wave t
    has logit(base_rate) + log_odds_per_sd * (standardised score at t)."""
    n_units, n_waves = scores.shape
    gone = np.zeros((n_units, n_waves), dtype=bool)
    for t in range(1, n_waves):
        z = (scores[:, t - 1] - np.nanmean(scores[:, t - 1])) / np.nanstd(scores[:, t - 1])
        logit = np.log(base_rate / (1 - base_rate)) + log_odds_per_sd * np.nan_to_num(z)
        leave = rng.random(n_units) < 1.0 / (1.0 + np.exp(-logit))
        gone[:, t] = gone[:, t - 1] | leave
    return gone


# ----------------------------------------------------------------- family processes
# The processes the process-family verdicts are validated on (see docs/rules.md and
# docs/validation.md). Waves are at times 0, 1, ..., T - 1; ``u = t / (T - 1)`` runs from
# 0 to 1 over the panel, so growth effects are stated over the panel's whole span and
# mean the same thing at 4, 6 or 10 waves. Variances are of the true score; measurement
# error comes on top through ``reliability``.

FAMILIES = ("occasion_noise", "stable_trait", "autoregressive", "trait_autoregressive",
            "linear_growth", "quadratic_growth", "free_shape_growth", "growth_autoregressive")

SLOPE_SD_OVER_SPAN = 0.8      # unit slopes spread units apart by 0.8 SD over the span
MEAN_CHANGE_OVER_SPAN = 1.0   # the mean rises by 1 SD (of the intercept) over the span
CURVE_OVER_SPAN = -1.5        # quadratic mean: 2.5 u - 1.5 u^2 (a rise that levels off)
SHAPE_AMOUNT_SD = 0.5         # free shape: unit amount 1 +- 0.5 of a 1.5 SD S-curve
SHAPE_SIZE = 1.5


def s_curve(times) -> np.ndarray:
    """The free-shape growth curve: a logistic rise over the span, 0 at the first wave
    and 1 at the last (not a polynomial: its remainder after a quadratic is large)."""
    times = np.asarray(times, dtype=float)
    u = (times - times[0]) / (times[-1] - times[0])
    lam = 1.0 / (1.0 + np.exp(-12.0 * (u - 0.5)))
    return (lam - lam[0]) / (lam[-1] - lam[0])


def family_process(family: str, times, reliability: float = 1.0,
                   departure: str = "none") -> Process:
    """The generating process of ``family`` at wave times ``times`` (equally spaced),
    with the departure ``departure`` from the textbook assumptions (``apply_departure``).

    occasion_noise         iid noise (variance 1) around the wave means (flat)
    stable_trait           trait (0.5) + occasion noise (0.5)
    autoregressive         carry-over only: AR(1), rho 0.7 per wave, variance 1
    trait_autoregressive   trait (0.5) + AR(1) (rho 0.5, variance 0.5)
    linear_growth          random intercept (1) + random slope (SD 0.8 over the span,
                           mean 1.0 over the span) + occasion noise (0.5)
    quadratic_growth       linear growth + a mean curvature: mean 2.5 u - 1.5 u^2
    free_shape_growth      random intercept (1) + a unit-specific amount (1 +- 0.5) of a
                           common S-shaped curve of size 1.5 + occasion noise (0.5)
    growth_autoregressive  linear growth with AR(1) deviations (rho 0.6, variance 0.5)
                           in place of occasion noise
    """
    return apply_departure(_textbook_process(family, times, reliability), family,
                           departure, times)


def _textbook_process(family: str, times, reliability: float) -> Process:
    times = np.asarray(times, dtype=float)
    span = float(times[-1] - times[0])
    growth = dict(trait_var=1.0, slope_mean=MEAN_CHANGE_OVER_SPAN / span,
                  slope_var=(SLOPE_SD_OVER_SPAN / span) ** 2)
    if family == "occasion_noise":
        return Process(occasion_var=1.0, reliability=reliability)
    if family == "stable_trait":
        return Process(trait_var=0.5, occasion_var=0.5, reliability=reliability)
    if family == "autoregressive":
        return Process(ar_var=1.0, rho=0.7, reliability=reliability)
    if family == "trait_autoregressive":
        return Process(trait_var=0.5, ar_var=0.5, rho=0.5, reliability=reliability)
    if family == "linear_growth":
        return Process(**growth, occasion_var=0.5, reliability=reliability)
    if family == "quadratic_growth":
        growth["slope_mean"] = 2.5 / span
        return Process(**growth, curve_mean=CURVE_OVER_SPAN / span ** 2, occasion_var=0.5,
                       reliability=reliability)
    if family == "free_shape_growth":
        return Process(trait_var=1.0, mean_shape=tuple(SHAPE_SIZE * s_curve(times)),
                       shape_loading_var=SHAPE_AMOUNT_SD ** 2, occasion_var=0.5,
                       reliability=reliability)
    if family == "growth_autoregressive":
        return Process(**growth, ar_var=0.5, rho=0.6, reliability=reliability)
    raise ValueError(f"unknown family {family!r}")



# ----------------------------------------------------------------- departures
# Each departure breaks one textbook assumption the way real panels do and keeps the
# truth: the family stays the one named, and the process's population covariance
# (where the scores have one) stays what ``population_covariance`` gives.

DEPARTURES = ("none", "wave_error", "rising_variance", "unit_curvature", "skewed",
              "heavy_tails", "ordinal5")
DEPARTURE_FAMILIES = {
    "none": FAMILIES,
    "wave_error": FAMILIES,
    "rising_variance": ("autoregressive", "trait_autoregressive"),
    "unit_curvature": ("quadratic_growth",),
    "skewed": FAMILIES,
    "heavy_tails": FAMILIES,
    "ordinal5": FAMILIES,
}
WAVE_ERROR_SD_RATIO = 3.0           # error SD at the last wave / at the first
WAVE_ERROR_FIRST_RELIABILITY = 0.9  # wave_error on an error-free measure: wave 1's reliability
VARIANCE_RISE = 3.5                 # rising_variance: true-score variance, last / first wave
CURVE_SD_OVER_SPAN = 1.0            # unit_curvature: SD of the curvature (mean -1.5) over the span
SKEW_DF = 2.0                       # skewed: centred chi-square(2), skewness 2
TAIL_DF = 5.0                       # heavy_tails: Student t(5), kurtosis 9
ORDINAL_CUMULATIVE = (0.10, 0.30, 0.60, 0.85)  # ordinal5: cut points, as wave-1 quantiles


def apply_departure(process: Process, family: str, departure: str, times) -> Process:
    """``process`` (of ``family``) with one departure from the textbook assumptions.

    none             the textbook process
    wave_error       measurement-error SD rising geometrically over the waves to 3 times
                     its first-wave value; the first wave's reliability is the process's,
                     or 0.9 if the process is error-free (a measure without error cannot
                     have error that changes)
    rising_variance  (carry-over families) a non-stationary carry-over: its innovation
                     variances grow so the true-score variance at the last wave is 3.5
                     times the first's (a quasi-simplex, not growth: the mean stays flat)
    unit_curvature   (quadratic growth) unit-specific curvature, SD 1.0 over the span
                     around the mean curvature of -1.5
    skewed           the stable part (trait, random intercept) drawn from a centred
                     chi-square with 2 df rescaled to its variance; a process without a
                     stable part (occasion noise, carry-over) has its occasion noise and
                     carry-over draws skewed instead
    heavy_tails      every normal draw of the carry-over (start and innovations), the
                     occasion noise and the measurement error from Student t with 5 df,
                     rescaled to the same variance
    ordinal5         the process unchanged; ``family_values`` cuts its scores into five
                     ordered categories (``ordinal_codes``)

    The family is unchanged by every departure, and ``population_covariance`` of the
    result is the covariance of its scores (for ordinal5: of the latent scores cut into
    categories; the codes themselves have no covariance given here).
    """
    if departure not in DEPARTURE_FAMILIES:
        raise ValueError(f"unknown departure {departure!r}")
    if family not in DEPARTURE_FAMILIES[departure]:
        raise ValueError(f"departure {departure!r} does not apply to family {family!r}")
    times = np.asarray(times, dtype=float)
    if departure in ("none", "ordinal5"):
        return process
    if departure == "wave_error":
        reliability = process.reliability if process.reliability < 1.0 \
            else WAVE_ERROR_FIRST_RELIABILITY
        return replace(process, reliability=reliability, error_sd_ratio=WAVE_ERROR_SD_RATIO)
    if departure == "rising_variance":
        first = process.trait_var + process.ar_var + process.occasion_var
        last_ar = VARIANCE_RISE * first - (first - process.ar_var)
        return replace(process, ar_var_ratio=last_ar / process.ar_var)
    if departure == "unit_curvature":
        span = float(times[-1] - times[0])
        return replace(process, curve_var=(CURVE_SD_OVER_SPAN / span ** 2) ** 2)
    if departure == "skewed":
        skewed = Draws("chisquare", SKEW_DF)
        if process.trait_var:
            return replace(process, trait_draws=skewed)
        return replace(process, shock_draws=skewed)
    heavy = Draws("t", TAIL_DF)  # heavy_tails
    return replace(process, shock_draws=heavy, error_draws=heavy)


def ordinal_codes(scores: np.ndarray, process: Process, times) -> np.ndarray:
    """Scores cut into five ordered categories coded 1..5 (float; NaN stays NaN).

    The cut points are the quantiles ``ORDINAL_CUMULATIVE`` of the first wave's
    population distribution (normal, with the mean and variance of ``population_mean``
    and ``population_covariance``), the same at every wave, as a fixed rating scale's are:
    a change of the mean over time shows as a shift between categories.
    """
    from scipy.special import ndtri
    times = np.asarray(times, dtype=float)
    centre = population_mean(process, times)[0]
    spread = np.sqrt(population_covariance(process, times)[0, 0])
    cuts = centre + spread * ndtri(np.asarray(ORDINAL_CUMULATIVE))
    codes = 1.0 + np.searchsorted(cuts, scores, side="right")
    return np.where(np.isnan(scores), np.nan, codes)


DROPOUT_HAZARD = 0.08         # per wave, after the first
DROPOUT_LOG_ODDS_PER_SD = 0.6  # 'dependent': higher previous scores leave more often


def family_values(family: str, n_units: int, n_waves: int, reliability: float,
                  dropout: str, rng: np.random.Generator,
                  departure: str = "none") -> np.ndarray:
    """Observed (n_units, n_waves) scores of ``family`` with NaN after dropout.

    ``departure``: one of ``DEPARTURES`` (see ``apply_departure``); with 'ordinal5' the
    scores are the category codes 1..5 (``ordinal_codes``), and dropout depends on them.

    ``dropout``: 'none'; 'mcar' (monotone, hazard 0.08 a wave, unrelated to anything);
    'dependent' (monotone, the log-odds of leaving rise by 0.6 per SD of the score
    observed at the previous wave: missing at random given the observed scores).
    """
    times = np.arange(n_waves, dtype=float)
    process = family_process(family, times, reliability, departure)
    y = simulate(process, n_units, times, rng)
    if departure == "ordinal5":
        y = ordinal_codes(y, process, times)
    if dropout == "none":
        return y
    if dropout not in ("mcar", "dependent"):
        raise ValueError(f"unknown dropout {dropout!r}")
    slope = DROPOUT_LOG_ODDS_PER_SD if dropout == "dependent" else 0.0
    gone = dropout_after(y, rng, DROPOUT_HAZARD, slope)
    return np.where(gone, np.nan, y)
