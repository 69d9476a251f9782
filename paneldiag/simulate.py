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
