"""Pairwise contingency tables of a measure with few integer categories.

For every pair of waves (s, t) and replicate group g, the counts of units observed at
both waves by category at s and category at t: the summary behind polychoric
correlations. Categories are the consecutive integers ``low .. low + L - 1``; a chunk
whose observed values are not all integers, or span more than ``MAX_LEVELS`` integers,
gives no tables (and says why), so continuous measures cost one cheap check. Merging
widens the category range as needed and adds the counts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.summaries.jackknife import occupied_groups

MAX_LEVELS = 15   # widest integer range tabulated (a 0-10 rating scale fits)


@dataclass(frozen=True)
class PairwiseTables:
    """``counts[g, s, t, i, j]``: units of group g at category low+i at wave s and low+j at t.

    ``counts[:, s, s]`` holds the wave's own category counts on its diagonal.
    ``counts`` is None when no value was seen (``reason`` None) or when the measure is
    not tabulated (``reason`` says why).
    """

    low: int | None
    counts: np.ndarray | None
    reason: str | None = None
    weighted: np.ndarray | None = None   # with weights: the weight sums of the same cells

    @property
    def mass(self) -> np.ndarray:
        """The tables estimates use: weight sums with weights, else the counts."""
        return self.counts if self.weighted is None else self.weighted

    @property
    def n_levels(self) -> int:
        return 0 if self.counts is None else self.counts.shape[-1]

    @classmethod
    def from_chunk(cls, chunk) -> "PairwiseTables":
        x = chunk.values
        seen = ~np.isnan(x)
        head = x[:1024][seen[:1024]]   # a cheap look first: most continuous data fail here
        if head.size and not np.all(head == np.floor(head)):
            return cls(None, None, "values are not all integers")
        observed = x[seen]
        if observed.size == 0:
            return cls(None, None)
        if not np.all(observed == np.floor(observed)):
            return cls(None, None, "values are not all integers")
        low, high = int(observed.min()), int(observed.max())
        n_levels = high - low + 1
        if n_levels > MAX_LEVELS:
            return cls(None, None, f"integer values span more than {MAX_LEVELS} categories")
        k, t = chunk.n_replicates, x.shape[1]
        m = n_levels + 1   # one extra code for "missing", dropped from the tables
        code = np.where(seen, x - low, n_levels).astype(np.intp)
        base = chunk.replicate.astype(np.intp) * (m * m)
        def tabulate(weights, dtype):
            out = np.zeros((k, t, t, n_levels, n_levels), dtype=dtype)
            for s in range(t):  # a loop over pairs of waves; each step is one bincount
                row = base + code[:, s] * m
                for u in range(s, t):
                    table = np.bincount(row + code[:, u], weights=weights,
                                        minlength=k * m * m).astype(dtype, copy=False)
                    table = table.reshape(k, m, m)[:, :n_levels, :n_levels]
                    out[:, s, u] = table
                    if u != s:
                        out[:, u, s] = table.transpose(0, 2, 1)
            return np.ascontiguousarray(out)

        weighted = None if chunk.weights is None else tabulate(chunk.weights, float)
        return cls(low, tabulate(None, np.int64), weighted=weighted)

    def merge(self, other: "PairwiseTables") -> "PairwiseTables":
        if self.reason is not None or other.reason is not None:
            return self if self.reason is not None else other
        if self.counts is None:
            return other
        if other.counts is None:
            return self
        low = min(self.low, other.low)
        high = max(self.low + self.n_levels, other.low + other.n_levels) - 1
        if high - low + 1 > MAX_LEVELS:
            return PairwiseTables(None, None,
                                  f"integer values span more than {MAX_LEVELS} categories")
        weighted = None if self.weighted is None else \
            self._widened(low, high, self.weighted) + other._widened(low, high, other.weighted)
        return PairwiseTables(low, self._widened(low, high) + other._widened(low, high),
                              weighted=weighted)

    def _widened(self, low: int, high: int, tables: np.ndarray | None = None) -> np.ndarray:
        before, after = self.low - low, high - (self.low + self.n_levels - 1)
        pad = [(0, 0)] * 3 + [(before, after)] * 2
        return np.pad(self.counts if tables is None else tables, pad)

    def pooled(self, weighted: bool = False) -> np.ndarray:
        """Tables summed over replicate groups, (T, T, L, L) (``weighted``: of the
        weight sums, when there are weights)."""
        return (self.mass if weighted else self.counts).sum(axis=0)

    def leave_one_out(self, weighted: bool = False) -> np.ndarray:
        """Tables with each occupied replicate group left out in turn, (G, T, T, L, L)
        (``weighted``: of the weight sums, when there are weights)."""
        kept = occupied_groups(np.einsum("kttii->k", self.counts))
        tables = self.mass if weighted else self.counts
        return tables.sum(axis=0, keepdims=True) - tables[kept]

    def categories(self) -> np.ndarray:
        """The category values seen at any wave (empty categories in the range dropped)."""
        if self.counts is None:
            return np.array([], dtype=np.int64)
        total = self.pooled()
        per_level = np.einsum("ttij->tij", total).sum(axis=0).diagonal()
        return self.low + np.nonzero(per_level)[0]
