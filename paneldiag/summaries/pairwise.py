"""Pairwise-complete cross-products of waves, kept per replicate group.

For every pair of waves (s, t) and every replicate group g: the number of units
observed at both, their sums and sums of squares at s (over units observed at both
s and t), and the cross-product. Values are taken around a per-wave shift fixed by
the first chunk, so sums stay small and merging is plain addition.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.summaries.jackknife import occupied_groups


@dataclass(frozen=True)
class PairwiseMoments:
    """Arrays of shape (K, T, T): ``sum_x[g, s, t]`` sums wave s over units seen at s and t."""

    shift: np.ndarray   # (T,)
    n: np.ndarray       # (K, T, T)
    sum_x: np.ndarray   # (K, T, T)
    sum_xx: np.ndarray  # (K, T, T)
    sum_xy: np.ndarray  # (K, T, T)
    # with weights: weight sums of the units seen at both waves; the sums above are then
    # weighted sums, ``n`` stays a count of units
    w: np.ndarray | None = None

    @property
    def mass(self) -> np.ndarray:
        return self.n if self.w is None else self.w

    @classmethod
    def from_chunk(cls, chunk, shift: np.ndarray | None = None) -> "PairwiseMoments":
        x = chunk.values
        seen = ~np.isnan(x)
        if shift is None:
            with np.errstate(invalid="ignore"):
                counts = seen.sum(axis=0)
                shift = np.where(counts > 0, np.nansum(x, axis=0) / np.maximum(counts, 1), 0.0)
        k, t = chunk.n_replicates, x.shape[1]
        n, sx, sxx, sxy = (np.zeros((k, t, t)) for _ in range(4))
        weights = chunk.weights
        w = None if weights is None else np.zeros((k, t, t))
        order = np.argsort(chunk.replicate, kind="stable")
        bounds = np.searchsorted(chunk.replicate[order], np.arange(k + 1))
        for g in range(k):  # a loop over replicate groups; each step is matrix algebra
            rows = order[bounds[g]:bounds[g + 1]]
            if len(rows) == 0:
                continue
            # one group's rows at a time, worked in place: small temporaries, reused
            d = x[rows]
            seen = ~np.isnan(d)
            d -= shift
            d[~seen] = 0.0
            m = seen.astype(float)
            n[g] = m.T @ m
            if weights is not None:
                dw = d * weights[rows, None]
                w[g] = (m * weights[rows, None]).T @ m
                sx[g] = dw.T @ m
                sxy[g] = dw.T @ d
                dw *= d
                sxx[g] = dw.T @ m
            else:
                sx[g] = d.T @ m
                sxy[g] = d.T @ d
                d *= d
                sxx[g] = d.T @ m
        return cls(shift, n, sx, sxx, sxy, w)

    def merge(self, other: "PairwiseMoments") -> "PairwiseMoments":
        if not np.array_equal(self.shift, other.shift):
            other = other.reshift(self.shift)
        return PairwiseMoments(self.shift, self.n + other.n, self.sum_x + other.sum_x,
                               self.sum_xx + other.sum_xx, self.sum_xy + other.sum_xy,
                               None if self.w is None else self.w + other.w)

    def reshift(self, shift: np.ndarray) -> "PairwiseMoments":
        """The same sums expressed around another shift (exact algebra)."""
        c = (self.shift - shift)            # x_new = x_old + c
        cs, ct = c[None, :, None], c[None, None, :]
        sum_y = np.swapaxes(self.sum_x, 1, 2)  # sums of wave t over units seen at both
        n = self.mass
        sum_x = self.sum_x + n * cs
        sum_xx = self.sum_xx + 2 * cs * self.sum_x + n * cs ** 2
        sum_xy = self.sum_xy + ct * self.sum_x + cs * sum_y + n * cs * ct
        return PairwiseMoments(shift, self.n, sum_x, sum_xx, sum_xy, self.w)

    def pooled(self, drop_group: int | None = None) -> "PairwiseMoments":
        """Sum over replicate groups (optionally leaving one out), keeping a K axis of 1."""
        keep = np.ones(self.n.shape[0], dtype=bool)
        if drop_group is not None:
            keep[drop_group] = False
        total = lambda a: a[keep].sum(axis=0, keepdims=True)  # noqa: E731
        return PairwiseMoments(self.shift, total(self.n), total(self.sum_x), total(self.sum_xx),
                               total(self.sum_xy), None if self.w is None else total(self.w))

    def covariance(self) -> np.ndarray:
        """Pairwise-complete covariances (n - 1 divisor; with weights sum(w) - 1) of the
        pooled groups, (T, T)."""
        p = self.pooled() if self.n.shape[0] > 1 else self
        n, sx, sxx, sxy = p.mass[0], p.sum_x[0], p.sum_xx[0], p.sum_xy[0]
        sy = sx.T
        with np.errstate(invalid="ignore", divide="ignore"):
            cov = (sxy - sx * sy / n) / (n - 1)
        return np.where((n > 1) & (p.n[0] > 1), cov, np.nan)

    def correlation(self) -> np.ndarray:
        """Pairwise-complete Pearson correlations of the pooled groups, (T, T)."""
        p = self.pooled() if self.n.shape[0] > 1 else self
        n, sx, sxx, sxy = p.mass[0], p.sum_x[0], p.sum_xx[0], p.sum_xy[0]
        sy, syy = sx.T, sxx.T
        with np.errstate(invalid="ignore", divide="ignore"):
            cxy = sxy - sx * sy / n
            cxx = sxx - sx * sx / n
            cyy = syy - sy * sy / n
            r = cxy / np.sqrt(cxx * cyy)
        counts = p.n[0]
        r = np.where(counts > 2, r, np.nan)
        np.fill_diagonal(r, np.where(np.diag(counts) > 1, 1.0, np.nan))
        return r

    def pair_counts(self) -> np.ndarray:
        return self.n.sum(axis=0)

    def leave_one_out(self):
        """Yield the pooled summary with each occupied replicate group left out in turn."""
        for g in occupied_groups(np.einsum("ktt->k", self.n)):
            yield self.pooled(drop_group=g)
