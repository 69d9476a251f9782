"""Temporal dependence: correlations, lag profile, Markov summary, tests, decay fit.

Each check names its source: a reference library function, a published example, or a
simulation from a process with known truth (paneldiag.simulate).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pingouin
import pytest
from scipy import stats

from paneldiag.diagnostics import dependence as dep
from paneldiag.simulate import Process, simulate
from paneldiag.summaries import Chunk
from paneldiag.summaries.contingency import PairwiseTables
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries.ranks import rank_moments, wave_ranks
from conftest import run_cli

K = 20


def _chunk(x, replicate=None, k=K):
    replicate = np.arange(len(x)) % k if replicate is None else replicate
    return Chunk(values=x, weights=None, replicate=replicate, times=np.arange(x.shape[1], dtype=float),
                 n_replicates=k)


def _correlations(x, ordinal=False, with_ranks=False, scale="auto"):
    c = _chunk(x)
    pairwise = PairwiseMoments.from_chunk(c)
    tables = PairwiseTables.from_chunk(c)
    ranks = rank_moments(x, c.replicate, c.times, K, 1 << 18) if with_ranks else None
    return dep.wave_correlations(pairwise, ranks, tables,
                                 tuple(str(i) for i in range(x.shape[1])), scale=scale), pairwise


def _panel(process, n, times, seed, missing=0.0):
    rng = np.random.default_rng(seed)
    y = simulate(process, n, times, rng)
    if missing:
        y[rng.random(y.shape) < missing] = np.nan
    return y


# ------------------------------------------------------------------ summaries

def test_tables_merge_across_chunks_equals_one_chunk():
    # summary rule (DEVELOPERS.md): several chunks merged == one chunk; chunks with
    # different category ranges are widened on merge.
    rng = np.random.default_rng(1)
    x = rng.integers(1, 6, (900, 4)).astype(float)
    x[:300][x[:300] == 5] = 4          # first chunk never sees category 5
    x[rng.random(x.shape) < 0.1] = np.nan
    rep = rng.integers(0, K, 900)
    one = PairwiseTables.from_chunk(_chunk(x, rep))
    parts = PairwiseTables.from_chunk(_chunk(x[:300], rep[:300])).merge(
        PairwiseTables.from_chunk(_chunk(x[300:], rep[300:])))
    assert parts.low == one.low == 1
    np.testing.assert_array_equal(parts.counts, one.counts)


def test_tables_agree_with_pandas_crosstab():
    # reference library: pandas.crosstab on the units seen at both waves
    rng = np.random.default_rng(2)
    x = rng.integers(0, 4, (500, 3)).astype(float)
    x[rng.random(x.shape) < 0.15] = np.nan
    pooled = PairwiseTables.from_chunk(_chunk(x)).pooled()
    both = ~np.isnan(x[:, 0]) & ~np.isnan(x[:, 2])
    np.testing.assert_array_equal(pooled[0, 2], pd.crosstab(x[both, 0], x[both, 2]).to_numpy())


def test_tables_refuse_continuous_values():
    x = np.random.default_rng(3).normal(size=(50, 3))
    tables = PairwiseTables.from_chunk(_chunk(x))
    assert tables.counts is None and "integers" in tables.reason
    assert dep.decide_scale(tables)[0] == "continuous"


def test_wave_ranks_match_scipy_rankdata():
    # reference library: scipy.stats.rankdata(method="average") per wave, both the
    # counting path (integers) and the sorting path (reals)
    rng = np.random.default_rng(4)
    x = np.column_stack([rng.integers(0, 9, 400).astype(float), rng.normal(size=400)])
    x[rng.random(x.shape) < 0.2] = np.nan
    ranks = wave_ranks(x)
    for t in range(2):
        seen = ~np.isnan(x[:, t])
        np.testing.assert_allclose(ranks[seen, t], stats.rankdata(x[seen, t]))
        assert np.isnan(ranks[~seen, t]).all()


# ----------------------------------------------------------------- correlations

def test_spearman_matches_scipy_on_complete_data():
    # reference library: scipy.stats.spearmanr (with ties: integer-valued waves)
    rng = np.random.default_rng(5)
    y = _panel(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 600, np.arange(4.0), 5)
    y[:, 1] = np.round(y[:, 1])
    corr, _ = _correlations(y, with_ranks=True)
    expected = stats.spearmanr(y).statistic
    np.testing.assert_allclose(corr.methods["spearman"].matrix, expected, atol=1e-12)
    assert rng is not None


def test_pearson_pairwise_matches_pandas_corr():
    # reference library: pandas.DataFrame.corr (pairwise-complete Pearson) and its counts
    y = _panel(Process(trait_var=1.0, ar_var=0.5, rho=0.4), 500, np.arange(5.0), 6, missing=0.2)
    corr, _ = _correlations(y)
    frame = pd.DataFrame(y)
    np.testing.assert_allclose(corr.methods["pearson_pairwise"].matrix, frame.corr(), atol=1e-12)
    seen = (~np.isnan(y)).astype(int)
    np.testing.assert_array_equal(corr.methods["pearson_pairwise"].n_pairs, seen.T @ seen)


def test_partial_correlations_match_pingouin():
    # reference library: pingouin.partial_corr (Pearson) of waves s and s + k given the
    # waves between them, on complete data
    y = _panel(Process(trait_var=0.6, ar_var=1.0, rho=0.6, reliability=0.8), 800,
               np.arange(5.0), 7)
    corr, _ = _correlations(y)
    partial = dep.partial_beyond(corr.matrix)
    frame = pd.DataFrame(y, columns=[f"w{i}" for i in range(5)])
    for s, t in [(0, 2), (1, 4), (0, 4)]:
        ref = pingouin.partial_corr(frame, x=f"w{s}", y=f"w{t}",
                                    covar=[f"w{i}" for i in range(s + 1, t)])["r"].iloc[0]
        assert partial[s, t] == pytest.approx(ref, abs=1e-10)


# -------------------------------------------------------------------- polychoric

def test_bivariate_normal_cdf_matches_scipy():
    # reference library: scipy.stats.multivariate_normal.cdf, across the |r| < 0.925
    # and |r| >= 0.925 branches and negative r
    from scipy.stats import multivariate_normal
    from paneldiag.diagnostics.polychoric import bivariate_normal_cdf
    rng = np.random.default_rng(8)
    for r in (-0.97, -0.5, 0.0, 0.3, 0.9, 0.93, 0.99):
        h, k = rng.normal(0, 1.5, 12), rng.normal(0, 1.5, 12)
        ref = [multivariate_normal(cov=[[1, r], [r, 1]]).cdf([a, b]) for a, b in zip(h, k)]
        np.testing.assert_allclose(bivariate_normal_cdf(h, k, r), ref, atol=1e-7)


def _cut(z, cuts):
    return (z[..., None] > np.asarray(cuts)).sum(-1)


@pytest.mark.parametrize("rho", [0.2, 0.35, 0.7, 0.9, -0.5])
def test_polychoric_recovers_latent_correlation(rho):
    # simulation with known truth: bivariate normal (correlation rho) cut into 5
    # categories, n = 200,000 (one 5 x 5 table: cheap). rho = 0 is left out: there the
    # Pearson r of the codes is unbiased as well, so it could not tell the methods apart.
    from paneldiag.diagnostics.polychoric import polychoric
    n = 200_000
    rng = np.random.default_rng(int(100 * (rho + 1)))
    z = rng.multivariate_normal([0, 0], [[1, rho], [rho, 1]], n)
    c = _cut(z, [-1.1, -0.3, 0.4, 1.2])
    table = np.bincount(5 * c[:, 0] + c[:, 1], minlength=25).reshape(5, 5).astype(float)
    est, total = polychoric(table[None])
    assert total[0] == n
    # tolerance: 4 standard errors, the SE taken as 1.3 (1 - rho^2) / sqrt(n), the
    # normal-data SE of r inflated by 30% for the coarsening (common practice)
    tol = 4 * 1.3 * (1 - rho ** 2) / np.sqrt(n)
    assert abs(est[0] - rho) < tol
    # the wrong method, Pearson's r of the category codes, is attenuated by the
    # coarsening and falls outside the same tolerance in every case
    pearson_codes = np.corrcoef(c.T)[0, 1]
    assert abs(pearson_codes - rho) > tol, (pearson_codes, tol)


def test_polychoric_2x2_equals_tetrachoric_solved_directly():
    # reference: the tetrachoric correlation of a 2x2 table solves
    # Phi2(h, k; rho) = p(0, 0) with h, k the normal quantiles of the margins;
    # solved here with scipy.stats.multivariate_normal.cdf and scipy.optimize.brentq
    from scipy.optimize import brentq
    from scipy.stats import multivariate_normal
    from paneldiag.diagnostics.polychoric import polychoric
    table = np.array([[412.0, 138.0], [97.0, 353.0]])
    n = table.sum()
    h = stats.norm.ppf(table[0].sum() / n)
    k = stats.norm.ppf(table[:, 0].sum() / n)
    target = table[0, 0] / n
    solved = brentq(lambda r: multivariate_normal(cov=[[1, r], [r, 1]]).cdf([h, k]) - target,
                    -0.99, 0.99, xtol=1e-12)
    est, _ = polychoric(table[None])
    assert est[0] == pytest.approx(solved, abs=1e-5)


def test_ordinal_measure_uses_polychoric_and_recovers_latent_matrix():
    # simulation with known truth: stable trait (0.6) + occasion noise (0.4) cut into 5
    # categories (as the demo's satisfaction): latent correlation 0.6 at every lag
    rng = np.random.default_rng(9)
    latent = simulate(Process(trait_var=0.6, occasion_var=0.4), 3000, np.arange(4.0), rng)
    x = (1 + _cut(latent, [-1.3, -0.5, 0.3, 1.1])).astype(float)
    x[rng.random(x.shape) < 0.1] = np.nan
    corr, _ = _correlations(x)
    assert corr.scale == "ordinal" and corr.primary == "polychoric"
    assert corr.categories == (1, 2, 3, 4, 5)
    off = corr.matrix[np.triu_indices(4, 1)]
    assert np.all(np.abs(off - 0.6) < 0.05)
    # Pearson on the categories is attenuated by the coarsening
    assert np.mean(corr.methods["pearson_pairwise"].matrix[np.triu_indices(4, 1)]) < off.mean()
    forced, _ = _correlations(x, scale="continuous")
    assert forced.primary == "pearson_pairwise" and "polychoric" not in forced.methods


# ------------------------------------------------------------------------ Lawley

def test_lawley_on_textbook_mice_matrix():
    # published example, from memory: Johnson and Wichern, Applied Multivariate
    # Statistical Analysis (test for equal correlations, Lawley 1963), the correlation
    # matrix of n = 150 post-birth weights of female mice; T about 11.4 on 5 df.
    r = np.array([[1.0, .7501, .6329, .6363],
                  [.7501, 1.0, .6925, .7386],
                  [.6329, .6925, 1.0, .6625],
                  [.6363, .7386, .6625, 1.0]])
    n = 150
    res = dep.lawley_equal_correlations(r, n)
    assert res.df == 5
    # Lawley's statistic written out, with its factor n - 1 (as the book applies it);
    # the factors n or n - 2 differ from it by 0.7%, far beyond the rounding error of a
    # double (tolerance 1e-12).
    p, iu = 4, np.triu_indices(4, 1)
    rbar = r[iu].mean()
    rbar_k = (r.sum(axis=0) - 1) / (p - 1)
    gamma = (p - 1) ** 2 * (1 - (1 - rbar) ** 2) / (p - (p - 2) * (1 - rbar) ** 2)
    spread, between = ((r[iu] - rbar) ** 2).sum(), ((rbar_k - rbar) ** 2).sum()
    hand = (n - 1) / (1 - rbar) ** 2 * (spread - gamma * between)
    assert res.statistic == pytest.approx(hand, rel=1e-12)
    # the published 11.4 (from memory), to its one decimal (rounding: +-0.05; this
    # alone would also admit the factor n)
    assert abs(res.statistic - 11.4) <= 0.05


def test_lawley_size_under_compound_symmetry():
    # simulation with known truth: equicorrelated normal waves (r = 0.5), N = 300;
    # the 5% test rejects in about 5% of 300 replicates (binomial 99.9% band)
    rng = np.random.default_rng(10)
    p, n, reps = 5, 300, 300
    cov = np.full((p, p), 0.5) + 0.5 * np.eye(p)
    chol = np.linalg.cholesky(cov)
    reject = 0
    for _ in range(reps):
        x = rng.normal(size=(n, p)) @ chol.T
        reject += dep.lawley_equal_correlations(np.corrcoef(x.T), n).p_value < 0.05
    assert 0.015 <= reject / reps <= 0.095


# ------------------------------------------------------------------- lag profile

def _lag_rows_cover(values, times, truth) -> list[bool]:
    """Whether each lag row's interval of the lag profile holds its true value."""
    corr, _ = _correlations(values)
    rows = dep.lag_profile(corr, times).by("lag")
    return [row.ci_low <= tr <= row.ci_high for row, tr in zip(rows, truth)]


def _coverage(n_reps, seed):
    # simulation with known truth: trait (1) + carry-over (1, rho = 0.5) + error
    # (reliability 0.8), 6 waves, 10% missing completely at random, N = 300. The true
    # correlation at lag k is 0.8 (1 + 0.5^k) / 2.
    times = np.arange(6.0)
    truth = 0.8 * (1 + 0.5 ** np.arange(1, 6)) / 2
    rng = np.random.default_rng(seed)
    hits = np.zeros(5)
    for _ in range(n_reps):
        y = simulate(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 300, times, rng)
        y += rng.normal(0, np.sqrt(2.0 * 0.25), y.shape)   # error variance for reliability 0.8
        y[rng.random(y.shape) < 0.1] = np.nan
        hits += _lag_rows_cover(y, times, truth)
    return hits / n_reps


def test_lag_profile_ci_coverage_reduced_grid():
    # 100 replicates: nominal 95%; each lag's coverage within 0.85-1.0, the average within
    # 0.90-0.99 (binomial sampling error of 100 replicates, plus jackknife t intervals)
    cov = _coverage(100, 11)
    assert np.all(cov >= 0.85)
    assert 0.90 <= cov.mean() <= 0.99


@pytest.mark.slow
def test_lag_profile_ci_coverage_full_grid():
    cov = _coverage(600, 12)
    assert np.all(cov >= 0.91)
    assert 0.925 <= cov.mean() <= 0.975


def _binomial_band(reps: int, rate: float, tail: float = 0.0005) -> tuple[int, int]:
    """The counts of events, each of probability ``rate`` in ``reps`` independent
    replicates, outside which a count falls with probability ``tail`` on each side
    (scipy.stats.binom quantiles: P(X < low) <= tail and P(X > high) <= tail)."""
    return int(stats.binom.ppf(tail, reps, rate)), int(stats.binom.isf(tail, reps, rate))


def test_lag_profile_rows_under_unequal_spacing():
    times = np.array([0.0, 1.0, 2.0, 4.0, 5.0])
    y = _panel(Process(ar_var=1.0, rho=0.6), 2000, times, 13)
    corr, _ = _correlations(y)
    prof = dep.lag_profile(corr, times)
    assert prof.spacing == "unequal"
    by_time = {row.time_distance: row for row in prof.by("time")}
    assert sorted(by_time) == [1.0, 2.0, 3.0, 4.0, 5.0]
    assert by_time[2.0].lag is None and by_time[2.0].wave_pairs == 2   # (0,2) lag 2, (2,3) lag 1
    lag1 = prof.by("lag")[0]
    assert lag1.time_distance is None and lag1.wave_pairs == 4


def test_lag_profile_time_rows_cover_the_truth_under_unequal_spacing():
    # simulation with known truth: pure carry-over, corr = 0.6^d at time distance d;
    # 300 panels of 2000 units. Each row's 95% interval misses the truth in about 5% of
    # the panels: the count of misses lies in the binomial band of 300 trials at 0.05
    # that holds with probability 0.999 (scipy.stats.binom). A bias of 0.03 at d = 1, or
    # intervals a third too narrow or twice too wide, land outside it.
    times = np.array([0.0, 1.0, 2.0, 4.0, 5.0])
    reps = 300
    misses = np.zeros(5, dtype=int)
    for seed in range(reps):  # a loop over panels
        corr, _ = _correlations(_panel(Process(ar_var=1.0, rho=0.6), 2000, times, 1000 + seed))
        rows = dep.lag_profile(corr, times).by("time")
        misses += [not row.ci_low <= 0.6 ** row.time_distance <= row.ci_high for row in rows]
    low, high = _binomial_band(reps, 0.05)
    assert np.all((misses >= low) & (misses <= high)), (misses, low, high)


# ----------------------------------------------------------------- Markov summary

def test_markov_partials_vanish_for_pure_carry_over():
    # simulation with known truth: a first-order autoregression without error has
    # zero partial correlation beyond lag 1, so each row's 95% interval misses 0 in
    # about 5% of 300 panels (binomial band of probability 0.999, scipy.stats.binom, as
    # above); a stable trait makes the partials positive
    times = np.arange(6.0)
    reps = 300
    misses = np.zeros(4, dtype=int)
    for seed in range(reps):  # a loop over panels
        corr, _ = _correlations(_panel(Process(ar_var=1.0, rho=0.6), 4000, times, 2000 + seed))
        misses += [not row.ci_low <= 0.0 <= row.ci_high for row in dep.markov_summary(corr).rows]
    low, high = _binomial_band(reps, 0.05)
    assert np.all((misses >= low) & (misses <= high)), (misses, low, high)
    hybrid = _panel(Process(trait_var=1.0, ar_var=1.0, rho=0.6), 4000, times, 15)
    corr, _ = _correlations(hybrid)
    assert dep.markov_summary(corr).rows[0].ci_low > 0.05


# ------------------------------------------------------------- stationarity tests

def _stationary_rejections(reps: int, seed: int) -> tuple[int, int]:
    """Rejections at 5% of equal lag bands and of equal variances in ``reps`` panels
    of a stationary trait + carry-over process (both hypotheses true), N = 400."""
    times = np.arange(5.0)
    rng = np.random.default_rng(seed)
    bands = variances = 0
    for _ in range(reps):  # a loop over panels
        y = simulate(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 400, times, rng)
        corr, pairwise = _correlations(y)
        res = dep.stationarity_tests(corr, pairwise, times)
        bands += res.lag_bands.p_value < 0.05
        variances += res.equal_variances.p_value < 0.05
    return bands, variances


def _size_bound(reps: int) -> int:
    # the count of rejections that a test of size 5% exceeds with probability at most
    # 0.001 (binomial upper tail, scipy.stats.binom.isf)
    return int(stats.binom.isf(0.001, reps, 0.05))


def test_band_and_variance_tests_under_known_truth():
    # simulation with known truth: a stationary trait + carry-over panel (equal bands,
    # equal variances) versus one whose carry-over weakens over the waves and whose
    # variance grows (both hypotheses false). Size: 300 panels, at most 28 rejections
    # (9.3%; binomial tail bound, _size_bound); the full grid tightens this.
    reps = 300
    size_band, size_var = _stationary_rejections(reps, 16)
    assert size_band <= _size_bound(reps) and size_var <= _size_bound(reps), \
        (size_band, size_var, _size_bound(reps))
    times = np.arange(5.0)
    rng = np.random.default_rng(17)
    y = simulate(Process(trait_var=1.0), 2000, times, rng)
    keep = np.array([0.9, 0.8, 0.5, 0.2])
    a = rng.normal(size=2000)
    ar = np.empty((2000, 5))
    ar[:, 0] = a
    for t in range(1, 5):
        ar[:, t] = keep[t - 1] * ar[:, t - 1] + rng.normal(0, np.sqrt(1 - keep[t - 1] ** 2), 2000)
    y = y + ar * np.linspace(1.0, 1.8, 5)
    corr, pairwise = _correlations(y)
    res = dep.stationarity_tests(corr, pairwise, times)
    assert res.lag_bands.p_value < 0.001
    assert res.equal_variances.p_value < 0.001
    assert res.equal_correlations.p_value < 0.001


@pytest.mark.slow
def test_band_and_variance_tests_size_full_grid():
    # as above with 1,500 panels: at most 102 rejections (6.8%; binomial tail bound)
    reps = 1500
    size_band, size_var = _stationary_rejections(reps, 18)
    assert size_band <= _size_bound(reps) and size_var <= _size_bound(reps), \
        (size_band, size_var, _size_bound(reps))


def test_stationarity_wald_statistics_by_hand():
    # reference computation written out here: on a small complete panel (60 units, 4
    # waves, 8 replicate groups), the Fisher z of the Pearson correlations and the log
    # variances of the waves, with every group left out in turn (numpy.corrcoef,
    # numpy.var); the jackknife covariance of the contrasts (K - 1) / K sum (c_g - c.)
    # (c_g - c.)'; W = c' V^-1 c; F = (d - q + 1) / (d q) W on (q, d - q + 1) df, d = K - 1
    # (Korn and Graubard 1990, The American Statistician 44, 270-276), p from
    # scipy.stats.f.sf. Tolerance 1e-9: the same sums in another order.
    k, n = 8, 60
    times = np.arange(4.0)
    x = _panel(Process(trait_var=1.0, ar_var=1.0, rho=0.5), n, times, 19)
    group = np.arange(n) % k
    chunk = _chunk(x, group, k)
    pairwise = PairwiseMoments.from_chunk(chunk)
    corr = dep.wave_correlations(pairwise, None, PairwiseTables.from_chunk(chunk),
                                 ("1", "2", "3", "4"))
    res = dep.stationarity_tests(corr, pairwise, times)

    def z_contrasts(rows):
        z = np.arctanh(np.corrcoef(rows.T) - np.eye(4))   # off the diagonal only
        # lag 1: (1,2) - (0,1), (2,3) - (0,1); lag 2: (1,3) - (0,2)
        return np.array([z[1, 2] - z[0, 1], z[2, 3] - z[0, 1], z[1, 3] - z[0, 2]])

    def log_var_contrasts(rows):
        v = np.log(rows.var(axis=0, ddof=1))
        return v[1:] - v[0]

    def wald_f(contrasts):
        c = contrasts(x)
        reps = np.array([contrasts(x[group != g]) for g in range(k)])
        centred = reps - reps.mean(axis=0)
        v = (k - 1) / k * centred.T @ centred
        w = c @ np.linalg.solve(v, c)
        q, d = len(c), k - 1
        f = (d - q + 1) / (d * q) * w
        return f, stats.f.sf(f, q, d - q + 1)

    f_bands, p_bands = wald_f(z_contrasts)
    assert res.lag_bands.statistic == pytest.approx(f_bands, rel=1e-9)
    assert res.lag_bands.df == (3, 5)
    assert res.lag_bands.p_value == pytest.approx(p_bands, rel=1e-9)
    f_var, p_var = wald_f(log_var_contrasts)
    assert res.equal_variances.statistic == pytest.approx(f_var, rel=1e-9)
    assert res.equal_variances.p_value == pytest.approx(p_var, rel=1e-9)


# ---------------------------------------------------------------------- decay fit

@pytest.mark.parametrize("trait, ar, rho, shape", [
    (1.0, 0.0, 0.0, "flat"),              # stable trait + nothing else
    (0.0, 1.0, 0.6, "decay_to_zero"),     # pure carry-over
    (1.0, 1.0, 0.6, "decay_to_floor"),    # hybrid
    (0.6, 1.4, 0.75, "decay_to_floor"),
])
def test_decay_fit_recovers_process(trait, ar, rho, shape):
    # simulation with known truth: r(k) = a + b rho^k with a = trait / total,
    # b = ar / total; occasion noise (0.5 of the true variance) lowers a + b to 2/3
    times = np.arange(8.0)
    occasion = 0.5 * (trait + ar)
    y = _panel(Process(trait_var=trait, ar_var=ar, rho=rho, occasion_var=occasion), 4000, times,
               int(17 + 10 * rho + trait), missing=0.05)
    corr, _ = _correlations(y)
    fit = dep.decay_fit(dep.lag_profile(corr, times))
    total = trait + ar + occasion
    assert fit.shape == shape
    # tolerances: the spread of each estimate over 200 simulated panels of this design
    # (measured SD of a 0.014-0.028, b 0.013-0.023, rho 0.015-0.035, a + b 0.011-0.016):
    # 1.4 to 3 SDs; the intervals' coverage is checked over many panels below
    assert fit.a.estimate == pytest.approx(trait / total, abs=0.04)
    if shape != "flat":
        assert fit.b.estimate == pytest.approx(ar / total, abs=0.05)
        assert fit.rho.estimate == pytest.approx(rho, abs=0.08)
        assert fit.intercept.estimate == pytest.approx((trait + ar) / total, abs=0.04)
    else:
        assert fit.rho is None and not fit.identified


@pytest.mark.parametrize("trait, ar, rho", [(0.0, 1.0, 0.6), (1.0, 1.0, 0.6), (0.6, 1.4, 0.75)])
def test_decay_fit_matches_scipy_curve_fit_on_the_same_profile(trait, ar, rho):
    # reference library: scipy.optimize.curve_fit of r(d) = a + b rho^d to the same lag
    # profile, points weighted by sum(n - 3) / (1 - r^2)^2 (sigma = 1 / sqrt(weight)),
    # within the box 0 <= a, b, rho <= 1 (the fits here are inside a + b <= 1). Both
    # minimise one weighted sum of squares; tolerance 1e-5 for the two optimisers' stops.
    from scipy.optimize import curve_fit
    times = np.arange(8.0)
    y = _panel(Process(trait_var=trait, ar_var=ar, rho=rho, occasion_var=0.5 * (trait + ar)),
               4000, times, int(17 + 10 * rho + trait), missing=0.05)
    corr, _ = _correlations(y)
    profile = dep.lag_profile(corr, times)
    rows = profile.by("lag")
    d = np.array([row.lag for row in rows], dtype=float)
    r = np.array([row.mean_r for row in rows])
    weight = profile.weights[:len(rows)] / (1 - r ** 2) ** 2
    ref, _ = curve_fit(lambda x, a, b, q: a + b * q ** x, d, r, p0=[0.2, 0.4, 0.5],
                       sigma=1 / np.sqrt(weight), bounds=([0, 0, 0], [1, 1, 1]),
                       xtol=1e-14, ftol=1e-14, gtol=1e-14)
    assert ref[0] + ref[1] <= 1
    full = dep.decay_fit(profile).models["full"]
    assert (full.a, full.b, full.rho) == pytest.approx(tuple(ref), abs=1e-5)


def _decay_interval_misses(trait, ar, rho, panels, seed):
    """Panels whose 95% interval of rho, of the floor a and of the decaying part b
    miss the truth (known process: r(k) = a + b rho^k, a = trait / total, b = ar / total
    with occasion noise half the true variance)."""
    times = np.arange(8.0)
    occasion = 0.5 * (trait + ar)
    total = trait + ar + occasion
    truth = {"rho": rho, "a": trait / total, "b": ar / total}
    misses = dict.fromkeys(truth, 0)
    for i in range(panels):  # a loop over panels
        y = _panel(Process(trait_var=trait, ar_var=ar, rho=rho, occasion_var=occasion), 4000,
                   times, seed + i, missing=0.05)
        corr, _ = _correlations(y)
        fit = dep.decay_fit(dep.lag_profile(corr, times))
        for key, value in truth.items():
            interval = getattr(fit, key)   # None when the fit calls the profile flat: a miss
            misses[key] += interval is None or not interval.ci_low <= value <= interval.ci_high
    return misses


def test_decay_fit_intervals_cover_the_truth_reduced_grid():
    # simulation with known truth: 40 panels of trait + carry-over + occasion noise; each
    # 95% interval misses the truth in at most 8 of them (binomial band of probability
    # 0.999 for 40 trials at 0.05, scipy.stats.binom). Intervals half as wide miss
    # about a third of the time and fail this.
    low, high = _binomial_band(40, 0.05)
    misses = _decay_interval_misses(1.0, 1.0, 0.6, 40, 5000)
    assert all(low <= m <= high for m in misses.values()), (misses, low, high)


@pytest.mark.slow
@pytest.mark.parametrize("trait, ar, rho", [(1.0, 1.0, 0.6), (0.6, 1.4, 0.75)])
def test_decay_fit_intervals_cover_the_truth_full_grid(trait, ar, rho):
    # as above with 300 panels a process (binomial band 4-29 misses)
    low, high = _binomial_band(300, 0.05)
    misses = _decay_interval_misses(trait, ar, rho, 300, 7000)
    assert all(low <= m <= high for m in misses.values()), (misses, low, high)


def test_decay_fit_uses_time_distance_under_unequal_spacing():
    # simulation with known truth: carry-over 0.7 per unit of time on the demo's
    # calendar (no wave in 2020), trait 1, carry-over variance 1.2
    times = np.array([2015, 2016, 2017, 2018, 2019, 2021, 2022, 2023], dtype=float)
    y = _panel(Process(trait_var=1.0, ar_var=1.2, rho=0.7), 5000, times, 18)
    corr, _ = _correlations(y)
    fit = dep.decay_fit(dep.lag_profile(corr, times))
    assert fit.distance == "time" and fit.shape == "decay_to_floor"
    assert fit.rho.estimate == pytest.approx(0.7, abs=0.06)
    assert fit.stable_share.estimate == pytest.approx(1.0 / 2.2, abs=0.06)


# --------------------------------------------------------------------------- CLI

@pytest.fixture(scope="module")
def demo_file(demo_screen):
    return demo_screen[0]


@pytest.fixture(scope="module")
def demo_report(demo_screen):
    """The demo's full screen (conftest.demo_screen): weighted, by district."""
    return demo_screen[1], demo_screen[2]


def test_cli_demo_trust_decays_to_floor_and_satisfaction_is_ordinal(demo_report):
    # the demo's own construction (paneldiag/demo.py): trust = trait (1) + carry-over
    # (1.2, rho 0.7 per year) + error; satisfaction = trait + noise cut into 1..5
    report, text = demo_report
    trust, sat = report["measures"]["trust"], report["measures"]["satisfaction"]
    assert trust["correlation"]["primary"] == "pearson_pairwise"
    assert trust["decay_fit"]["shape"] == "decay_to_floor"
    assert trust["decay_fit"]["distance"] == "time"
    assert trust["decay_fit"]["rho"]["estimate"] == pytest.approx(0.7, abs=0.1)
    assert sat["correlation"]["scale"] == "ordinal"
    assert sat["correlation"]["primary"] == "polychoric"
    assert sat["decay_fit"]["shape"] == "flat"
    rows = trust["lag_profile"]
    assert {"basis", "lag", "time_distance", "mean_r", "ci_low", "ci_high", "n_pairs"} <= set(rows[0])
    assert set(sat["stationarity"]) == {"equal_correlations", "lag_bands", "bands",
                                        "equal_variances", "weighted"}
    assert "Dependence" in text


def test_cli_continuous_option_turns_polychoric_off(demo_file, tmp_path):
    out = tmp_path / "t.json"
    done = run_cli("screen", demo_file, "--id", "household", "--wave", "year", "--value",
                   "satisfaction", "--missing-codes", "-9,-8", "--continuous", "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    assert report["correlation"]["primary"] == "pearson_pairwise"
    assert "polychoric" not in report["correlation"]["methods"]
    assert report["input"]["options"]["scale"] == "continuous"


def test_em_correlations_undo_selection_by_dropout():
    # simulation with known truth: a first-order autoregression (rho 0.7, so the true
    # lag-1 correlation is 0.7) with dropout that depends on the last observed score
    # (missing at random). Units observed at both waves are selected on the earlier
    # wave, which attenuates the pairwise correlation; the ML (EM) correlation is not.
    from types import SimpleNamespace

    from paneldiag.panel import Panel
    from paneldiag.simulate import dropout_after
    from paneldiag.summaries import summarise
    from paneldiag.summaries.patterns import PatternMoments
    rng = np.random.default_rng(21)
    times = np.arange(4.0)
    y = simulate(Process(ar_var=1.0, rho=0.7), 6000, times, rng)
    gone = dropout_after(y, rng, base_rate=0.35, log_odds_per_sd=-1.5)
    y[gone] = np.nan
    panel = Panel(unit_ids=np.arange(6000), wave_labels=("1", "2", "3", "4"), wave_times=times,
                  values={"y": y})
    kinds = [PairwiseMoments, PairwiseTables, PatternMoments]
    summaries = summarise(panel, "y", kinds)
    ctx = SimpleNamespace(panel=panel, values=y, summaries=summaries,
                          summary=lambda kind: summaries[kind], results={},
                          options=SimpleNamespace(n_replicates=20, chunk_units=1 << 18,
                                                  scale="auto"))
    corr = dep.correlation_section(ctx)
    assert corr.partial_basis == "pearson_em"
    em = corr.methods["pearson_em"].matrix
    pairwise = corr.methods["pearson_pairwise"].matrix
    lag1 = np.array([0.7] * 3)
    idx = (np.arange(3), np.arange(1, 4))
    assert np.all(np.abs(em[idx] - lag1) < 0.03)
    assert np.mean(np.abs(pairwise[idx] - lag1)) > 2 * np.mean(np.abs(em[idx] - lag1))
    # with per-group pattern moments the Markov intervals come from EM refits; a
    # first-order autoregression has zero partial correlation beyond lag 1
    from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments
    summaries.update(summarise(panel, "y", [ReplicatePatternMoments]))
    corr = dep.correlation_section(ctx)
    assert corr.partial_replicates is not None
    markov = dep.markov_summary(corr)
    assert markov.interval_basis.endswith("pearson_em estimate")
    # The SD of the EM partials over 12 simulated panels of this design (measured: 0.021
    # for the lag-2 row, 0.027 for lag 3; their mean is 0 within 0.01). Each partial lies
    # within 3 SDs of the true 0, and each 95% interval's half-width is within a factor
    # of 2 of 1.96 SDs (a refit interval that ignored the groups' spread would be far
    # narrower). No single-panel coverage check: one interval misses in 5% of panels.
    sd = {2: 0.021, 3: 0.027}
    for row in markov.rows:
        assert abs(row.mean_partial_r) <= 3 * sd[row.lag], row
        assert row.ci_low <= row.mean_partial_r <= row.ci_high
        assert 0.5 <= (row.ci_high - row.ci_low) / (2 * 1.96 * sd[row.lag]) <= 2, row


def _polychoric_coverage(n_reps, seed):
    # simulation with known truth: latent trait (1) + carry-over (1, rho 0.5), 5 waves,
    # cut into 5 categories, 10% missing completely at random, N = 400; the latent
    # correlation at lag k is (1 + 0.5^k) / 2
    times = np.arange(5.0)
    truth = (1 + 0.5 ** np.arange(1, 5)) / 2
    rng = np.random.default_rng(seed)
    hits = np.zeros(4)
    for _ in range(n_reps):
        latent = simulate(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 400, times, rng)
        x = (1 + _cut(latent / np.sqrt(2), [-1.1, -0.3, 0.4, 1.2])).astype(float)
        x[rng.random(x.shape) < 0.1] = np.nan
        hits += _lag_rows_cover(x, times, truth)
    return hits / n_reps


def test_polychoric_lag_profile_coverage_reduced_grid():
    # 40 replicates: nominal 95%; average coverage at least 0.85 (binomial noise)
    assert _polychoric_coverage(40, 22).mean() >= 0.85


@pytest.mark.slow
def test_polychoric_lag_profile_coverage_full_grid():
    cov = _polychoric_coverage(300, 23)
    assert np.all(cov >= 0.9) and 0.92 <= cov.mean() <= 0.98


@pytest.mark.slow
def test_decay_fit_hybrid_unbiased_and_covered_full_grid():
    # simulation with known truth: trait 1, carry-over 1 (rho 0.6), occasion noise 1,
    # 7 waves, N = 2000, 60 replicates: a = b = 1/3, rho = 0.6
    times = np.arange(7.0)
    rng = np.random.default_rng(24)
    est, hit = [], 0
    for _ in range(60):
        y = simulate(Process(trait_var=1.0, ar_var=1.0, rho=0.6, occasion_var=1.0), 2000,
                     times, rng)
        corr, _ = _correlations(y)
        fit = dep.decay_fit(dep.lag_profile(corr, times))
        assert fit.shape == "decay_to_floor"
        est.append((fit.a.estimate, fit.b.estimate, fit.rho.estimate))
        hit += fit.rho.ci_low <= 0.6 <= fit.rho.ci_high
    mean = np.mean(est, axis=0)
    np.testing.assert_allclose(mean, [1 / 3, 1 / 3, 0.6], atol=0.02)
    assert hit / 60 >= 0.85


def test_dependence_sections_do_not_depend_on_chunking():
    # summary rule (DEVELOPERS.md): many small chunks merged give the same report as one
    # chunk (up to rounding of the merged sums), for an ordinal and a continuous measure
    from types import SimpleNamespace

    from paneldiag.panel import Panel
    from paneldiag.results import plain
    from paneldiag.summaries import summarise
    rng = np.random.default_rng(25)
    latent = simulate(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 700, np.arange(5.0), rng)
    ordinal = (1 + _cut(latent / np.sqrt(2), [-1.0, 0.0, 1.0])).astype(float)
    ordinal[rng.random(ordinal.shape) < 0.1] = np.nan
    for values in (ordinal, latent):
        panel = Panel(unit_ids=np.arange(700), wave_labels=tuple("abcde"),
                      wave_times=np.arange(5.0), values={"y": values})
        reports = []
        for chunk_units in (1 << 18, 97):
            summaries = summarise(panel, "y", [PairwiseMoments, PairwiseTables],
                                  chunk_units=chunk_units)
            ctx = SimpleNamespace(panel=panel, values=values, summaries=summaries,
                                  summary=lambda kind, s=summaries: s[kind], results={},
                                  options=SimpleNamespace(n_replicates=K, chunk_units=chunk_units,
                                                          scale="auto"))
            for key, section in dep.SECTIONS:
                ctx.results[key] = section(ctx)
            reports.append({key: plain(ctx.results[key]) for key, _ in dep.SECTIONS})
        one, many = reports
        assert one["correlation"]["primary"] == many["correlation"]["primary"]
        for method, block in one["correlation"]["methods"].items():
            np.testing.assert_allclose(np.array(block["matrix"], dtype=float),
                                       np.array(many["correlation"]["methods"][method]["matrix"],
                                                dtype=float), atol=1e-10)
        for a, b in zip(one["lag_profile"], many["lag_profile"]):
            assert a["mean_r"] == pytest.approx(b["mean_r"], abs=1e-10)
            assert a["ci_low"] == pytest.approx(b["ci_low"], abs=1e-9)


def test_scale_decision_rules():
    # the documented rule (common practice): <= 7 distinct integer values is ordinal;
    # the options force either reading where the data allow it
    rng = np.random.default_rng(26)
    seven = rng.integers(0, 7, (300, 3)).astype(float)
    eleven = rng.integers(0, 11, (300, 3)).astype(float)
    wide = rng.integers(0, 40, (300, 3)).astype(float)
    t7, t11, t40 = (PairwiseTables.from_chunk(_chunk(x)) for x in (seven, eleven, wide))
    assert dep.decide_scale(t7)[0] == "ordinal"
    assert dep.decide_scale(t11)[0] == "continuous"
    assert dep.decide_scale(t11, "ordinal")[0] == "ordinal"
    kind, why = dep.decide_scale(t40, "ordinal")
    assert kind == "continuous" and "not possible" in why
    assert dep.decide_scale(t7, "continuous") == ("continuous", "set by option")


def test_spearman_under_mcar_close_to_per_pair_ranking():
    # reference library: scipy.stats.spearmanr on each pair's complete cases. Ranking
    # each wave once (our choice, see paneldiag/summaries/ranks.py) estimates the same
    # quantity under missing completely at random: here within 0.01 at N = 3000 with 25%
    # of values missing (simulation: trait + carry-over, rho 0.5)
    y = _panel(Process(trait_var=1.0, ar_var=1.0, rho=0.5), 3000, np.arange(4.0), 27,
               missing=0.25)
    corr, _ = _correlations(y, with_ranks=True)
    ours = corr.methods["spearman"].matrix
    for s in range(4):
        for t in range(s + 1, 4):
            both = ~np.isnan(y[:, s]) & ~np.isnan(y[:, t])
            ref = stats.spearmanr(y[both, s], y[both, t]).statistic
            assert abs(ours[s, t] - ref) < 0.01


def test_pair_counts_never_reveal_a_small_cell(tmp_path):
    """Disclosure control (common practice: no count of 1 to min_cell - 1 units, nor
    one that follows by subtraction): three units skip wave 3, so the count of units
    at waves 2 and 3 would give them away against the count at wave 2."""
    from conftest import run_cli
    rng = np.random.default_rng(3)
    rows = [(unit, wave, round(float(rng.normal()), 3)) for unit in range(60)
            for wave in range(1, 5) if not (unit < 3 and wave == 3)]
    data = tmp_path / "p.csv"
    data.write_text("id,wave,y\n" + "".join(f"{u},{w},{v}\n" for u, w, v in rows))
    out = tmp_path / "p.json"
    done = run_cli("screen", data, "--id", "id", "--wave", "wave", "--value", "y",
                   "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    # the whole-report disclosure audit withholds more: the 57 respondents at wave 3
    # beside the 60 units would give the three away too (docs/disclosure.md)
    audit = set(report["disclosure"]["secondary_suppressions"])
    assert "correlation.methods.pearson_pairwise.n_pairs.2.2" in audit
    for name, method in report["correlation"]["methods"].items():
        n = method["n_pairs"]
        assert n[1][1] == 60 and n[1][2] is None and n[2][1] is None, name
        assert n[2][3] is None and n[0][2] is None, name   # 3 units short of wave 1 or 4
        assert n[2][2] is None, name
        for (s, t), value in (((0, 1), 60), ((0, 3), 60)):   # the rest shown, unless
            audited = f"correlation.methods.{name}.n_pairs.{s}.{t}" in audit   # audited
            assert n[s][t] == (None if audited else value), name
        assert method["matrix"][1][2] is not None   # 57 units: the correlation itself is shown
    lag = {r["lag"]: r["n_pairs"] for r in report["lag_profile"] if r["basis"] == "lag"}
    assert lag[1] is None and lag[2] is None
    assert lag[3] == (None if "lag_profile.2.n_pairs" in audit else 60)
