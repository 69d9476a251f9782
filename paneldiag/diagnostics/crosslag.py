"""Lagged correlations averaged by lag: within a measure and across a pair of measures.

For two measures X and Y observed at waves 1..T, the cross-lagged correlations at lag k
are corr(X_s, Y_{s+k}) ("X leads") and corr(Y_s, X_{s+k}) ("Y leads") over the wave pairs
s = 1..T-k, each on the units observed at both occasions (pairwise-complete). They are
averaged by lag on the Fisher z scale with weights n - 3, and their uncertainty comes
from the delete-a-group jackknife over the replicate groups that every summary keeps.
The same averaging with X = Y gives the lag-k autocorrelation of one measure.

Everything is a function of ``PairwiseMoments`` of the stacked matrix [X | Y], so the
cross-lag screen inherits the one-pass, mergeable design of the summaries.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag import distributions as dist
from paneldiag.panel import Panel
from paneldiag.results import Result
from paneldiag.summaries import CHUNK_UNITS, N_REPLICATES, summarise
from paneldiag.summaries.jackknife import jackknife_se
from paneldiag.summaries.pairwise import PairwiseMoments

LEVEL = 0.95


def averaged_correlation(r: np.ndarray, n: np.ndarray, pairs: list[tuple[int, int]]):
    """Fisher-z average of the correlations r[s, t] over ``pairs``, weighted by n - 3.

    Returns (z_mean, weight_total, n_total). Pairs with n <= 3 or an undefined r are
    left out. The weighting is the inverse sampling variance of z, 1 / (n - 3)
    (Fisher 1921, Metron 1:3-32; the fixed-effect average of Hedges and Olkin 1985,
    Statistical Methods for Meta-Analysis, ch. 11).
    """
    zs, ws, ns = [], [], 0
    for s, t in pairs:
        if n[s, t] > 3 and np.isfinite(r[s, t]) and abs(r[s, t]) < 1:
            zs.append(np.arctanh(r[s, t]))
            ws.append(n[s, t] - 3.0)
            ns += int(n[s, t])
    if not ws:
        return np.nan, 0.0, ns
    w = np.asarray(ws)
    return float(np.dot(w, zs) / w.sum()), float(w.sum()), ns


@dataclass(frozen=True)
class LaggedCorrelation(Result):
    """One averaged correlation with its jackknife CI (on the z scale, back-transformed)."""

    r: float
    ci_low: float
    ci_high: float
    z: float
    z_se: float
    n_pairs: int
    n_wave_pairs: int


@dataclass(frozen=True)
class CrossLagRow(Result):
    lag: int
    time_distance: float
    x_leads: LaggedCorrelation      # corr(X_s, Y_{s+lag})
    y_leads: LaggedCorrelation      # corr(Y_s, X_{s+lag})
    z_difference: float             # z(x_leads) - z(y_leads)
    z_difference_ci_low: float
    z_difference_ci_high: float


@dataclass(frozen=True)
class CrossLag(Result):
    x: str
    y: str
    synchronous: LaggedCorrelation  # corr(X_s, Y_s) averaged over waves
    lags: tuple[CrossLagRow, ...]
    method: str


def _lagged(pooled_r, pooled_n, reps_r, reps_n, pairs, min_cell) -> LaggedCorrelation:
    """Averaged correlation over ``pairs``, with the jackknife over replicate summaries."""
    z, _, n_total = averaged_correlation(pooled_r, pooled_n, pairs)
    used = [p for p in pairs if pooled_n[p] > 3]
    if not np.isfinite(z) or n_total < min_cell:
        return LaggedCorrelation(np.nan, np.nan, np.nan, np.nan, np.nan,
                                 n_total if n_total >= min_cell else 0, len(used))
    reps = np.array([averaged_correlation(rr, nn, pairs)[0] for rr, nn in zip(reps_r, reps_n)])
    se = float(jackknife_se(z, reps))
    q = dist.t_ppf(0.5 + LEVEL / 2, len(reps) - 1)
    return LaggedCorrelation(float(np.tanh(z)), float(np.tanh(z - q * se)),
                             float(np.tanh(z + q * se)), z, se, n_total, len(used))


def _replicates(moments: PairwiseMoments):
    reps = list(moments.leave_one_out())
    return [p.correlation() for p in reps], [p.pair_counts() for p in reps]


def lag_correlations(moments: PairwiseMoments, times: np.ndarray, lag: int,
                     min_cell: int = 5) -> LaggedCorrelation:
    """Lag-``lag`` autocorrelation of one measure, Fisher-z averaged over the wave pairs
    (s, s + lag) with weights n - 3 (Fisher 1921; Hedges and Olkin 1985), and a
    delete-a-group jackknife CI over replicate groups (Kott 2001, J. Official Statistics
    17:521-526). ``moments`` are the measure's ``PairwiseMoments``.
    """
    t = len(times)
    pairs = [(s, s + lag) for s in range(t - lag)]
    reps_r, reps_n = _replicates(moments)
    return _lagged(moments.correlation(), moments.pair_counts(), reps_r, reps_n, pairs,
                   min_cell)


def stacked_moments(panel: Panel, x: str, y: str, n_replicates: int = N_REPLICATES,
                    chunk_units: int = CHUNK_UNITS) -> PairwiseMoments:
    """``PairwiseMoments`` of the (n_units, 2T) matrix [X | Y], built in one pass."""
    joint = Panel(unit_ids=panel.unit_ids, wave_labels=panel.wave_labels * 2,
                  wave_times=np.concatenate([panel.wave_times, panel.wave_times]),
                  values={"joint": np.hstack([panel.values[x], panel.values[y]])},
                  weights=panel.weights)
    return summarise(joint, "joint", [PairwiseMoments], chunk_units=chunk_units,
                     n_replicates=n_replicates)[PairwiseMoments]


def cross_lag(moments: PairwiseMoments, times: np.ndarray, x: str, y: str,
              min_cell: int = 5) -> CrossLag:
    """Cross-lagged correlations of X and Y averaged by lag, both directions.

    At lag k, ``x_leads`` averages corr(X_s, Y_{s+k}) and ``y_leads`` averages
    corr(Y_s, X_{s+k}) over s, each Fisher-z transformed and weighted by n - 3 (Fisher
    1921, Metron 1:3-32; Hedges and Olkin 1985, Statistical Methods for Meta-Analysis).
    Confidence intervals and the CI of the difference of the two z averages come from
    the delete-a-group jackknife over replicate groups (Quenouille 1956, Biometrika
    43:353-360; Kott 2001, J. Official Statistics 17:521-526), which accounts for the
    same units entering several wave pairs. Comparing the two directions is the
    cross-lagged panel correlation screen (Campbell 1963; Kenny 1975, Psychological
    Bulletin 82:887-903); a difference is not evidence of causal order (Rogosa 1980,
    Psychological Bulletin 88:245-258). Pairs with fewer than ``min_cell`` units in
    all are not reported (disclosure control). ``times`` are the wave times; the
    time distance of a lag is the mean time gap of its wave pairs.
    """
    t = len(times)
    r, n = moments.correlation(), moments.pair_counts()
    reps_r, reps_n = _replicates(moments)
    q = dist.t_ppf(0.5 + LEVEL / 2, len(reps_r) - 1)
    synchronous = _lagged(r, n, reps_r, reps_n, [(s, t + s) for s in range(t)], min_cell)
    rows = []
    for lag in range(1, t):
        x_pairs = [(s, t + s + lag) for s in range(t - lag)]
        y_pairs = [(t + s, s + lag) for s in range(t - lag)]
        xl = _lagged(r, n, reps_r, reps_n, x_pairs, min_cell)
        yl = _lagged(r, n, reps_r, reps_n, y_pairs, min_cell)
        diff = xl.z - yl.z
        if np.isfinite(diff):
            reps = np.array([averaged_correlation(rr, nn, x_pairs)[0]
                             - averaged_correlation(rr, nn, y_pairs)[0]
                             for rr, nn in zip(reps_r, reps_n)])
            se = float(jackknife_se(diff, reps))
            lo, hi = diff - q * se, diff + q * se
        else:
            lo = hi = np.nan
        gaps = [times[s + lag] - times[s] for s in range(t - lag)]
        rows.append(CrossLagRow(lag, float(np.mean(gaps)), xl, yl, float(diff), float(lo),
                                float(hi)))
    return CrossLag(x, y, synchronous, tuple(rows),
                    method="Fisher-z average weighted by n - 3; delete-a-group jackknife "
                           f"CI ({int(LEVEL * 100)}%) over replicate groups")


def cross_lag_screen(panel: Panel, min_cell: int = 5, n_replicates: int = N_REPLICATES,
                     chunk_units: int = CHUNK_UNITS) -> list[CrossLag]:
    """``cross_lag`` for every pair of measures, in the order the measures were named."""
    names = panel.measures
    out = []
    for i, x in enumerate(names):
        for y in names[i + 1:]:
            moments = stacked_moments(panel, x, y, n_replicates, chunk_units)
            out.append(cross_lag(moments, panel.wave_times, x, y, min_cell))
    return out
