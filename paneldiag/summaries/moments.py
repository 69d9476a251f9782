"""Per-wave moments that merge exactly across chunks of units."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class WaveMoments:
    """Count, mean, centred second, third and fourth power sums, extremes and distinct
    values per wave. With weights the mean and power sums are weighted (the pairwise
    update below holds with weight sums in place of counts) and the counts stay counts.

    Chunks combine with the pairwise update of Chan, Golub and LeVeque (1983,
    The American Statistician) extended to the third moment by Pebay (2008, Sandia
    report SAND2008-6212), so no sum of squares is ever formed around zero. The mean is
    kept as ``shift + offset``, the shift being an observed value of the wave: the
    differences of chunk means that the update needs are then taken between small,
    exactly shifted numbers, so merging many chunks of data with a large mean and a
    small spread loses no more digits than one chunk does.
    """

    n: np.ndarray
    shift: np.ndarray
    offset: np.ndarray
    m2: np.ndarray
    m3: np.ndarray
    m4: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    n_at_min: np.ndarray
    n_at_max: np.ndarray
    distinct: tuple[np.ndarray, ...]
    # with weights: the weight sums of the wave, and of its floor and ceiling values;
    # the mean and the power sums are then weighted (``n`` stays a count of units)
    w: np.ndarray | None = None
    w_at_min: np.ndarray | None = None
    w_at_max: np.ndarray | None = None

    @property
    def mean(self) -> np.ndarray:
        return self.shift + self.offset

    @property
    def mass(self) -> np.ndarray:
        """What the moments are averaged over: the weight sums, or the counts."""
        return self.n if self.w is None else self.w

    @classmethod
    def from_chunk(cls, chunk) -> "WaveMoments":
        x = chunk.values
        seen = ~np.isnan(x)
        n = seen.sum(axis=0).astype(float)
        unseen = ~seen
        weights = None
        if chunk.weights is not None:
            weights = np.where(seen, chunk.weights[:, None], 0.0)
            unseen = weights == 0   # units of weight 0 count, but carry no moments
            mass = weights.sum(axis=0)
        else:
            mass = n
        # the shift: each wave's first observed value in the chunk (0 when it has none)
        first = x[(~unseen).argmax(axis=0), np.arange(x.shape[1])] if x.shape[0] else n
        shift = np.where(mass > 0, first, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.subtract(x, shift)
            d[unseen] = 0.0
            offset = (d if weights is None else d * weights).sum(axis=0) / mass
            np.subtract(d, offset, out=d)
            d[unseen] = 0.0
            dd = d * d if weights is None else d * d * weights
            m2 = dd.sum(axis=0)
            dd *= d
            m3 = dd.sum(axis=0)
            dd *= d
            m4 = dd.sum(axis=0)
        del d, dd
        # fmin / fmax skip NaN; a wave with no value keeps +-inf and counts every row,
        # as the extremes of +-inf-filled columns would.
        lo = np.where(n > 0, np.fmin.reduce(x, axis=0), np.inf)
        hi = np.where(n > 0, np.fmax.reduce(x, axis=0), -np.inf)
        n_lo = np.where(n > 0, (x == lo).sum(axis=0), x.shape[0])
        n_hi = np.where(n > 0, (x == hi).sum(axis=0), x.shape[0])
        distinct = tuple(_distinct(x[:, t]) for t in range(x.shape[1]))
        extra = {}
        if weights is not None:
            extra = dict(w=mass, w_at_min=np.where(x == lo, weights, 0.0).sum(axis=0),
                         w_at_max=np.where(x == hi, weights, 0.0).sum(axis=0))
        return cls(n, shift, offset, m2, m3, m4, lo, hi, n_lo, n_hi, distinct, **extra)

    def merge(self, other: "WaveMoments") -> "WaveMoments":
        mass_a, mass_b = self.mass, other.mass
        mine = mass_a > 0  # keep this side's shift; the other's offset is moved onto it
        shift = np.where(mine, self.shift, other.shift)
        moved = np.where(mine, (other.shift - self.shift) + other.offset, other.offset)
        offset, m2, m3, m4 = _combine(mass_a, np.where(mine, self.offset, 0.0), self.m2,
                                      self.m3, self.m4, mass_b, moved, other.m2, other.m3,
                                      other.m4)
        lo, hi = np.minimum(self.minimum, other.minimum), np.maximum(self.maximum, other.maximum)

        def at(mine_count, other_count, mine_end, other_end, end):
            return np.where(mine_end == end, mine_count, 0) + \
                np.where(other_end == end, other_count, 0)

        n_lo = at(self.n_at_min, other.n_at_min, self.minimum, other.minimum, lo)
        n_hi = at(self.n_at_max, other.n_at_max, self.maximum, other.maximum, hi)
        distinct = tuple(np.union1d(a, b) for a, b in zip(self.distinct, other.distinct))
        extra = {}
        if self.w is not None:
            extra = dict(w=self.w + other.w,
                         w_at_min=at(self.w_at_min, other.w_at_min, self.minimum,
                                     other.minimum, lo),
                         w_at_max=at(self.w_at_max, other.w_at_max, self.maximum,
                                     other.maximum, hi))
        return WaveMoments(self.n + other.n, shift, offset, m2, m3, m4, lo, hi, n_lo, n_hi,
                           distinct, **extra)


def _distinct(column: np.ndarray) -> np.ndarray:
    """Sorted distinct observed values (a hash table, then a sort of the few left)."""
    found = pd.unique(column)
    return np.sort(found[~np.isnan(found)])


def _combine(na, mean_a, m2a, m3a, m4a, nb, mean_b, m2b, m3b, m4b):
    """Pebay (2008) pairwise update of mean, M2, M3 and M4; empty sides pass through."""
    n = na + nb
    with np.errstate(invalid="ignore", divide="ignore"):
        delta = np.where(nb > 0, mean_b, 0.0) - np.where(na > 0, mean_a, 0.0)
        delta = np.where((na > 0) & (nb > 0), delta, 0.0)
        mean = np.where(na > 0, np.where(nb > 0, mean_a + delta * nb / n, mean_a), mean_b)
        safe = np.where(n > 0, n, 1)
        m2 = m2a + m2b + delta ** 2 * na * nb / safe
        m3 = (m3a + m3b + delta ** 3 * na * nb * (na - nb) / safe ** 2
              + 3.0 * delta * (na * m2b - nb * m2a) / safe)
        m4 = (m4a + m4b + delta ** 4 * na * nb * (na * na - na * nb + nb * nb) / safe ** 3
              + 6.0 * delta ** 2 * (na * na * m2b + nb * nb * m2a) / safe ** 2
              + 4.0 * delta * (na * m3b - nb * m3a) / safe)
    return mean, m2, m3, m4
