"""Per response pattern: the count, the means and the centred cross-products of the
observed waves, merging exactly across chunks of units.

A response pattern is the set of waves at which a unit has an observed value. Every
distinct pattern gets one row: ``observed[p]`` (T booleans), ``n[p]`` units,
``mean[p]`` (T; 0 at unobserved waves) and ``m2[p]`` (T x T centred cross-products
of the observed waves around the pattern's own means; 0 outside the observed block).
Counts per replicate group (``replicate_n``, P x K) are kept too, so shares read
off the pattern table can get delete-a-group jackknife errors. Retention, unit
types and coverage are all functions of the pattern counts.

Building a chunk sorts its units by pattern and sums with ``np.add.reduceat`` (a
loop over waves, not units), so the cost is O(n T^2) per chunk. Chunks combine with
the pairwise update of Chan, Golub and LeVeque (1983, The American Statistician):
``m2 = m2_a + m2_b + n_a n_b / n * delta delta'`` on the observed block.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def pattern_keys(observed: np.ndarray) -> np.ndarray:
    """One sortable key per row of a boolean (n, T) matrix: an integer bit code for
    T <= 62 waves (wave 1 the lowest bit), packed bits as bytes beyond that."""
    n_waves = observed.shape[1]
    if n_waves <= 62:
        return observed.astype(np.int64) @ (np.int64(1) << np.arange(n_waves, dtype=np.int64))
    packed = np.ascontiguousarray(np.packbits(observed, axis=1))
    return packed.view(np.dtype((np.void, packed.shape[1])))[:, 0]


OBSERVED_MARK, MISSING_MARK = "o", "."


def pattern_text(observed: np.ndarray) -> np.ndarray:
    """Patterns as text, one character per wave: 'o' observed, '.' missing.
    ``observed`` is (P, T) boolean; returns P strings (an object array)."""
    observed = np.atleast_2d(np.asarray(observed, dtype=bool))
    if observed.shape[0] == 0:
        return np.zeros(0, dtype=object)
    marks = np.where(observed, ord(OBSERVED_MARK), ord(MISSING_MARK)).astype(np.uint8)
    text = np.ascontiguousarray(marks).view(f"S{observed.shape[1]}")[:, 0]
    return text.astype(str).astype(object)


def display_order(patterns: "PatternMoments") -> np.ndarray:
    """Pattern indices, most units first, ties by pattern text."""
    if patterns.n_patterns == 0:
        return np.zeros(0, dtype=int)
    return np.lexsort((pattern_text(patterns.observed), -patterns.n))


@dataclass(frozen=True)
class PatternMoments:
    """Sufficient statistics per distinct response pattern, patterns in key order."""

    observed: np.ndarray    # (P, T) bool
    n: np.ndarray           # (P,) units with the pattern
    mean: np.ndarray        # (P, T) means of the observed waves (0 elsewhere)
    m2: np.ndarray          # (P, T, T) centred cross-products (0 outside observed block)
    replicate_n: np.ndarray  # (P, K) units with the pattern per replicate group

    @property
    def n_waves(self) -> int:
        return self.observed.shape[1]

    @property
    def n_patterns(self) -> int:
        return self.observed.shape[0]

    @property
    def n_units(self) -> int:
        return int(self.n.sum())

    @property
    def n_observed(self) -> np.ndarray:
        """Observed waves per pattern, (P,)."""
        return self.observed.sum(axis=1)

    @classmethod
    def from_chunk(cls, chunk) -> "PatternMoments":
        x = chunk.values
        seen = ~np.isnan(x)
        n_units, n_waves = x.shape
        k = chunk.n_replicates
        if n_units == 0:
            return cls.empty(n_waves, k)
        keys = pattern_keys(seen)
        order = np.argsort(keys, kind="stable")
        sorted_keys = keys[order]
        starts = np.flatnonzero(np.r_[True, sorted_keys[1:] != sorted_keys[:-1]])
        sizes = np.diff(np.r_[starts, n_units])
        counts = sizes.astype(float)
        seen_sorted = seen[order]
        observed = seen_sorted[starts]
        # waves along the first axis, units along the second: reduceat runs fastest so
        xt = np.ascontiguousarray(np.where(seen_sorted, x[order], 0.0).T)
        mean = (np.add.reduceat(xt, starts, axis=1) / counts).T
        group_of_row = np.repeat(np.arange(len(starts)), sizes)
        dt = np.where(seen_sorted.T, xt - mean.T[:, group_of_row], 0.0)
        m2 = np.empty((len(starts), n_waves, n_waves))
        for s in range(n_waves):  # a loop over waves; each step sums whole rows
            block = np.add.reduceat(dt[s:s + 1] * dt[s:], starts, axis=1).T
            m2[:, s, s:] = block
            m2[:, s:, s] = block
        rep = np.bincount(group_of_row * k + chunk.replicate[order],
                          minlength=len(starts) * k).reshape(len(starts), k).astype(float)
        return cls(observed, counts, mean, m2, rep)

    @classmethod
    def empty(cls, n_waves: int, n_replicates: int) -> "PatternMoments":
        return cls(np.zeros((0, n_waves), dtype=bool), np.zeros(0), np.zeros((0, n_waves)),
                   np.zeros((0, n_waves, n_waves)), np.zeros((0, n_replicates)))

    def merge(self, other: "PatternMoments") -> "PatternMoments":
        """Exact combination of two summaries (patterns kept in key order)."""
        observed = np.concatenate([self.observed, other.observed])
        keys = pattern_keys(observed)
        unique, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
        p = len(unique)
        ia, ib = inverse[:self.n_patterns], inverse[self.n_patterns:]
        n = np.zeros(p)
        n[ia] += self.n
        n[ib] += other.n
        na, nb = np.zeros(p), np.zeros(p)
        na[ia], nb[ib] = self.n, other.n
        mean_a = np.zeros((p, self.n_waves))
        mean_b = np.zeros((p, self.n_waves))
        mean_a[ia], mean_b[ib] = self.mean, other.mean
        m2 = np.zeros((p, self.n_waves, self.n_waves))
        m2[ia] += self.m2
        m2[ib] += other.m2
        mean = np.zeros((p, self.n_waves))
        mean[ia] = self.mean
        mean[ib] = other.mean   # right for patterns only in ``other``; fixed below
        both = np.flatnonzero((na > 0) & (nb > 0))
        if len(both):
            delta = mean_b[both] - mean_a[both]
            mean[both] = mean_a[both] + delta * (nb[both] / n[both])[:, None]
            weight = na[both] * nb[both] / n[both]
            m2[both] += weight[:, None, None] * delta[:, :, None] * delta[:, None, :]
        rep = np.zeros((p, self.replicate_n.shape[1]))
        rep[ia] += self.replicate_n
        rep[ib] += other.replicate_n
        return PatternMoments(observed[first], n, mean, m2, rep)
