"""Temporal dependence: correlations between waves, the lag profile, memory beyond one
lag, tests of the correlation pattern and a decay fit.

Everything is a function of summaries: ``PairwiseMoments`` of the values and of the
within-wave ranks, ``PairwiseTables`` for ordinal measures, and the ML moments under
missing at random when the missingness area provides them. Uncertainty comes from the
delete-a-group jackknife over replicate groups, which is honest about a unit entering
many wave pairs at once.

The correlation that feeds the lag profile, the Markov summary, the band tests and the
decay fit is the *primary* one: polychoric for ordinal measures, pairwise-complete
Pearson otherwise (both have a leave-one-group-out copy for every replicate group).
The partial correlations of the Markov summary use the ML (EM) correlations when they
exist, with the jackknife spread of the primary estimate for their intervals.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from scipy import optimize

from paneldiag import distributions as dist
from paneldiag.ahead import computed
from paneldiag.diagnostics.attrition import coverage_shown
from paneldiag.diagnostics.polychoric import polychoric
from paneldiag.results import Result, plain
from paneldiag.summaries.contingency import PairwiseTables
from paneldiag.summaries.jackknife import jackknife_ci_bounded, jackknife_se
from paneldiag.summaries.pairwise import PairwiseMoments

LEVEL = 0.95
ORDINAL_MAX_CATEGORIES = 7   # auto rule: <= 7 distinct integer values is ordinal (common practice)
R_CLIP = 1 - 1e-9            # Fisher z of |r| = 1 is infinite; clip just inside
FLAT_MIN_B = 0.02            # decay fit: below this b (or rho) the decay is not identified
FLAT_MIN_RHO = 0.05
FLOOR_MIN_A = 0.02


# --------------------------------------------------------------------- correlations

@dataclass(frozen=True)
class CorrelationMatrix(Result):
    """One method's wave-by-wave correlation matrix and its pairwise counts.

    Disclosure control, in the JSON only: a count is withheld (null) where fewer than
    ``min_cell`` units are seen at both waves, or where it would give a count of 1 to
    ``min_cell`` - 1 units seen at only one of the two waves by subtraction from the
    diagonal (as the coverage table of the missingness section); a correlation is
    withheld where it rests on fewer than ``min_cell`` units."""

    matrix: np.ndarray   # (T, T)
    n_pairs: np.ndarray  # (T, T) units observed at both waves (diagonal: at the wave)
    min_cell: int = field(default=1, compare=False)

    def to_dict(self) -> dict:
        counts = np.asarray(self.n_pairs, dtype=float)
        shown = coverage_shown(counts, self.min_cell)
        return {"matrix": plain(np.where(counts >= self.min_cell, self.matrix, np.nan)),
                "n_pairs": [[int(c) if ok else None for c, ok in zip(row, oks)]
                            for row, oks in zip(counts, shown)]}


@dataclass(frozen=True)
class WaveCorrelations(Result):
    """Correlations between waves by several methods, and which one feeds the rest.

    ``replicates`` and ``replicate_n`` are the primary method's leave-one-group-out
    matrices and pair counts (K, T, T); ``partial_basis`` is the matrix the Markov
    summary conditions on, and ``partial_replicates`` its leave-one-group-out copies
    when they exist (EM fitted per left-out group). These are kept for the other
    sections and left out of the JSON.
    """

    waves: tuple[str, ...]
    scale: str                    # "ordinal" or "continuous"
    scale_basis: str              # why
    categories: tuple[int, ...] | None
    primary: str
    methods: dict
    notes: tuple[str, ...]
    replicates: np.ndarray = field(repr=False, compare=False)
    replicate_n: np.ndarray = field(repr=False, compare=False)
    partial_basis: str = "pearson_pairwise"
    partial_replicates: np.ndarray | None = field(default=None, repr=False, compare=False)
    min_cell: int = field(default=1, compare=False)   # disclosure control of the counts

    def to_dict(self) -> dict:
        return {"waves": list(self.waves), "scale": self.scale, "scale_basis": self.scale_basis,
                "categories": None if self.categories is None else list(self.categories),
                "primary": self.primary, "partial_basis": self.partial_basis,
                "methods": {k: v.to_dict() for k, v in self.methods.items()},
                "notes": list(self.notes)}

    @property
    def matrix(self) -> np.ndarray:
        return self.methods[self.primary].matrix

    @property
    def n_pairs(self) -> np.ndarray:
        return self.methods[self.primary].n_pairs


def decide_scale(tables: PairwiseTables | None, scale: str = "auto") -> tuple[str, str]:
    """Ordinal or continuous, and the reason. ``scale`` is "auto", "ordinal" or
    "continuous"; auto calls a measure ordinal when all its observed values are
    integers with at most ``ORDINAL_MAX_CATEGORIES`` distinct values over all waves
    (common practice)."""
    tabulated = tables is not None and tables.counts is not None
    n_cat = len(tables.categories()) if tabulated else 0
    if scale == "continuous":
        return "continuous", "set by option"
    if scale == "ordinal":
        if tabulated and n_cat >= 2:
            return "ordinal", f"set by option ({n_cat} categories)"
        why = tables.reason if tables is not None and tables.reason else "fewer than 2 categories"
        return "continuous", f"ordinal requested but not possible: {why}"
    if tabulated and 2 <= n_cat <= ORDINAL_MAX_CATEGORIES:
        return "ordinal", (f"auto: {n_cat} distinct integer values "
                           f"(at most {ORDINAL_MAX_CATEGORIES} counts as ordinal)")
    if tabulated and n_cat < 2:
        return "continuous", "auto: fewer than 2 distinct values"
    if tabulated:
        return "continuous", (f"auto: {n_cat} distinct integer values "
                              f"(more than {ORDINAL_MAX_CATEGORIES})")
    return "continuous", "auto: " + (tables.reason if tables is not None and tables.reason
                                     else "not integer-valued")


def _pearson_replicates(moments: PairwiseMoments) -> tuple[np.ndarray, np.ndarray]:
    reps = [part.correlation() for part in moments.leave_one_out()]
    ns = [part.pair_counts() for part in moments.leave_one_out()]
    return np.array(reps), np.array(ns)


def _polychoric_matrices(tables: PairwiseTables) -> tuple[np.ndarray, np.ndarray]:
    """Polychoric matrices of the pooled tables and of each leave-one-group-out copy:
    (K + 1, T, T) correlations and counts, index 0 the full data."""
    pooled = tables.pooled()
    t = pooled.shape[0]
    s_idx, t_idx = np.triu_indices(t, 1)
    stack = np.concatenate([pooled[None, s_idx, t_idx], tables.leave_one_out()[:, s_idx, t_idx]])
    if tables.weighted is None:
        rho, n = polychoric(stack)
    else:   # weighted tables give the pseudo-ML polychoric; the counts stay counts
        rho, _ = polychoric(np.concatenate([tables.pooled(True)[None, s_idx, t_idx],
                                            tables.leave_one_out(True)[:, s_idx, t_idx]]))
        n = stack.sum(axis=(-2, -1))
    copies = stack.shape[0]
    r = np.full((copies, t, t), np.nan)
    counts = np.zeros((copies, t, t))
    r[:, s_idx, t_idx] = r[:, t_idx, s_idx] = rho
    counts[:, s_idx, t_idx] = counts[:, t_idx, s_idx] = n
    diag_n = np.concatenate([pooled[None], tables.leave_one_out()])
    diag_n = np.einsum("kttij->kti", diag_n).sum(-1)
    counts[:, np.arange(t), np.arange(t)] = diag_n
    r[:, np.arange(t), np.arange(t)] = np.where(diag_n > 1, 1.0, np.nan)
    return r, counts


def wave_correlations(pairwise: PairwiseMoments, ranks: PairwiseMoments | None,
                      tables: PairwiseTables | None, wave_labels: tuple[str, ...],
                      em_covariance: np.ndarray | None = None, scale: str = "auto",
                      em_replicates: np.ndarray | None = None,
                      min_cell: int = 1) -> WaveCorrelations:
    """Correlations between every pair of waves, by method.

    - ``pearson_pairwise``: Pearson's r over the units observed at both waves.
    - ``pearson_em``: the correlation implied by the ML covariance under missing at
      random (Dempster, Laird and Rubin 1977), when given.
    - ``spearman``: Spearman's rank correlation (Spearman 1904), as Pearson's r of
      within-wave midranks over the units observed at both waves (see
      ``paneldiag.summaries.ranks`` for the ranking rule under missing values).
    - ``polychoric`` (ordinal measures): two-step ML polychoric correlation of each
      pairwise table (Olsson 1979).

    References
    ----------
    Dempster, A. P., Laird, N. M. and Rubin, D. B. (1977). Maximum likelihood from
    incomplete data via the EM algorithm. J. Royal Statistical Society B 39, 1-38.
    Olsson, U. (1979). Maximum likelihood estimation of the polychoric correlation
    coefficient. Psychometrika 44, 443-460.
    Spearman, C. (1904). The proof and measurement of association between two things.
    American Journal of Psychology 15, 72-101.
    """
    kind, basis = decide_scale(tables, scale)
    counts = pairwise.pair_counts()
    methods = {"pearson_pairwise": CorrelationMatrix(pairwise.correlation(), counts)}
    notes = []
    if em_covariance is not None:
        sd = np.sqrt(np.diag(em_covariance))
        with np.errstate(invalid="ignore", divide="ignore"):
            r_em = em_covariance / np.outer(sd, sd)
        methods["pearson_em"] = CorrelationMatrix(r_em, counts)
        notes.append("pearson_em uses every unit under missing at random; its n_pairs are "
                     "the units observed at both waves, for reference")
    if ranks is not None:
        methods["spearman"] = CorrelationMatrix(ranks.correlation(), ranks.pair_counts())
    categories = None
    if kind == "ordinal":
        r_all, n_all = _polychoric_matrices(tables)
        methods["polychoric"] = CorrelationMatrix(r_all[0], n_all[0])
        reps, rep_n = r_all[1:], n_all[1:]
        primary = "polychoric"
        categories = tuple(int(c) for c in tables.categories())
    else:
        reps, rep_n = _pearson_replicates(pairwise)
        primary = "pearson_pairwise"
    partial_basis = primary if kind == "ordinal" or em_covariance is None else "pearson_em"
    partial_reps = em_replicates if partial_basis == "pearson_em" else None
    methods = {name: replace(m, min_cell=min_cell) for name, m in methods.items()}
    return WaveCorrelations(waves=tuple(wave_labels), scale=kind, scale_basis=basis,
                            categories=categories, primary=primary, methods=methods,
                            notes=tuple(notes), replicates=reps, replicate_n=rep_n,
                            partial_basis=partial_basis, partial_replicates=partial_reps,
                            min_cell=min_cell)


# ---------------------------------------------------------------------- lag profile

def fisher_z(r):
    return np.arctanh(np.clip(r, -R_CLIP, R_CLIP))


def _band_mean_z(r: np.ndarray, n: np.ndarray, s_idx: np.ndarray, t_idx: np.ndarray):
    """Fisher-z mean over wave pairs weighted by n - 3, over leading axes: (...,)."""
    z = fisher_z(r[..., s_idx, t_idx])
    w = np.maximum(n[..., s_idx, t_idx] - 3.0, 0.0)
    ok = np.isfinite(z) & (w > 0)
    w = np.where(ok, w, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, w * np.where(ok, z, 0.0), 0.0).sum(-1) / w.sum(-1)


@dataclass(frozen=True)
class LagRow(Result):
    basis: str                   # "lag" (waves apart) or "time" (time distance)
    lag: int | None              # waves apart (None when a time distance spans several)
    time_distance: float | None  # None when a lag spans several distances
    wave_pairs: int
    n_pairs: int | None          # sum over the wave pairs of the units seen at both;
                                 # None when one of them is withheld (disclosure control)
    mean_r: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class LagProfile(Result):
    """Rows by lag (and by time distance under unequal spacing); the JSON is the list."""

    rows: tuple[LagRow, ...]
    spacing: str
    replicate_r: np.ndarray = field(repr=False, compare=False)   # (K, rows)
    weights: np.ndarray = field(repr=False, compare=False)       # (rows,) sum of n - 3

    def to_dict(self) -> list:
        return [row.to_dict() for row in self.rows]

    def by(self, basis: str) -> list[LagRow]:
        return [row for row in self.rows if row.basis == basis]


def _distance_key(d: float) -> float:
    return float(np.round(d, 9))


def lag_bands(times: np.ndarray) -> tuple[str, list[tuple[str, int | None, float | None, list]]]:
    """The wave pairs of each lag (and, if spacing is unequal, of each time distance)."""
    times = np.asarray(times, dtype=float)
    t = len(times)
    gaps = np.diff(times)
    equal = t < 3 or np.allclose(gaps, gaps[0], rtol=1e-9, atol=0)
    bands = []
    for k in range(1, t):
        pairs = [(s, s + k) for s in range(t - k)]
        dists = {_distance_key(times[b] - times[a]) for a, b in pairs}
        bands.append(("lag", k, dists.pop() if len(dists) == 1 else None, pairs))
    if not equal:
        by_d: dict[float, list] = {}
        for s in range(t):
            for u in range(s + 1, t):
                by_d.setdefault(_distance_key(times[u] - times[s]), []).append((s, u))
        for d in sorted(by_d):
            lags = {b - a for a, b in by_d[d]}
            bands.append(("time", lags.pop() if len(lags) == 1 else None, d, by_d[d]))
    return ("equal" if equal else "unequal"), bands


def lag_profile(corr: WaveCorrelations, times: np.ndarray, level: float = LEVEL) -> LagProfile:
    """Average correlation by lag (and by time distance when waves are unequally spaced).

    Each band's correlations are averaged on Fisher's z scale with weights n - 3 (the
    inverse sampling variance of z; Fisher 1921; Hedges and Olkin 1985, ch. 11). Wave
    pairs of one band share units, so the interval does not use 1 / sum(n - 3): it is
    the delete-a-group jackknife over replicate groups (Kott 2001) of the z average,
    with t quantiles on K - 1 degrees of freedom, mapped back to r.

    References
    ----------
    Fisher, R. A. (1921). On the "probable error" of a coefficient of correlation
    deduced from a small sample. Metron 1, 3-32.
    Hedges, L. V. and Olkin, I. (1985). Statistical Methods for Meta-Analysis.
    Academic Press.
    Kott, P. S. (2001). The delete-a-group jackknife. Journal of Official Statistics
    17, 521-526.
    """
    spacing, bands = lag_bands(times)
    r, n = corr.matrix, corr.n_pairs
    shown = coverage_shown(np.asarray(n, dtype=float), corr.min_cell)
    reps, rep_n = corr.replicates, corr.replicate_n
    k = reps.shape[0]
    q = dist.t_ppf(0.5 + level / 2, k - 1) if k > 1 else np.nan
    rows, rep_means, weights = [], [], []
    for basis, lag, distance, pairs in bands:  # a loop over lag bands
        s_idx, t_idx = (np.array(v) for v in zip(*pairs))
        z = _band_mean_z(r, n, s_idx, t_idx)
        z_reps = _band_mean_z(reps, rep_n, s_idx, t_idx)
        se = jackknife_se(z, z_reps)
        rows.append(LagRow(basis=basis, lag=lag, time_distance=distance, wave_pairs=len(pairs),
                           n_pairs=int(n[s_idx, t_idx].sum())
                           if shown[s_idx, t_idx].all() else None, mean_r=float(np.tanh(z)),
                           ci_low=float(np.tanh(z - q * se)), ci_high=float(np.tanh(z + q * se))))
        rep_means.append(np.tanh(z_reps))
        weights.append(float(np.maximum(n[s_idx, t_idx] - 3.0, 0).sum()))
    return LagProfile(rows=tuple(rows), spacing=spacing,
                      replicate_r=np.array(rep_means).T.reshape(k, len(rows)),
                      weights=np.array(weights))


# ------------------------------------------------------------------- Markov summary

MARKOV_MAX_LAG = 10   # memory beyond lag 1 is judged from lags 2..10: cost O(T L^4), not O(T^5)


def partial_beyond(r: np.ndarray, max_lag: int = MARKOV_MAX_LAG) -> np.ndarray:
    """Partial correlations of waves s and s + k given the waves between them, for
    2 <= k <= ``max_lag``, over leading axes: (..., T, T), NaN elsewhere. From the
    inverse of the correlation block of waves s..s+k: -P_0m / sqrt(P_00 P_mm), the blocks
    of one lag inverted together."""
    t = r.shape[-1]
    out = np.full(r.shape, np.nan)
    for k in range(2, min(t, max_lag + 1)):  # a loop over lags
        starts = np.arange(t - k)
        idx = starts[:, None] + np.arange(k + 1)
        block = r[..., idx[:, :, None], idx[:, None, :]]          # (..., S, k+1, k+1)
        ok = np.all(np.isfinite(block), axis=(-2, -1))
        safe = np.where(ok[..., None, None], block, np.eye(k + 1))
        with np.errstate(invalid="ignore", divide="ignore"):
            try:
                p = np.linalg.inv(safe)
            except np.linalg.LinAlgError:
                p = np.full(safe.shape, np.nan)
                for at in np.ndindex(safe.shape[:-2]):
                    try:
                        p[at] = np.linalg.inv(safe[at])
                    except np.linalg.LinAlgError:
                        pass
            d0, dm = p[..., 0, 0], p[..., -1, -1]
            value = -p[..., 0, -1] / np.sqrt(d0 * dm)
        value = np.where(ok & (d0 > 0) & (dm > 0), value, np.nan)
        out[..., starts, starts + k] = out[..., starts + k, starts] = value
    return out


@dataclass(frozen=True)
class MarkovRow(Result):
    lag: int
    wave_pairs: int
    mean_partial_r: float
    min_partial_r: float
    max_partial_r: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class MarkovSummary(Result):
    basis: str
    interval_basis: str
    rows: tuple[MarkovRow, ...]
    partial_matrix: np.ndarray


def markov_summary(corr: WaveCorrelations, level: float = LEVEL) -> MarkovSummary:
    """Memory beyond one lag: partial correlations of waves s and s + k given the waves
    between them, summarised by k (mean on Fisher's z scale, range).

    Lags 2 to ``MARKOV_MAX_LAG`` are summarised (memory beyond ten waves is not needed
    to tell a first-order process from one with more memory, and the cost grows with
    the fourth power of the lag). Under a first-order (Markov, simplex) process without
    measurement error these partial correlations are zero (Guttman 1954; Joreskog 1970); a stable trait, or
    error in the measure, leaves them positive. The interval for each mean is the
    delete-a-group jackknife (Kott 2001) of the same mean, from the basis matrix's own
    leave-one-group-out copies when they exist (EM refitted without each group), else
    from the primary correlation's copies, centred on the point estimate.

    References
    ----------
    Guttman, L. (1954). A new approach to factor analysis: the radex. In Lazarsfeld
    (ed.), Mathematical Thinking in the Social Sciences. Free Press.
    Joreskog, K. G. (1970). Estimation and testing of simplex models. British Journal
    of Mathematical and Statistical Psychology 23, 121-145.
    Kott, P. S. (2001). The delete-a-group jackknife. J. Official Statistics 17, 521-526.
    """
    point = partial_beyond(corr.methods[corr.partial_basis].matrix)
    if corr.partial_replicates is not None:
        own, reps, source = point, partial_beyond(corr.partial_replicates), corr.partial_basis
    else:
        own, reps, source = partial_beyond(corr.matrix), partial_beyond(corr.replicates), \
            corr.primary
    t = point.shape[-1]
    k_groups = reps.shape[0]
    q = dist.t_ppf(0.5 + level / 2, k_groups - 1) if k_groups > 1 else np.nan
    rows = []
    for k in range(2, min(t, MARKOV_MAX_LAG + 1)):
        s_idx = np.arange(t - k)
        vals = point[s_idx, s_idx + k]
        z_point = np.nanmean(fisher_z(vals)) if np.isfinite(vals).any() else np.nan
        z_reps = np.array([np.mean(fisher_z(rep[s_idx, s_idx + k])) for rep in reps])
        z_own = np.mean(fisher_z(own[s_idx, s_idx + k]))
        se = jackknife_se(z_own, z_reps)
        rows.append(MarkovRow(lag=k, wave_pairs=len(s_idx), mean_partial_r=float(np.tanh(z_point)),
                              min_partial_r=float(np.nanmin(vals)) if np.isfinite(vals).any() else np.nan,
                              max_partial_r=float(np.nanmax(vals)) if np.isfinite(vals).any() else np.nan,
                              ci_low=float(np.tanh(z_point - q * se)),
                              ci_high=float(np.tanh(z_point + q * se))))
    interval = f"jackknife over replicate groups of the {source} estimate"
    return MarkovSummary(basis=corr.partial_basis, interval_basis=interval, rows=tuple(rows),
                         partial_matrix=point)


# ----------------------------------------------------------------------- the tests

@dataclass(frozen=True)
class TestResult(Result):
    test: str
    statistic: float
    df: float | tuple | None
    p_value: float
    note: str = ""


def lawley_equal_correlations(r: np.ndarray, n: float) -> TestResult:
    """Lawley's chi-square test that all correlations between the waves are equal
    (compound symmetry of the correlation matrix).

    With p waves, mean correlation rbar, column means rbar_k of the off-diagonal
    entries, gamma = (p-1)^2 [1 - (1-rbar)^2] / (p - (p-2)(1-rbar)^2):
    T = (N-1)/(1-rbar)^2 [sum_{i<k} (r_ik - rbar)^2 - gamma sum_k (rbar_k - rbar)^2],
    chi-square with (p+1)(p-2)/2 degrees of freedom for large N under normality.

    References
    ----------
    Lawley, D. N. (1963). On testing a set of correlation coefficients for equality.
    Annals of Mathematical Statistics 34, 149-151.
    """
    p = r.shape[0]
    if p < 3 or not np.all(np.isfinite(r)) or not n > 1:
        return TestResult("lawley_1963", np.nan, None, np.nan,
                          "needs 3 or more waves and every correlation defined")
    iu = np.triu_indices(p, 1)
    rbar = r[iu].mean()
    off = r - np.eye(p)
    rbar_k = off.sum(axis=0) / (p - 1)
    gamma = (p - 1) ** 2 * (1 - (1 - rbar) ** 2) / (p - (p - 2) * (1 - rbar) ** 2)
    stat = (n - 1) / (1 - rbar) ** 2 * (((r[iu] - rbar) ** 2).sum()
                                         - gamma * ((rbar_k - rbar) ** 2).sum())
    df = (p + 1) * (p - 2) // 2
    return TestResult("lawley_1963", float(stat), df, float(dist.chi2_sf(stat, df)))


def adjusted_wald(diff: np.ndarray, rep: np.ndarray, name: str) -> TestResult:
    """Wald test of C theta = 0 with the delete-a-group jackknife covariance of theta,
    given the contrasts' values ``diff`` = C theta (q,) and their values in each
    leave-one-group-out copy ``rep`` (K, q) (``equality_contrasts``).

    With q contrasts and d = K - 1 degrees of freedom of the covariance, the adjusted
    statistic F = (d - q + 1) / (d q) W is referred to F(q, d - q + 1) (Korn and
    Graubard 1990). When q > d - 1 the covariance cannot support a joint test; then
    the q single contrasts are t-tested (t on d df) and combined by Bonferroni, the
    alternative Korn and Graubard recommend.

    References
    ----------
    Korn, E. L. and Graubard, B. I. (1990). Simultaneous testing of regression
    coefficients with complex survey data: use of Bonferroni t statistics. The
    American Statistician 44, 270-276.
    """
    q = len(diff)
    k = rep.shape[0]
    d = k - 1
    if q == 0 or k < 3 or not np.all(np.isfinite(diff)) or not np.all(np.isfinite(rep)):
        return TestResult(name, np.nan, None, np.nan, "not computable")
    centred = rep - rep.mean(axis=0)
    if q <= d - 1:
        cov = (k - 1) / k * centred.T @ centred
        try:
            w = float(diff @ np.linalg.solve(cov, diff))
        except np.linalg.LinAlgError:
            w = np.nan
        f = (d - q + 1) / (d * q) * w
        return TestResult(name, f, (q, d - q + 1), float(dist.f_sf(f, q, d - q + 1)),
                          "adjusted Wald F, jackknife covariance")
    variances = (k - 1) / k * (centred ** 2).sum(axis=0)   # only the diagonal is needed
    with np.errstate(invalid="ignore", divide="ignore"):
        t_vals = np.abs(diff) / np.sqrt(variances)
    p = float(min(1.0, q * 2 * dist.t_sf(np.nanmax(t_vals), d)))
    return TestResult(name, float(np.nanmax(t_vals)), (q, d), p,
                      "Bonferroni over single-contrast t tests (too many contrasts for a "
                      "joint test with this many replicate groups)")


def equality_contrasts(estimate: np.ndarray, replicates: np.ndarray, positions
                       ) -> tuple[np.ndarray, np.ndarray]:
    """The contrasts theta_{p_i} - theta_{p_0} (equality of the entries at
    ``positions``) in the estimate and in each copy (K, ...): by indexing, not by a
    dense contrast matrix. Not computable (NaN) when any entry of the estimate or the
    copies is undefined."""
    positions = np.asarray(positions)
    diff = estimate[positions[1:]] - estimate[positions[0]]
    rep = replicates[:, positions[1:]] - replicates[:, positions[:1]]
    if not (np.all(np.isfinite(estimate)) and np.all(np.isfinite(replicates))):
        diff = np.full_like(diff, np.nan)
    return diff, rep


@dataclass(frozen=True)
class BandTest(Result):
    basis: str                   # "lag" or "time", as in the lag profile
    lag: int | None
    time_distance: float | None
    wave_pairs: int
    statistic: float
    df: tuple | None
    p_value: float


@dataclass(frozen=True)
class Stationarity(Result):
    equal_correlations: TestResult
    lag_bands: TestResult
    bands: tuple[BandTest, ...]
    equal_variances: TestResult


def stationarity_tests(corr: WaveCorrelations, pairwise: PairwiseMoments,
                       times: np.ndarray) -> Stationarity:
    """Three tests of a stationary dependence pattern.

    - Equal correlations at all lags (compound symmetry): Lawley (1963), on the
      pairwise-complete Pearson matrix with N the harmonic mean of the pair counts.
    - Equal correlations within each lag band (stationarity of the correlation
      structure, a Toeplitz pattern; bands of equal time distance when the waves are
      unequally spaced, as in the lag profile): Fisher z of the band's wave pairs, equality of
      all of them by an adjusted Wald test with the jackknife covariance (Korn and
      Graubard 1990), per band and jointly (all bands at once; Bonferroni over the
      bands when there are too many contrasts for the replicate groups).
    - Equal variances across waves: the waves are measured on the same units, so
      tests for independent groups (Levene, Brown-Forsythe, Bartlett) do not apply.
      Instead the log variances of the waves, whose jackknife covariance carries the
      dependence between waves, are tested for equality by the same adjusted Wald
      test; the jackknifed log variance is Miller's (1968) robust test of equal
      variances, here with a delete-a-group jackknife.

    References
    ----------
    Lawley, D. N. (1963). On testing a set of correlation coefficients for equality.
    Annals of Mathematical Statistics 34, 149-151.
    Korn, E. L. and Graubard, B. I. (1990). The American Statistician 44, 270-276.
    Miller, R. G. (1968). Jackknifing variances. Annals of Mathematical Statistics 39,
    567-582.
    """
    r_p = corr.methods["pearson_pairwise"].matrix
    n_p = corr.methods["pearson_pairwise"].n_pairs
    t = r_p.shape[0]
    iu = np.triu_indices(t, 1)
    with np.errstate(divide="ignore"):
        n_h = len(iu[0]) / np.sum(1.0 / n_p[iu]) if np.all(n_p[iu] > 0) else np.nan
    lawley = lawley_equal_correlations(r_p, n_h)
    lawley = TestResult(lawley.test, lawley.statistic, lawley.df, lawley.p_value,
                        "pearson_pairwise matrix; N = harmonic mean of pair counts "
                        f"({n_h:.1f})" if np.isfinite(lawley.statistic) else lawley.note)

    # bands on Fisher z of the primary correlation
    z = fisher_z(corr.matrix[iu])
    z_reps = fisher_z(corr.replicates[:, iu[0], iu[1]])
    spacing, all_bands = lag_bands(times)
    basis = "time" if spacing == "unequal" else "lag"
    position = {pair: i for i, pair in enumerate(zip(iu[0], iu[1]))}
    bands, joint_rows = [], []
    for kind, lag, distance, pairs in all_bands:  # a loop over bands
        if kind != basis or len(pairs) < 2:
            continue
        positions = [position[pair] for pair in pairs]
        contrast = equality_contrasts(z, z_reps, positions)
        res = adjusted_wald(*contrast, f"band_{lag}")
        bands.append(BandTest(kind, lag, distance, len(positions), res.statistic, res.df,
                              res.p_value))
        joint_rows.append(contrast)
    if joint_rows:
        joint = adjusted_wald(np.concatenate([d for d, _ in joint_rows]),
                              np.hstack([r for _, r in joint_rows]), "equal_within_lag_bands")
        if joint.note.startswith("Bonferroni"):
            ps = [b.p_value for b in bands if np.isfinite(b.p_value)]
            p = min(1.0, len(ps) * min(ps)) if ps else np.nan
            joint = TestResult("equal_within_lag_bands",
                               max((b.statistic for b in bands if np.isfinite(b.statistic)),
                                   default=np.nan), None, p,
                               "Bonferroni over the per-band tests (too many contrasts for a "
                               "joint test with this many replicate groups)")
    else:
        joint = TestResult("equal_within_lag_bands", np.nan, None, np.nan,
                           "needs 3 or more waves")

    # variances: log variance per wave, full and leave-one-group-out
    logv = _log_variances(pairwise.pooled())
    logv_reps = np.array([_log_variances(part) for part in pairwise.leave_one_out()])
    variances = adjusted_wald(*equality_contrasts(logv, logv_reps, range(t)),
                              "equal_variances")
    return Stationarity(lawley, joint, tuple(bands), variances)


def _log_variances(moments: PairwiseMoments) -> np.ndarray:
    d = np.arange(moments.n.shape[1])
    n = moments.mass[0, d, d]   # weight sums with weights (the sums are weighted)
    sx, sxx = moments.sum_x[0, d, d], moments.sum_xx[0, d, d]
    with np.errstate(invalid="ignore", divide="ignore"):
        var = (sxx - sx * sx / n) / (n - 1)
        return np.where((n > 1) & (var > 0), np.log(var), np.nan)


# ------------------------------------------------------------------------ decay fit

def _fit_given_rho(x: np.ndarray, r: np.ndarray, w: np.ndarray, fix: str | None = None):
    """Bounded weighted least squares of r = a + b x (a, b >= 0, a + b <= 1) for each
    column of x (x: (G, m) for G values of rho). ``fix``: None, "b0" (b = 0) or "a0"
    (a = 0). Returns (a, b, sse) arrays (G,). The optimum of this convex problem is
    interior or on an edge, so the best feasible of the clipped edge optima and the
    unconstrained optimum is exact."""
    sw = w.sum()
    cand = []

    def sse(a, b):
        return (w * (r - a[:, None] - b[:, None] * x) ** 2).sum(-1)

    def add(a, b):
        a, b = np.broadcast_to(a, x.shape[:1]).astype(float), np.broadcast_to(b, x.shape[:1]).astype(float)
        ok = (a >= -1e-12) & (b >= -1e-12) & (a + b <= 1 + 1e-12)
        cand.append((a, b, np.where(ok, sse(a, b), np.inf)))

    mean_r = (w * r).sum() / sw
    if fix != "a0":
        add(np.clip(mean_r, 0, 1), 0.0)                                   # b = 0 edge
    if fix != "b0":
        sxx = (w * x * x).sum(-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            b_only = np.clip(np.where(sxx > 0, (w * x * r).sum(-1) / sxx, 0.0), 0, 1)
        add(0.0, b_only)                                                  # a = 0 edge
        u = 1 - x
        suu = (w * u * u).sum(-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            a_edge = np.clip(np.where(suu > 0, (w * u * (r - x)).sum(-1) / suu, 0.0), 0, 1)
        if fix is None:
            add(a_edge, 1 - a_edge)                                       # a + b = 1 edge
            mx = (w * x).sum(-1) / sw
            vx = (w * (x - mx[:, None]) ** 2).sum(-1)
            with np.errstate(invalid="ignore", divide="ignore"):
                b = (w * (x - mx[:, None]) * r).sum(-1) / vx
            b = np.where(vx > 1e-14, b, 0.0)
            add(mean_r - b * mx, b)                                       # interior
        else:  # a = 0: the a + b = 1 edge is b = 1
            add(0.0, 1.0)
    add(0.0, 0.0)
    a = np.array([c[0] for c in cand])
    b = np.array([c[1] for c in cand])
    s = np.array([c[2] for c in cand])
    best = np.argmin(s, axis=0)
    cols = np.arange(x.shape[0])
    return a[best, cols], b[best, cols], s[best, cols]


_RHO_GRID = np.linspace(0.0, 0.999, 1000)


def fit_decay(d: np.ndarray, r: np.ndarray, w: np.ndarray, fix: str | None = None):
    """(a, b, rho, sse) of r(d) = a + b rho^d: a fine grid over rho, then a bounded
    one-dimensional refinement of the profile sum of squares around the best point."""
    if fix == "b0":
        a, b, s = _fit_given_rho(np.zeros((1, len(d))), r, w, fix)
        return float(a[0]), 0.0, np.nan, float(s[0])
    x = _RHO_GRID[:, None] ** d[None, :]
    a, b, s = _fit_given_rho(x, r, w, fix)
    i = int(np.argmin(s))
    lo, hi = _RHO_GRID[max(i - 1, 0)], _RHO_GRID[min(i + 1, len(_RHO_GRID) - 1)]

    def profile(rho):
        return float(_fit_given_rho((rho ** d)[None, :], r, w, fix)[2][0])

    best = optimize.minimize_scalar(profile, bounds=(lo, hi), method="bounded",
                                    options={"xatol": 1e-8})
    rho = float(best.x) if best.fun <= s[i] else float(_RHO_GRID[i])
    a, b, s = _fit_given_rho((rho ** d)[None, :], r, w, fix)
    return float(a[0]), float(b[0]), rho, float(s[0])


@dataclass(frozen=True)
class Estimate(Result):
    estimate: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class ModelFit(Result):
    a: float
    b: float
    rho: float
    sse: float
    df: int
    aic: float


@dataclass(frozen=True)
class DecayFit(Result):
    distance: str                 # "lag" (waves apart) or "time" (time distance)
    points: int
    shape: str                    # flat / decay_to_zero / decay_to_floor / not_fitted
    identified: bool              # b and rho identified (the profile is not flat)
    reason: str
    a: Estimate | None
    b: Estimate | None
    rho: Estimate | None
    stable_share: Estimate | None
    intercept: Estimate | None
    models: dict
    flat_vs_full: TestResult | None
    pure_decay_vs_full: TestResult | None
    weights: str


def decay_fit(profile: LagProfile, level: float = LEVEL) -> DecayFit:
    """Fit r(d) = a + b rho^d to the lag profile (d = lag in waves, or time distance
    when waves are unequally spaced), with a, b >= 0, 0 <= rho < 1, a + b <= 1.

    ``a`` is the floor the correlations decay to (a stable trait), ``b`` the part that
    decays with carry-over ``rho`` per unit of d (a first-order autoregression), ``a + b``
    the lag-0 intercept (below 1 when the measure has error, as in the quasi-simplex,
    and the stable share is a / (a + b). This is the correlation pattern of the
    trait-plus-autoregression ("stable trait, autoregressive trait, state") model of
    Kenny and Zautra (1995). Points are weighted by sum(n - 3) / (1 - r^2)^2, the
    inverse variance of the band mean on the r scale under independence (delta
    method from Fisher's z). The full fit is compared with the flat profile (b = 0)
    and with pure decay (a = 0) by F ratios of weighted sums of squares (nested
    least squares; approximate, because neighbouring lags share units) and by AIC.
    Intervals: the delete-a-group jackknife, refitting each leave-one-group-out
    profile (Kott 2001), formed on the logit scale of each parameter's range when the
    estimate and every replicate lie inside it (Efron and Tibshirani 1993, An
    Introduction to the Bootstrap, ch. 12), else clipped to the bounds. The shape: flat when b or rho is near 0 or b's jackknife
    interval reaches 0 (then b and rho are not identified); decay to zero when a is
    near 0 or its interval reaches 0; otherwise decay to a floor. The jackknife
    intervals decide rather than the F ratios: the profile has few points, so the F
    ratios have few residual degrees of freedom, while the jackknife uses the spread
    over all replicate groups.

    References
    ----------
    Kenny, D. A. and Zautra, A. (1995). The trait-state-error model for multiwave
    data. Journal of Consulting and Clinical Psychology 63, 52-59.
    Kott, P. S. (2001). The delete-a-group jackknife. J. Official Statistics 17, 521-526.
    """
    basis = "time" if profile.spacing == "unequal" else "lag"
    rows = [row for row in profile.rows if row.basis == basis]
    idx = [i for i, row in enumerate(profile.rows) if row.basis == basis]
    d = np.array([row.time_distance if basis == "time" else row.lag for row in rows], float)
    r = np.array([row.mean_r for row in rows])
    ok = np.isfinite(r) & (profile.weights[idx] > 0)
    weights_note = "sum over wave pairs of (n - 3), divided by (1 - r^2)^2"
    empty = dict(a=None, b=None, rho=None, stable_share=None, intercept=None, models={},
                 flat_vs_full=None, pure_decay_vs_full=None, weights=weights_note)
    m = int(ok.sum())
    if m < 4:
        return DecayFit(basis, m, "not_fitted", False,
                        "needs correlations at 4 or more distances", **empty)
    d, r = d[ok], r[ok]
    w = profile.weights[idx][ok] / (1 - np.clip(r, -R_CLIP, R_CLIP) ** 2) ** 2
    w = w / w.mean()
    full = fit_decay(d, r, w)
    flat = fit_decay(d, r, w, "b0")
    pure = fit_decay(d, r, w, "a0")

    def aic(sse, p):
        return float(m * np.log(max(sse, 1e-300) / m) + 2 * p)

    models = {"full": ModelFit(*full, df=m - 3, aic=aic(full[3], 3)),
              "flat": ModelFit(*flat, df=m - 1, aic=aic(flat[3], 1)),
              "pure_decay": ModelFit(*pure, df=m - 2, aic=aic(pure[3], 2))}
    resid = full[3] / (m - 3)

    def f_test(sse0, extra, name):
        with np.errstate(invalid="ignore", divide="ignore"):
            f = (max(sse0 - full[3], 0.0) / extra) / resid if resid > 0 else np.inf
        p = float(dist.f_sf(f, extra, m - 3)) if np.isfinite(f) else 0.0
        return TestResult(name, float(f), (extra, m - 3), p, "nested weighted least squares")

    t_flat = f_test(flat[3], 2, "flat_vs_full")
    t_pure = f_test(pure[3], 1, "pure_decay_vs_full")

    reps = profile.replicate_r[:, idx][:, ok]
    fits = np.array([fit_decay(d, rep, w) if np.all(np.isfinite(rep)) else (np.nan,) * 4
                     for rep in reps])
    a, b, rho = full[0], full[1], full[2]
    with np.errstate(invalid="ignore", divide="ignore"):
        share_reps = fits[:, 0] / (fits[:, 0] + fits[:, 1])
    k = reps.shape[0]
    q = dist.t_ppf(0.5 + level / 2, k - 1) if k > 1 else np.nan

    def est(value, replicate_values, low=0.0, high=1.0):
        # on the logit scale inside the bounds; at a bound, clipped to it
        lo, hi, _ = jackknife_ci_bounded(value, replicate_values, level, low, high)
        return Estimate(float(value), float(np.clip(lo, low, high)),
                        float(np.clip(hi, low, high)))

    se_a, se_b = jackknife_se(a, fits[:, 0]), jackknife_se(b, fits[:, 1])
    b_above_zero = bool(b - q * se_b > 0)   # NaN compares False: not shown to be above 0
    a_above_zero = bool(a - q * se_a > 0)
    flat_shape = b < FLAT_MIN_B or rho < FLAT_MIN_RHO or not b_above_zero
    if flat_shape:
        level_a = flat[0]
        flat_reps = np.array([fit_decay(d, rep, w, "b0")[0] if np.all(np.isfinite(rep))
                              else np.nan for rep in reps])
        a_est = est(level_a, flat_reps)
        return DecayFit(basis, m, "flat", False,
                        "carry-over not identified: the correlations do not decay with "
                        "distance (b or rho near 0, or b's interval reaches 0)",
                        a=a_est, b=None, rho=None, stable_share=Estimate(1.0, np.nan, np.nan),
                        intercept=a_est, models=models, flat_vs_full=t_flat,
                        pure_decay_vs_full=t_pure, weights=weights_note)
    to_zero = a < FLOOR_MIN_A or not a_above_zero
    shape = "decay_to_zero" if to_zero else "decay_to_floor"
    reason = ("the correlations decay towards zero (the floor a is near 0 or its interval "
              "reaches 0)" if to_zero else "the correlations decay to a floor above zero")
    with np.errstate(invalid="ignore", divide="ignore"):
        share = a / (a + b)
    return DecayFit(basis, m, shape, True, reason, a=est(a, fits[:, 0]), b=est(b, fits[:, 1]),
                    rho=est(rho, fits[:, 2], 0.0, 0.999999), stable_share=est(share, share_reps),
                    intercept=est(a + b, fits[:, 0] + fits[:, 1]), models=models,
                    flat_vs_full=t_flat, pure_decay_vs_full=t_pure, weights=weights_note)


# ------------------------------------------------------------------ screen sections

def _em_replicates(ctx) -> tuple[np.ndarray, np.ndarray] | None:
    """ML covariance under MAR of all units and leave-one-group-out EM correlations
    (K, T, T), from the per-group pattern summary, when the screen keeps one and the
    measure has missing values. Uses the shared, cached EM basis of the reliability
    area, so the fits are made once per measure."""
    try:
        from paneldiag.diagnostics.reliability import em_basis
        from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments
    except ImportError:
        return None
    if ReplicatePatternMoments not in ctx.summaries or not np.isnan(ctx.values).any():
        return None
    basis = em_basis(ctx.summary(ReplicatePatternMoments),
                     getattr(ctx.results.get("missingness"), "em", None))
    if basis is None:
        return None
    with np.errstate(invalid="ignore", divide="ignore"):
        reps = np.array([part.correlation() for part in basis.leave_one_out()])
    return basis.covariance(), reps


def _em_covariance(ctx) -> np.ndarray | None:
    """The ML covariance under MAR from the pattern summary, when the screen keeps one."""
    try:
        from paneldiag.diagnostics.missingness import em_moments
        from paneldiag.summaries.patterns import PatternMoments
    except ImportError:
        return None
    if PatternMoments not in ctx.summaries:
        return None
    try:
        em = em_moments(ctx.summary(PatternMoments))
    except np.linalg.LinAlgError:   # too few units for the waves: no ML moments
        return None
    if not em.converged or not np.all(np.isfinite(np.diag(em.covariance))):
        return None
    return em.covariance


def measure_rank_moments(ctx) -> PairwiseMoments:
    """Pairwise moments of the measure's within-wave ranks (work a screen starts ahead)."""
    from paneldiag.summaries import relative_weights, replicate_groups
    from paneldiag.summaries.ranks import rank_moments
    groups = replicate_groups(ctx.panel.unit_ids, ctx.options.n_replicates)
    return rank_moments(ctx.values, groups, ctx.panel.wave_times, ctx.options.n_replicates,
                        ctx.options.chunk_units, relative_weights(ctx.panel.weights))


def correlation_section(ctx) -> WaveCorrelations | None:
    if ctx.panel.n_waves < 2:
        return None
    pairwise = ctx.summary(PairwiseMoments)
    tables = ctx.summaries.get(PairwiseTables)
    ranks = computed(ctx, measure_rank_moments)
    with_reps = _em_replicates(ctx)
    em_cov, em_reps = with_reps if with_reps is not None else (_em_covariance(ctx), None)
    return wave_correlations(pairwise, ranks, tables, ctx.panel.wave_labels,
                             em_covariance=em_cov, em_replicates=em_reps,
                             scale=getattr(ctx.options, "scale", "auto"),
                             min_cell=getattr(ctx.options, "min_cell", 5))


def lag_profile_section(ctx) -> LagProfile | None:
    corr = ctx.results.get("correlation")
    return None if corr is None else lag_profile(corr, ctx.panel.wave_times)


def markov_section(ctx) -> MarkovSummary | None:
    corr = ctx.results.get("correlation")
    return None if corr is None or ctx.panel.n_waves < 3 else markov_summary(corr)


def stationarity_section(ctx) -> Stationarity | None:
    corr = ctx.results.get("correlation")
    if corr is None or ctx.panel.n_waves < 3:
        return None
    return stationarity_tests(corr, ctx.summary(PairwiseMoments), ctx.panel.wave_times)


def decay_fit_section(ctx) -> DecayFit | None:
    profile = ctx.results.get("lag_profile")
    return None if profile is None else decay_fit(profile)


SECTIONS = [("correlation", correlation_section), ("lag_profile", lag_profile_section),
            ("markov", markov_section), ("stationarity", stationarity_section),
            ("decay_fit", decay_fit_section)]
