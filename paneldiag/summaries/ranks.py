"""Within-wave ranks, and their pairwise moments, for rank (Spearman) correlations.

Ranks are the one quantity of the screen that does not merge: a unit's rank at a wave
depends on every other unit observed at that wave. So each wave is ranked once over
the whole panel (midranks for ties) -- by counting, O(N), when the values are integers,
or decimals with at most three places, in a modest range, otherwise by sorting, O(N log N) per wave and never per pair of
waves -- and the rank matrix then goes through the same chunked, replicate-grouped
pass as the values (``PairwiseMoments``). Pearson correlations of these ranks over the
units seen at both waves are the Spearman correlations; with no missing values they
equal the usual Spearman coefficient exactly. With missing values each unit keeps its
rank among all units seen at that wave rather than being re-ranked within every pair,
which estimates the same population quantity under missing completely at random and
avoids a sort per pair. A distributed run would replace the exact ranks by a
mergeable per-wave quantile sketch.
"""

from __future__ import annotations

import numpy as np
from paneldiag.summaries import Chunk
from paneldiag.summaries.pairwise import PairwiseMoments

COUNTING_SPAN = 1 << 16   # integer values spanning at most this many are ranked by counting
PROBE = 1024              # values tried on each grid before all of them are


def wave_ranks(values: np.ndarray, weights: np.ndarray | None = None) -> np.ndarray:
    """Midranks within each wave among the units observed there; NaN stays NaN. With
    weights, the weighted midrank: the weight of the units below plus half the weight
    of the ties (a unit of integer weight c ranks as c copies of it would, up to a
    shift of 1/2 that leaves rank correlations unchanged)."""
    if weights is not None:
        return _weighted_ranks(values, weights)
    return chunk_ranks(values, rank_tables(values), 0, len(values))


def rank_tables(values: np.ndarray) -> list:
    """Each wave's ranking: (scale, offset, midrank of each grid position) when its
    values lie on a counting grid (``_counting_grid``), else the wave's midranks as a
    column. Grid waves then need no units x waves matrix of ranks (1.6 GB at 10M x 20)."""
    tables = []
    for t in range(values.shape[1]):  # a loop over waves
        column = np.ascontiguousarray(values[:, t])  # one strided read, then contiguous
        seen = ~np.isnan(column)
        observed = column[seen]
        grid = _counting_grid(observed) if observed.size else None
        if grid is not None:
            scale, offset, index = grid
            counts = np.bincount(index)
            below = np.cumsum(counts) - counts
            tables.append((scale, offset, below + (counts + 1) / 2.0))
        else:
            rank = np.full(len(column), np.nan)
            if observed.size:
                rank[seen] = _midranks(observed)
            tables.append(rank)
    return tables


def chunk_ranks(values: np.ndarray, tables: list, start: int, stop: int) -> np.ndarray:
    """The midranks of units start..stop at every wave, from ``rank_tables``."""
    ranks = np.full((stop - start, len(tables)), np.nan)
    for t, table in enumerate(tables):  # a loop over waves
        if isinstance(table, tuple):
            scale, offset, midrank = table
            column = values[start:stop, t]
            seen = ~np.isnan(column)
            ranks[seen, t] = midrank[(np.rint(column[seen] * scale) - offset).astype(np.int64)]
        else:
            ranks[:, t] = table[start:stop]
    return ranks


def _counting_index(observed: np.ndarray) -> np.ndarray | None:
    """The grid positions of ``_counting_grid``, or None."""
    grid = _counting_grid(observed)
    return None if grid is None else grid[2]


def _counting_grid(observed: np.ndarray) -> tuple[float, float, np.ndarray] | None:
    """(scale, offset, 0-based integer positions) of the values on a grid of step
    10^-d (d = 0..3), position = rint(value * scale) - offset, when every value is
    exactly an integer multiple of that step (as values written with at most d
    decimals are, after parsing) and the grid spans fewer than ``COUNTING_SPAN``
    steps; None otherwise. The positions order the values exactly as the values
    themselves (equal values, equal positions), so counting them gives the same
    midranks as sorting."""
    low, high = observed.min(), observed.max()
    if not (np.isfinite(low) and np.isfinite(high)):
        return None
    for decimals in range(4):
        scale = 10.0 ** decimals
        if (high - low) * scale >= COUNTING_SPAN:
            return None
        if max(abs(low), abs(high)) * scale >= 2.0 ** 40:
            return None   # beyond this, distinct grid points could meet in a double
        probe = observed[:PROBE]   # a cheap necessary condition before the full check
        if not np.array_equal(np.rint(probe * scale) / scale, probe):
            continue
        grid = np.multiply(observed, scale)   # in place from here: N-long temporaries
        np.rint(grid, out=grid)
        if np.array_equal(grid / scale, observed):
            offset = np.rint(low * scale)
            grid -= offset
            return scale, offset, grid.astype(np.int64)
    return None


def _midranks(values: np.ndarray) -> np.ndarray:
    """Midranks (1-based, ties averaged) by one argsort; as scipy.stats.rankdata."""
    order = np.argsort(values)
    ordered = values[order]
    new = np.empty(len(values), dtype=bool)
    new[0] = True
    np.not_equal(ordered[1:], ordered[:-1], out=new[1:])
    starts = np.flatnonzero(new)
    counts = np.diff(np.append(starts, len(values)))
    out = np.empty(len(values))
    out[order] = (starts + (counts + 1) / 2.0)[np.cumsum(new) - 1]
    return out


def _weighted_ranks(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    ranks = np.full(values.shape, np.nan)
    for t in range(values.shape[1]):  # a loop over waves
        seen = np.flatnonzero(~np.isnan(values[:, t]))
        if not len(seen):
            continue
        order = seen[np.argsort(values[seen, t], kind="stable")]
        ordered, w = values[order, t], weights[order]
        new = np.r_[True, ordered[1:] != ordered[:-1]]
        tie = np.cumsum(new) - 1
        tie_weight = np.bincount(tie, weights=w)
        below = np.cumsum(tie_weight) - tie_weight
        ranks[order, t] = (below + tie_weight / 2.0)[tie]
    return ranks


def rank_moments(values: np.ndarray, replicate: np.ndarray, times: np.ndarray,
                 n_replicates: int, chunk_units: int,
                 weights: np.ndarray | None = None) -> PairwiseMoments:
    """Pairwise moments of the within-wave ranks, per replicate group, merged over chunks
    (with ``weights``, weighted ranks and weighted moments)."""
    # unweighted: each chunk ranked from the waves' tables; weighted: one matrix
    tables = rank_tables(values) if weights is None else None
    ranks = None if weights is None else _weighted_ranks(values, weights)

    def ranks_of(start: int, stop: int) -> np.ndarray:
        return chunk_ranks(values, tables, start, stop) if ranks is None else ranks[start:stop]

    merged = None
    for start in range(0, len(values), chunk_units):
        stop = min(start + chunk_units, len(values))
        part = PairwiseMoments.from_chunk(Chunk(values=ranks_of(start, stop),
                                                weights=None if weights is None
                                                else weights[start:stop],
                                                replicate=replicate[start:stop], times=times,
                                                n_replicates=n_replicates))
        merged = part if merged is None else merged.merge(part)
    return merged
