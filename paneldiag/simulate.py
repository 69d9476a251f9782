"""Panels from processes whose truth is known: for the demo data and for validation.

One generator covers the families paneldiag screens for, by switching parts on:

    y_it = mean_t + trait_i + slope_i * (t - t_0) + curve_i * (t - t_0)^2 + a_it + e_it

with a_it a stationary first-order autoregression in continuous time (carry-over
``rho`` per unit of time, so unequal spacing is honoured), and e_it occasion-specific
noise (measurement error) whose variance is set by the reliability of the measure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


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


def simulate(process: Process, n_units: int, times, rng: np.random.Generator) -> np.ndarray:
    """An (n_units, n_waves) matrix of observed scores from ``process``."""
    times = np.asarray(times, dtype=float)
    dt = times - times[0]
    n_waves = len(times)
    y = np.full((n_units, n_waves), process.intercept)
    if process.trait_var:
        y += rng.normal(0.0, np.sqrt(process.trait_var), (n_units, 1))
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
        y += carry_over(n_units, times, process.rho, process.ar_var, rng)
    if process.occasion_var:
        y += rng.normal(0.0, np.sqrt(process.occasion_var), (n_units, n_waves))
    if process.reliability < 1.0:
        true_var = float(np.var(y[:, 0])) if n_units > 1 else 1.0
        error_var = true_var * (1.0 - process.reliability) / process.reliability
        y += rng.normal(0.0, np.sqrt(error_var), (n_units, n_waves))
    return y


def carry_over(n_units: int, times, rho: float, variance: float,
               rng: np.random.Generator) -> np.ndarray:
    """Stationary AR(1) in continuous time: corr(a_s, a_t) = rho ** |t - s|."""
    times = np.asarray(times, dtype=float)
    out = np.empty((n_units, len(times)))
    out[:, 0] = rng.normal(0.0, np.sqrt(variance), n_units)
    for t in range(1, len(times)):  # a loop over waves, not units
        keep = rho ** (times[t] - times[t - 1])
        out[:, t] = keep * out[:, t - 1] + rng.normal(0.0, np.sqrt(variance * (1 - keep ** 2)),
                                                      n_units)
    return out


def population_covariance(process: Process, times) -> np.ndarray:
    """The T x T covariance of the observed scores that ``simulate`` draws from.

    The parts are independent, so their covariances add: trait_var 11' + slope_var
    d d' + curve_var d2 d2' + shape_loading_var m m' + ar_var rho^|t_s - t_t| +
    (occasion_var + error_var) I, with d = t - t_0, d2 = d^2, m the free-shape mean and
    error_var = (1 - reliability) / reliability times the true-score variance at the first
    wave (``simulate`` scales the error by the sample variance of the first wave, whose
    expectation, up to the factor (n - 1) / n, this is).
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
        sigma += process.ar_var * process.rho ** np.abs(dt[:, None] - dt[None, :])
    sigma += process.occasion_var * np.eye(n_waves)
    if process.reliability < 1.0:
        error_var = sigma[0, 0] * (1.0 - process.reliability) / process.reliability
        sigma += error_var * np.eye(n_waves)
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


def family_process(family: str, times, reliability: float = 1.0) -> Process:
    """The generating process of ``family`` at wave times ``times`` (equally spaced).

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


DROPOUT_HAZARD = 0.08         # per wave, after the first
DROPOUT_LOG_ODDS_PER_SD = 0.6  # 'dependent': higher previous scores leave more often


def family_values(family: str, n_units: int, n_waves: int, reliability: float,
                  dropout: str, rng: np.random.Generator) -> np.ndarray:
    """Observed (n_units, n_waves) scores of ``family`` with NaN after dropout.

    ``dropout``: 'none'; 'mcar' (monotone, hazard 0.08 a wave, unrelated to anything);
    'dependent' (monotone, the log-odds of leaving rise by 0.6 per SD of the score
    observed at the previous wave: missing at random given the observed scores).
    """
    times = np.arange(n_waves, dtype=float)
    y = simulate(family_process(family, times, reliability), n_units, times, rng)
    if dropout == "none":
        return y
    if dropout not in ("mcar", "dependent"):
        raise ValueError(f"unknown dropout {dropout!r}")
    slope = DROPOUT_LOG_ODDS_PER_SD if dropout == "dependent" else 0.0
    gone = dropout_after(y, rng, DROPOUT_HAZARD, slope)
    return np.where(gone, np.nan, y)
