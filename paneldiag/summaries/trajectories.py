"""Per-unit trajectory summaries: least-squares lines (and curves) fitted unit by unit.

Units that share a response pattern (the set of waves observed) share one design
matrix, so the fit of every unit in a pattern is one matrix product with a small
pseudo-inverse: the loop runs over patterns, never over units. For every pair
(replicate group, pattern) the summary keeps the count of units, the mean and the
centred cross-product matrix of their coefficients, residual sums and the lag-1
residual cross-products, and the mean and spread of the unit means. These merge
exactly across chunks (Chan, Golub and LeVeque 1983, The American Statistician).

Times are centred on the mean of all wave times (a panel constant, so every chunk
uses the same centre): the intercept is a unit's level at the panel's mid-time,
the slope its change per unit of time and the curvature the quadratic coefficient.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.summaries.jackknife import occupied_groups

LINEAR_MIN_WAVES = 2      # a line needs two observed waves
QUADRATIC_MIN_WAVES = 4   # a curvature is fitted with at least four
_MOMENT_PAIRS = (("lin_mean", "lin_m2"), ("quad_mean", "quad_m2"), ("unit_mean", "unit_mean_m2"))
_SUM_KEYS = ("rss", "rss_sq", "lag_cross", "within_ss")


@dataclass(frozen=True)
class TrajectorySummary:
    """Per (replicate group, response pattern) aggregates of unit-wise trajectory fits.

    Arrays have a leading replicate axis K and a pattern axis P; ``patterns`` is the
    (P, T) boolean matrix of observed waves, sorted so that merging is deterministic.
    Linear quantities cover units with >= 2 observed waves, quadratic ones units
    with >= 4 (zero elsewhere); unit-mean quantities cover units with >= 1.
    """

    times: np.ndarray          # (T,) wave times
    centre: float              # the time the intercepts refer to
    patterns: np.ndarray       # (P, T) bool
    n: np.ndarray              # (K, P) units
    lin_mean: np.ndarray       # (K, P, 2) mean intercept and slope
    lin_m2: np.ndarray         # (K, P, 2, 2) centred cross-products of (intercept, slope)
    quad_mean: np.ndarray      # (K, P, 3)
    quad_m2: np.ndarray        # (K, P, 3, 3)
    rss: np.ndarray            # (K, P) sum over units of the linear residual sum of squares
    rss_sq: np.ndarray         # (K, P) sum over units of its square
    lag_cross: np.ndarray      # (K, P) sum over units of e' L e (symmetric lag-1 form)
    unit_mean: np.ndarray      # (K, P) mean of the unit means
    unit_mean_m2: np.ndarray   # (K, P) centred sum of squares of the unit means
    within_ss: np.ndarray      # (K, P) sum over units of squares around the own mean
    # with weights: (K, P) weight sums; every mean, centred product and sum above is
    # then weighted, ``n`` stays a count of units
    w: np.ndarray | None = None

    @property
    def mass(self) -> np.ndarray:
        return self.n if self.w is None else self.w

    @classmethod
    def from_chunk(cls, chunk) -> "TrajectorySummary":
        x = chunk.values
        times = np.asarray(chunk.times, dtype=float)
        centre = float(times.mean())
        tc = times - centre
        k_groups = chunk.n_replicates
        seen = ~np.isnan(x)
        patterns, pattern_of = _response_patterns(seen)
        n_pat = len(patterns)
        n_obs = patterns.sum(axis=1)
        k_row = n_obs[pattern_of]
        # one cell per (pattern, replicate group); rows outside a fit go to an extra cell
        cells = n_pat * k_groups
        key = pattern_of * k_groups + chunk.replicate

        def cell_key(min_waves):
            return np.where(k_row >= min_waves, key, cells)

        unit_w = chunk.weights

        def cell_sum(amounts, where):
            if unit_w is not None:
                amounts = amounts * unit_w
            sums = np.bincount(where, weights=amounts, minlength=cells + 1)[:cells]
            return sums.reshape(n_pat, k_groups).T

        # two chunk-sized work arrays, reused in place (fresh memory is costly)
        y0 = np.where(seen, x, 0.0)
        work = np.empty_like(y0)
        key1 = cell_key(1)
        count = np.bincount(key1, minlength=cells + 1)[:cells].astype(float)
        out = {"n": count.reshape(n_pat, k_groups).T}
        if unit_w is not None:
            count = np.bincount(key1, weights=unit_w, minlength=cells + 1)[:cells]
            out["w"] = count.reshape(n_pat, k_groups).T
        with np.errstate(invalid="ignore", divide="ignore"):
            means = y0.sum(axis=1) / np.maximum(k_row, 1)
        gm, gm2 = _cell_moments(means[:, None], key1, count, n_pat, k_groups, unit_w)
        out["unit_mean"], out["unit_mean_m2"] = gm[..., 0], gm2[..., 0, 0]
        missing = ~seen
        # deviations from the unit's own mean, 0 if missing: the fits below run on them
        # (their residuals and slopes are the same), so a measure far from zero keeps
        # its digits; the means return to the intercepts afterwards
        y0 -= means[:, None]
        np.copyto(y0, 0.0, where=missing)
        out["within_ss"] = cell_sum(np.einsum("ij,ij->i", y0, y0), key1)

        key2 = cell_key(LINEAR_MIN_WAVES)
        coef = _pattern_fits(y0, patterns, pattern_of, tc, 1, LINEAR_MIN_WAVES, work)
        np.multiply(coef[:, 1:2], tc, out=work)
        work += coef[:, 0:1]                   # fitted lines (a BLAS product with an
        np.subtract(y0, work, out=work)        # inner size of 2 is slower here)
        np.copyto(work, 0.0, where=missing)    # residuals, 0 where missing
        rss = np.einsum("ij,ij->i", work, work)
        # e' L e: products of residuals at adjacent waves (zero where either is missing)
        lagged = np.einsum("ij,ij->i", work[:, :-1], work[:, 1:])
        coef[:, 0] += np.where(k_row >= LINEAR_MIN_WAVES, means, 0.0)
        out["lin_mean"], out["lin_m2"] = _cell_moments(coef, key2, count, n_pat, k_groups,
                                                       unit_w)
        out["rss"] = cell_sum(rss, key2)
        out["rss_sq"] = cell_sum(rss * rss, key2)
        out["lag_cross"] = cell_sum(lagged, key2)

        key4 = cell_key(QUADRATIC_MIN_WAVES)
        coef = _pattern_fits(y0, patterns, pattern_of, tc, 2, QUADRATIC_MIN_WAVES, work)
        coef[:, 0] += np.where(k_row >= QUADRATIC_MIN_WAVES, means, 0.0)
        out["quad_mean"], out["quad_m2"] = _cell_moments(coef, key4, count, n_pat, k_groups,
                                                         unit_w)
        out = {name: np.ascontiguousarray(value) for name, value in out.items()}
        return cls(times=times, centre=centre, patterns=patterns, **out)

    def merge(self, other: "TrajectorySummary") -> "TrajectorySummary":
        patterns = np.unique(np.concatenate([self.patterns, other.patterns]), axis=0)
        a, b = self._aligned(patterns), other._aligned(patterns)
        merged = {"n": a["n"] + b["n"]}
        mass = "n"
        if self.w is not None:
            merged["w"], mass = a["w"] + b["w"], "w"
        for mean_key, m2_key in _MOMENT_PAIRS:
            merged[mean_key], merged[m2_key] = _combine(
                a[mass], a[mean_key], a[m2_key], b[mass], b[mean_key], b[m2_key])
        for key in _SUM_KEYS:
            merged[key] = a[key] + b[key]
        return TrajectorySummary(times=self.times, centre=self.centre, patterns=patterns,
                                 **merged)

    def _aligned(self, patterns: np.ndarray) -> dict:
        """Arrays re-indexed onto a superset of patterns (zeros where absent)."""
        k_groups = self.n.shape[0]
        out = _zeros(k_groups, len(patterns))
        if self.w is not None:
            out["w"] = np.zeros((k_groups, len(patterns)))
        where = _locate(patterns, self.patterns)
        for key in out:
            out[key][:, where] = getattr(self, key)
        return out

    def pooled(self, drop_group: int | None = None) -> "TrajectorySummary":
        """All replicate groups combined (optionally leaving one out), K axis of 1."""
        keep = np.ones((1, self.n.shape[0]))
        if drop_group is not None:
            keep[0, drop_group] = 0.0
        return self._pool(keep)[0]

    def leave_one_out(self):
        """Yield the pooled summary with each occupied replicate group left out in turn."""
        k = self.n.shape[0]
        yield from self._pool((1.0 - np.eye(k))[occupied_groups(self.n.sum(axis=1))])

    def _pool(self, keep: np.ndarray) -> list["TrajectorySummary"]:
        """Pooled summaries, one per row of the 0/1 matrix ``keep`` (rows x K groups).

        Exact and centred: n = sum n_h, mean = sum n_h m_h / n and
        M2 = sum (M2_h + n_h (m_h - mean)(m_h - mean)') over the kept groups h.
        """
        n = np.einsum("oh,hp->op", keep, self.mass)
        out = {"n": n}
        if self.w is not None:
            out = {"n": np.einsum("oh,hp->op", keep, self.n), "w": n}
        safe = np.where(n > 0, n, 1.0)
        for mean_key, m2_key in _MOMENT_PAIRS:
            m, m2 = getattr(self, mean_key), getattr(self, m2_key)
            if m.ndim == 2:  # scalar moments: (K, P)
                mean = np.einsum("oh,hp,hp->op", keep, self.mass, m) / safe
                dev = m[None] - mean[:, None]
                out[mean_key] = mean
                out[m2_key] = np.einsum("oh,hp->op", keep, m2) + \
                    np.einsum("oh,hp,ohp->op", keep, self.mass, dev * dev)
            else:  # vector moments: (K, P, q)
                mean = np.einsum("oh,hp,hpq->opq", keep, self.mass, m) / safe[..., None]
                dev = m[None] - mean[:, None]
                out[mean_key] = mean
                out[m2_key] = np.einsum("oh,hpqr->opqr", keep, m2) + \
                    np.einsum("oh,hp,ohpq,ohpr->opqr", keep, self.mass, dev, dev)
        for key in _SUM_KEYS:
            out[key] = np.einsum("oh,hp->op", keep, getattr(self, key))
        return [TrajectorySummary(times=self.times, centre=self.centre, patterns=self.patterns,
                                  **{key: value[o:o + 1] for key, value in out.items()})
                for o in range(keep.shape[0])]


def _response_patterns(seen: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct rows of a boolean (n, T) matrix in lexicographic order (as np.unique
    with axis=0 gives them) and each row's pattern index; integer codes make the
    grouping a sort of n integers rather than of n byte strings."""
    n_waves = seen.shape[1]
    if n_waves > 62:
        patterns, inverse = np.unique(seen, axis=0, return_inverse=True)
        return patterns, inverse.reshape(-1)
    weights = np.left_shift(np.int64(1), np.arange(n_waves - 1, -1, -1, dtype=np.int64))
    codes = np.zeros(len(seen), dtype=np.int64)   # first wave is the most significant bit
    for t in range(n_waves):  # a loop over waves (no chunk-sized integer matrix)
        codes[seen[:, t]] += weights[t]
    unique, inverse = np.unique(codes, return_inverse=True)
    patterns = ((unique[:, None] & weights[None, :]) > 0)
    return patterns, inverse.reshape(-1)


def _zeros(k: int, p: int) -> dict:
    return {"n": np.zeros((k, p)), "lin_mean": np.zeros((k, p, 2)),
            "lin_m2": np.zeros((k, p, 2, 2)), "quad_mean": np.zeros((k, p, 3)),
            "quad_m2": np.zeros((k, p, 3, 3)), "rss": np.zeros((k, p)),
            "rss_sq": np.zeros((k, p)), "lag_cross": np.zeros((k, p)),
            "unit_mean": np.zeros((k, p)), "unit_mean_m2": np.zeros((k, p)),
            "within_ss": np.zeros((k, p))}


def _locate(superset: np.ndarray, subset: np.ndarray) -> np.ndarray:
    """Row positions of ``subset``'s patterns within ``superset``."""
    n_waves = superset.shape[1]
    if n_waves <= 62 and len(subset):
        weights = np.left_shift(np.int64(1), np.arange(n_waves - 1, -1, -1, dtype=np.int64))
        codes = superset.astype(np.int64) @ weights
        order = np.argsort(codes, kind="stable")
        wanted = subset.astype(np.int64) @ weights
        where = order[np.minimum(np.searchsorted(codes[order], wanted), len(codes) - 1)]
        if np.array_equal(codes[where], wanted):
            return where.astype(np.int64)
    lookup = {tuple(np.flatnonzero(row)): i for i, row in enumerate(superset)}
    return np.array([lookup[tuple(np.flatnonzero(row))] for row in subset], dtype=np.int64)


def _batch_design(times_c: np.ndarray, degree: int) -> np.ndarray:
    """``design`` of each row of times (P, k): (P, k, degree + 1), the same powers."""
    return np.multiply.accumulate(
        np.concatenate([np.ones(times_c.shape + (1,)),
                        np.repeat(times_c[..., None], degree, axis=-1)], axis=-1), axis=-1)


def _pattern_fits(y0: np.ndarray, patterns: np.ndarray, pattern_of: np.ndarray,
                  tc: np.ndarray, degree: int, min_waves: int, work: np.ndarray,
                  ) -> np.ndarray:
    """Least-squares coefficients (n, degree + 1) of every unit's polynomial in the
    centred times over its observed waves (zeros for units with fewer than
    ``min_waves``). The pseudo-inverse of each pattern's design is computed once, in
    batches of patterns with the same number of observed waves, and padded with zero
    columns at the missing waves, so a unit's fit is a dot product with its row
    (``y0`` holds zeros at missing waves). ``work`` (shaped like ``y0``) is overwritten."""
    n_pat, n_waves = patterns.shape
    q = degree + 1
    pinv = np.zeros((n_pat, q, n_waves))
    n_obs = patterns.sum(axis=1)
    for k in np.unique(n_obs[n_obs >= min_waves]):  # a loop over numbers of observed waves
        rows = np.flatnonzero(n_obs == k)
        # stable argsort of "not observed" lists the observed waves first, in order
        obs = np.argsort(~patterns[rows], axis=1, kind="stable")[:, :k]
        xd = _batch_design(tc[obs], degree)
        pinv[rows[:, None, None], np.arange(q)[None, :, None], obs[:, None, :]] = \
            np.linalg.pinv(xd)
    coef = np.empty((len(y0), q))
    for j in range(q):  # a loop over coefficients (at most 3)
        np.take(pinv[:, j, :], pattern_of, axis=0, out=work)
        coef[:, j] = np.einsum("ij,ij->i", y0, work)
    return coef


def _cell_moments(values: np.ndarray, key: np.ndarray, count: np.ndarray, n_pat: int,
                  k_groups: int, weights: np.ndarray | None = None):
    """Mean (K, P, q) and centred cross-product matrix (K, P, q, q) of ``values`` (n, q)
    in each (pattern, replicate group) cell ``key`` = pattern * K + group (rows with
    key P * K belong to no cell); ``count`` (P * K,) the units of each cell (with
    ``weights``: their weight sums, the moments then weighted)."""
    q = values.shape[1]
    cells = n_pat * k_groups
    sums = np.stack([np.bincount(key, weights=values[:, j] if weights is None
                                 else values[:, j] * weights, minlength=cells + 1)
                     for j in range(q)], axis=1)   # a loop over coefficients
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.zeros((cells + 1, q))
        safe = np.where(count > 0, count, 1)[:, None]
        mean[:cells] = np.where(count[:, None] > 0, sums[:cells] / safe, 0.0)
    dev = values - mean[key]
    m2 = np.empty((cells, q, q))
    for a in range(q):  # a loop over coefficients (at most 3)
        for b in range(a, q):
            product = dev[:, a] * dev[:, b] if weights is None else \
                dev[:, a] * dev[:, b] * weights
            m2[:, a, b] = m2[:, b, a] = np.bincount(key, weights=product,
                                                    minlength=cells + 1)[:cells]
    mean = mean[:cells].reshape(n_pat, k_groups, q).swapaxes(0, 1)
    return mean, m2.reshape(n_pat, k_groups, q, q).swapaxes(0, 1)


def _group_moments(values: np.ndarray, g: np.ndarray, count: np.ndarray, k_groups: int):
    """Per replicate group mean (K, q) and centred cross-product matrix (K, q, q)."""
    q = values.shape[1]
    sums = np.stack([np.bincount(g, weights=values[:, j], minlength=k_groups)
                     for j in range(q)], axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count[:, None] > 0, sums / np.maximum(count, 1)[:, None], 0.0)
    dev = values - mean[g]
    m2 = np.empty((k_groups, q, q))
    for a in range(q):  # a loop over coefficients (at most 3)
        for b in range(a, q):
            m2[:, a, b] = m2[:, b, a] = np.bincount(g, weights=dev[:, a] * dev[:, b],
                                                    minlength=k_groups)
    return mean, m2


def _combine(na, mean_a, m2a, nb, mean_b, m2b):
    """Chan, Golub and LeVeque (1983) update of means and centred cross-products.

    ``na``/``nb`` are (K, P); means (K, P, q) or (K, P); m2 (K, P, q, q) or (K, P).
    """
    n = na + nb
    scalar = mean_a.ndim == na.ndim
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(n > 0, nb / np.where(n > 0, n, 1), 0.0)
        cross = np.where(n > 0, na * nb / np.where(n > 0, n, 1), 0.0)
    if scalar:
        delta = mean_b - mean_a
        both = (na > 0) & (nb > 0)
        mean = np.where(na > 0, np.where(nb > 0, mean_a + delta * frac, mean_a), mean_b)
        m2 = m2a + m2b + np.where(both, delta * delta * cross, 0.0)
        return mean, m2
    delta = mean_b - mean_a
    both = ((na > 0) & (nb > 0))[..., None]
    mean = np.where((na > 0)[..., None],
                    np.where((nb > 0)[..., None], mean_a + delta * frac[..., None], mean_a),
                    mean_b)
    delta = np.where(both, delta, 0.0)
    m2 = m2a + m2b + delta[..., :, None] * delta[..., None, :] * cross[..., None, None]
    return mean, m2
