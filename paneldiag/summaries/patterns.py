"""Per response pattern: the count, the means and the centred cross-products of the
observed waves, merging exactly across chunks of units.

A response pattern is the set of waves at which a unit has an observed value. Every
distinct pattern gets one row: ``observed[p]`` (T booleans), ``n[p]`` units,
``mean[p]`` (T; 0 at unobserved waves) and ``m2[p]`` (T x T centred cross-products
of the observed waves around the pattern's own means; 0 outside the observed block).
Counts per replicate group (``replicate_n``, P x K) are kept too, so shares read
off the pattern table can get delete-a-group jackknife errors. Retention, unit
types and coverage are all functions of the pattern counts.

Both pattern summaries come from one table of cells, a cell being the units of one
response pattern in one replicate group (``PatternCells``). A chunk's units are sorted
once by (pattern, group); a cell of many units gets its cross-products from one matrix
product of its centred rows (a loop over such cells), the units of the small cells
from one sparse sum of their centred products, so the cost is O(n T^2) per chunk.
The per-pattern moments pool a pattern's cells, and chunks combine the same way, with
the update of Chan, Golub and LeVeque (1983, The American Statistician) taken over any
number of parts: ``m2 = sum_c m2_c + sum_c n_c d_c d_c'``, ``d_c`` the part's mean
minus the pooled mean, on the observed block. The cells keep the upper triangle of
each cross-product matrix only.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

# cells with at least this many units get their cross-products from one matrix
# product each (a loop over such cells); the units of smaller cells share one sum
MATRIX_CELL_UNITS = 64


def pattern_keys(observed: np.ndarray) -> np.ndarray:
    """One sortable key per row of a boolean (n, T) matrix: an integer bit code for
    T <= 62 waves (wave 1 the lowest bit), packed bits as bytes beyond that."""
    observed = np.asarray(observed, dtype=bool)
    n_rows, n_waves = observed.shape
    if n_waves <= 62:
        packed = np.packbits(observed, axis=1, bitorder="little")
        word = np.zeros((n_rows, 8), dtype=np.uint8)
        word[:, :packed.shape[1]] = packed
        return word.view("<i8")[:, 0].astype(np.int64, copy=False)
    packed = np.ascontiguousarray(np.packbits(observed, axis=1))
    return packed.view(np.dtype((np.void, packed.shape[1])))[:, 0]


def distinct_patterns(observed: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The first row of each distinct pattern of a boolean (n, T) matrix, in key order,
    and each row's pattern index."""
    _, first, index = np.unique(pattern_keys(observed), return_index=True,
                                return_inverse=True)
    return first, index.reshape(-1)


def cell_keys(observed: np.ndarray, replicate: np.ndarray, n_replicates: int) -> np.ndarray:
    """One sortable integer key per row for its cell (pattern, replicate group),
    ordered by pattern key and then by group."""
    keys = pattern_keys(observed)
    group_bits = max(int(n_replicates) - 1, 0).bit_length()
    replicate = np.asarray(replicate, dtype=np.int64)
    if keys.dtype.kind == "i" and observed.shape[1] + group_bits <= 62:
        return (keys << group_bits) | replicate
    _, dense = np.unique(keys, return_inverse=True)
    return dense.reshape(-1).astype(np.int64) * n_replicates + replicate


def _upper(n_waves: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column of each entry of a packed upper triangle (diagonal included)."""
    return np.triu_indices(n_waves)


def _cross(a: np.ndarray, b: np.ndarray, packed: bool) -> np.ndarray:
    """Row by row products a_i b_j of two (R, T) arrays: the packed upper triangle
    (j >= i, in the order of ``_upper``) or, if not ``packed``, every (i, j)."""
    n_rows, n_waves = a.shape
    if not packed:
        return (a[:, :, None] * b[:, None, :]).reshape(n_rows, n_waves * n_waves)
    rows, cols = _upper(n_waves)
    return np.take(a, rows, axis=1) * np.take(b, cols, axis=1)


def _unpack(packed: np.ndarray, n_waves: int) -> np.ndarray:
    """(R, T(T+1)/2) packed upper triangles to (R, T, T) symmetric matrices."""
    rows, cols = _upper(n_waves)
    position = np.empty((n_waves, n_waves), dtype=np.int64)
    position[rows, cols] = np.arange(len(rows))
    position[cols, rows] = np.arange(len(rows))
    return np.take(packed, position.reshape(-1), axis=1).reshape(-1, n_waves, n_waves)


def _indicator(index: np.ndarray, n_out: int):
    """Sparse (n_out, R) 0/1 matrix adding each row r into output ``index[r]``; rows
    with index -1 are left out. Its product with an (R, m) array adds the rows of each
    output in row order, without gathering or copying them."""
    from scipy import sparse
    rows = np.flatnonzero(index >= 0)
    return sparse.csr_array((np.ones(len(rows)), (index[rows], rows)),
                            shape=(n_out, len(index)))


def _pool(n_out: int, parts: list[tuple], packed: bool):
    """Counts, means and centred cross-products of groups of parts.

    Each part is ``(index, n, mean, m2)``: ``index[r]`` is the output row of its row r
    (-1: left out), ``m2`` is (R, W), packed upper triangles or full matrices row by
    row (see ``_cross``). An output pools its rows by the Chan-Golub-LeVeque update
    over any number of parts, ``m2 = sum m2_r + sum n_r d_r d_r'`` with ``d_r`` the
    row's mean minus the pooled mean; the pooled mean is taken around one of its rows'
    means, so an output of one row is that row, exactly."""
    n_waves = parts[0][2].shape[1]
    n_total = np.zeros(n_out)
    around = np.zeros((n_out, n_waves))
    for index, n, mean, _ in reversed(parts):
        kept = index >= 0
        n_total += np.bincount(index[kept], weights=n[kept], minlength=n_out)
        around[index[kept]] = mean[kept]
    adders = [_indicator(index, n_out) for index, _, _, _ in parts]
    mean_out = around.copy()
    for (index, n, mean, _), add in zip(parts, adders):
        safe = np.maximum(index, 0)
        # an output of weight 0 (units of weight 0 only) keeps its first row's mean
        share = np.divide(n, n_total[safe], out=np.zeros(len(n)), where=n_total[safe] > 0)
        mean_out += add @ ((mean - around[safe]) * share[:, None])
    m2_out = None
    for (index, n, mean, m2), add in zip(parts, adders):
        # a row alone in its output has dev exactly 0 (its output's mean is its own)
        dev = mean - mean_out[np.maximum(index, 0)]
        spread = _cross(dev * n[:, None], dev, packed)
        spread += m2
        term = add @ spread
        m2_out = term if m2_out is None else m2_out + term
    return n_total, mean_out, m2_out


def _cell_moments(x: np.ndarray, keys: np.ndarray, weights: np.ndarray | None = None):
    """Units sorted by ``keys``; per run of equal keys (a cell, whose units share one
    pattern): the position of its first unit in ``x``, its size, means and centred
    cross-products of the observed waves (packed upper triangles; 0 at unobserved
    waves), and with ``weights`` its weight sum, the means and cross-products then
    weighted."""
    n_units, n_waves = x.shape
    rows, cols = _upper(n_waves)
    order = np.argsort(keys, kind="stable")
    starts = np.flatnonzero(np.r_[True, np.diff(keys[order]) != 0])
    sizes = np.diff(np.r_[starts, n_units])
    xs = np.take(x, order, axis=0)
    np.copyto(xs, 0.0, where=np.isnan(xs))
    if weights is not None:
        return _weighted_cell_moments(xs, order, starts, sizes, weights[order])
    # within a cell every unit has the same pattern, so after centring the unobserved
    # waves (0 in every row and in the mean) stay 0
    n_cells = len(starts)
    mean = np.empty((n_cells, n_waves))
    m2 = np.empty((n_cells, len(rows)))
    large = sizes >= MATRIX_CELL_UNITS
    for c in np.flatnonzero(large):  # a loop over (pattern, group) cells of many units
        block = xs[starts[c]:starts[c] + sizes[c]]
        mean[c] = block.sum(axis=0) / sizes[c]
        dev = block - mean[c]
        m2[c] = (dev.T @ dev)[rows, cols]
    small = np.flatnonzero(~large)
    if len(small):
        xs = xs[np.repeat(~large, sizes)]
        small_sizes = sizes[small]
        cell_of_row = np.repeat(np.arange(len(small)), small_sizes)
        add = _indicator(cell_of_row, len(small))
        mean[small] = (add @ xs) / small_sizes[:, None]
        dev = xs - mean[small][cell_of_row]
        m2[small] = add @ _cross(dev, dev, packed=True)
    return order[starts], sizes, mean, m2, None


def _weighted_cell_moments(xs, order, starts, sizes, w):
    """``_cell_moments`` with unit weights ``w`` (in the sorted order of ``xs``): one
    sparse sum over all cells (a cell of weight 0 gets means and cross-products 0)."""
    n_cells = len(starts)
    cell_of_row = np.repeat(np.arange(n_cells), sizes)
    add = _indicator(cell_of_row, n_cells)
    mass = np.bincount(cell_of_row, weights=w, minlength=n_cells)
    sums = add @ (xs * w[:, None])
    mean = np.divide(sums, mass[:, None], out=np.zeros_like(sums), where=mass[:, None] > 0)
    dev = xs - mean[cell_of_row]
    m2 = add @ _cross(dev * w[:, None], dev, packed=True)
    return order[starts], sizes, mean, m2, mass


@dataclass(frozen=True)
class PatternCells:
    """Moments per cell (response pattern, replicate group), cells ordered by pattern
    key and then by group. ``patterns()`` pools a pattern's cells into
    ``PatternMoments``; leaving a group out first gives the moments of the others."""

    observed: np.ndarray    # (C, T) bool
    group: np.ndarray       # (C,) replicate group 0..K-1
    n: np.ndarray           # (C,) units in the cell
    mean: np.ndarray        # (C, T) means of the observed waves (0 elsewhere)
    m2: np.ndarray          # (C, T(T+1)/2) centred cross-products, packed upper triangle
    n_replicates: int
    w: np.ndarray | None = None  # (C,) weight sums (means and m2 then weighted)

    @property
    def mass(self) -> np.ndarray:
        return self.n if self.w is None else self.w

    @classmethod
    def from_chunk(cls, chunk) -> "PatternCells":
        x = chunk.values
        n_units, n_waves = x.shape
        k = chunk.n_replicates
        if n_units == 0:
            return cls.empty(n_waves, k)
        seen = ~np.isnan(x)
        replicate = np.asarray(chunk.replicate, dtype=np.int64)
        first, sizes, mean, m2, mass = _cell_moments(x, cell_keys(seen, replicate, k),
                                                     chunk.weights)
        return cls(seen[first], replicate[first], sizes.astype(float), mean, m2, k, mass)

    @classmethod
    def empty(cls, n_waves: int, n_replicates: int) -> "PatternCells":
        return cls(np.zeros((0, n_waves), dtype=bool), np.zeros(0, dtype=np.int64),
                   np.zeros(0), np.zeros((0, n_waves)),
                   np.zeros((0, n_waves * (n_waves + 1) // 2)), n_replicates)

    @property
    def n_cells(self) -> int:
        return len(self.n)

    @property
    def n_waves(self) -> int:
        return self.observed.shape[1]

    @cached_property
    def pattern_index(self) -> np.ndarray:
        """Each cell's pattern, numbered 0..P-1 in key order."""
        keys = pattern_keys(self.observed)
        return np.cumsum(np.r_[False, keys[1:] != keys[:-1]]).astype(np.int64)

    def merge(self, other: "PatternCells") -> "PatternCells":
        """Exact combination of two cell tables (cells kept in key order)."""
        if other.n_cells == 0:
            return self
        if self.n_cells == 0:
            return other
        observed = np.concatenate([self.observed, other.observed])
        group = np.concatenate([self.group, other.group])
        _, first, index = np.unique(cell_keys(observed, group, self.n_replicates),
                                    return_index=True, return_inverse=True)
        index = index.reshape(-1)
        split = self.n_cells
        mass, mean, m2 = _pool(len(first), [(index[:split], self.mass, self.mean, self.m2),
                                            (index[split:], other.mass, other.mean,
                                             other.m2)], packed=True)
        if self.w is None:
            return PatternCells(observed[first], group[first], mass, mean, m2,
                                self.n_replicates)
        n = np.bincount(index, weights=np.r_[self.n, other.n], minlength=len(first))
        return PatternCells(observed[first], group[first], n, mean, m2, self.n_replicates,
                            mass)

    def in_group(self, g: int) -> "PatternMoments":
        """The pattern moments of the units of replicate group ``g``."""
        rows = np.flatnonzero(self.group == g)
        rep = np.zeros((len(rows), self.n_replicates))
        rep[:, g] = self.n[rows]
        extra = {}
        if self.w is not None:
            rep_w = np.zeros((len(rows), self.n_replicates))
            rep_w[:, g] = self.w[rows]
            extra = dict(w=self.w[rows], replicate_w=rep_w)
        return PatternMoments(self.observed[rows], self.n[rows], self.mean[rows],
                              _unpack(self.m2[rows], self.n_waves), rep, **extra)

    def patterns(self, drop_group: int | None = None) -> "PatternMoments":
        """The pattern moments of all cells (optionally leaving one group out)."""
        k = self.n_replicates
        if self.n_cells == 0:
            return PatternMoments.empty(self.n_waves, k)
        index = self.pattern_index
        if drop_group is not None:
            kept = self.group != drop_group
            present = np.bincount(index[kept], minlength=index[-1] + 1) > 0
            index = np.where(kept, (np.cumsum(present) - 1)[index], -1)
        kept_rows = np.flatnonzero(index >= 0)
        if len(kept_rows) == 0:
            return PatternMoments.empty(self.n_waves, k)
        n_out = int(index[kept_rows[-1]]) + 1
        mass, mean, m2 = _pool(n_out, [(index, self.mass, self.mean, self.m2)], packed=True)
        first = kept_rows[np.r_[True, index[kept_rows[1:]] != index[kept_rows[:-1]]]]
        cell = index[kept_rows] * k + self.group[kept_rows]

        def by_group(amount):
            return np.bincount(cell, weights=amount[kept_rows],
                               minlength=n_out * k).reshape(n_out, k)

        if self.w is None:
            return PatternMoments(self.observed[first], mass, mean,
                                  _unpack(m2, self.n_waves), by_group(self.n))
        rep = by_group(self.n)
        return PatternMoments(self.observed[first], rep.sum(axis=1), mean,
                              _unpack(m2, self.n_waves), rep, w=mass,
                              replicate_w=by_group(self.w))


def shared_pattern_cells(chunk) -> PatternCells:
    """The pass both pattern summaries share (``summarise`` runs it once a chunk)."""
    return PatternCells.from_chunk(chunk)


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


# Largest cost, in sum over patterns of k^3 (k observed waves), of one iteration of a
# likelihood fit over the patterns. A screen makes about a thousand such iterations (EM
# for all units and each replicate group, the full-information fits): 1.3e8 took 18 s of
# CPU at 6,000 units x 50 waves here, so the limit keeps them under about 40 s. Above it
# (many occasions, most units on a pattern of their own) the moments are
# pairwise-complete instead (docs/design.md, "Cost in occasions").
ML_COST_LIMIT = 3e8


@dataclass(frozen=True)
class PatternMoments:
    """Sufficient statistics per distinct response pattern, patterns in key order."""

    observed: np.ndarray    # (P, T) bool
    n: np.ndarray           # (P,) units with the pattern
    mean: np.ndarray        # (P, T) means of the observed waves (0 elsewhere)
    m2: np.ndarray          # (P, T, T) centred cross-products (0 outside observed block)
    replicate_n: np.ndarray  # (P, K) units with the pattern per replicate group
    # with weights: the weight sums per pattern (and per replicate group); the means and
    # cross-products are then weighted, ``n`` and ``replicate_n`` stay counts of units
    w: np.ndarray | None = None
    replicate_w: np.ndarray | None = None

    @property
    def weighted(self) -> bool:
        return self.w is not None

    @property
    def mass(self) -> np.ndarray:
        """What estimates average over: the weight sums, or the counts of units."""
        return self.n if self.w is None else self.w

    @property
    def replicate_mass(self) -> np.ndarray:
        return self.replicate_n if self.replicate_w is None else self.replicate_w

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

    @property
    def ml_affordable(self) -> bool:
        """Whether likelihood fits over the patterns (EM, full information) are within
        ``ML_COST_LIMIT``: each of their iterations costs sum over patterns of k^3 for k
        observed waves, O(N T^3) when most units have a pattern of their own."""
        return float(np.sum(self.n_observed.astype(float) ** 3)) <= ML_COST_LIMIT

    def pairwise_moments(self) -> tuple[np.ndarray, np.ndarray]:
        """Available-case means (T,) and pairwise-complete covariances (T, T), ML divisor,
        from the pattern sums: O(P T^2), the fallback when ``ml_affordable`` is False."""
        obs = self.observed.astype(float)
        weighted = self.mass[:, None] * obs
        n_wave = weighted.sum(axis=0)
        n_pair = weighted.T @ obs
        sums = weighted * self.mean                   # per pattern, sums of the waves
        with np.errstate(invalid="ignore", divide="ignore"):
            means = sums.sum(axis=0) / n_wave
            a = sums.T @ obs                         # a[s, t]: sum of wave s where t seen
            cross = self.m2.sum(axis=0) + sums.T @ (self.mean * obs)
            cov = (cross - a * a.T / n_pair) / n_pair
        cov = np.where(n_pair > 0, cov, np.nan)
        return np.where(n_wave > 0, means, np.nan), cov

    shared_pass = staticmethod(shared_pattern_cells)

    @classmethod
    def from_shared(cls, cells: PatternCells) -> "PatternMoments":
        return cells.patterns()

    @classmethod
    def from_chunk(cls, chunk) -> "PatternMoments":
        return cls.from_shared(shared_pattern_cells(chunk))

    @classmethod
    def empty(cls, n_waves: int, n_replicates: int) -> "PatternMoments":
        return cls(np.zeros((0, n_waves), dtype=bool), np.zeros(0), np.zeros((0, n_waves)),
                   np.zeros((0, n_waves, n_waves)), np.zeros((0, n_replicates)))

    def merge(self, other: "PatternMoments") -> "PatternMoments":
        """Exact combination of two summaries (patterns kept in key order)."""
        if other.n_patterns == 0:
            return self
        if self.n_patterns == 0:
            return other
        observed = np.concatenate([self.observed, other.observed])
        first, index = distinct_patterns(observed)
        split, t = self.n_patterns, self.n_waves
        mass, mean, m2 = _pool(len(first), [(index[:split], self.mass, self.mean,
                                             self.m2.reshape(split, t * t)),
                                            (index[split:], other.mass, other.mean,
                                             other.m2.reshape(other.n_patterns, t * t))],
                               packed=False)

        def added(mine, theirs):
            out = np.zeros((len(first),) + mine.shape[1:])
            out[index[:split]] += mine
            out[index[split:]] += theirs
            return out

        rep = added(self.replicate_n, other.replicate_n)
        if self.w is None:
            return PatternMoments(observed[first], mass, mean, m2.reshape(-1, t, t), rep)
        return PatternMoments(observed[first], added(self.n, other.n), mean,
                              m2.reshape(-1, t, t), rep, w=mass,
                              replicate_w=added(self.replicate_w, other.replicate_w))
