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
        column = np.where(seen, x - low, 0).astype(np.int64) + np.arange(t) * n_levels
        counts = np.zeros((k, t * n_levels, t * n_levels), dtype=np.int64)
        order = np.argsort(chunk.replicate, kind="stable")
        bounds = np.searchsorted(chunk.replicate[order], np.arange(k + 1))
        for g in range(k):  # a loop over replicate groups; each step is one matrix product
            rows = order[bounds[g]:bounds[g + 1]]
            if len(rows) == 0:
                continue
            seen_g = seen[rows]
            unit, wave = np.nonzero(seen_g)
            hot = np.zeros((len(rows), t * n_levels), dtype=np.float32)  # exact below 2**24
            hot[unit, column[rows][unit, wave]] = 1.0
            counts[g] = np.rint(hot.T @ hot).astype(np.int64)
        counts = counts.reshape(k, t, n_levels, t, n_levels).transpose(0, 1, 3, 2, 4)
        return cls(low, np.ascontiguousarray(counts))

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
        return PairwiseTables(low, self._widened(low, high) + other._widened(low, high))

    def _widened(self, low: int, high: int) -> np.ndarray:
        before, after = self.low - low, high - (self.low + self.n_levels - 1)
        pad = [(0, 0)] * 3 + [(before, after)] * 2
        return np.pad(self.counts, pad)

    def pooled(self) -> np.ndarray:
        """Tables summed over replicate groups, (T, T, L, L)."""
        return self.counts.sum(axis=0)

    def leave_one_out(self) -> np.ndarray:
        """Tables with each replicate group left out in turn, (K, T, T, L, L)."""
        return self.counts.sum(axis=0, keepdims=True) - self.counts

    def categories(self) -> np.ndarray:
        """The category values seen at any wave (empty categories in the range dropped)."""
        if self.counts is None:
            return np.array([], dtype=np.int64)
        total = self.pooled()
        per_level = np.einsum("ttij->tij", total).sum(axis=0).diagonal()
        return self.low + np.nonzero(per_level)[0]
