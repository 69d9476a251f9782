"""Missingness: pattern summary, EM moments under MAR, Little's MCAR test, coverage,
response patterns and declared codes."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from paneldiag.diagnostics.missingness import em_moments, little_mcar_test
from paneldiag.summaries import Chunk
from paneldiag.summaries.patterns import PatternMoments


def _chunk(x, rng=None, k=4):
    rng = rng or np.random.default_rng(0)
    return Chunk(values=x, weights=None, replicate=rng.integers(0, k, len(x)),
                 times=np.arange(x.shape[1], dtype=float), n_replicates=k)


def _summary(x, pieces=1):
    parts = np.array_split(np.arange(len(x)), pieces)
    out = None
    for idx in parts:
        part = PatternMoments.from_chunk(_chunk(x[idx]))
        out = part if out is None else out.merge(part)
    return out


def _with_gaps(rng, n=400, t=4, share=0.25):
    cov = 0.6 ** np.abs(np.subtract.outer(np.arange(t), np.arange(t)))
    x = rng.multivariate_normal(np.arange(t, dtype=float), cov, n)
    x[rng.random(x.shape) < share] = np.nan
    return x


# ------------------------------------------------------------------ the summary

def test_chunks_merge_to_the_one_chunk_summary():
    # simulation with known truth: the same units summarised in 1 or 5 chunks
    x = _with_gaps(np.random.default_rng(1), n=1000, t=5)
    one, five = _summary(x), _summary(x, pieces=5)
    assert np.array_equal(one.observed, five.observed)
    assert np.array_equal(one.n, five.n)
    assert np.allclose(one.mean, five.mean, atol=1e-12)
    assert np.allclose(one.m2, five.m2, atol=1e-9)
    assert np.array_equal(one.replicate_n.sum(axis=1), one.n)


def test_pattern_sums_equal_plain_per_pattern_moments():
    # reference: numpy mean and np.cov(bias=True) * n within each pattern, by brute force
    x = _with_gaps(np.random.default_rng(2), n=300, t=4)
    summary = _summary(x, pieces=3)
    seen = ~np.isnan(x)
    for p in range(summary.n_patterns):
        rows = np.all(seen == summary.observed[p], axis=1)
        cols = summary.observed[p]
        assert summary.n[p] == rows.sum()
        block = x[np.ix_(rows, cols)]
        assert np.allclose(summary.mean[p, cols], block.mean(axis=0))
        if rows.sum() > 1 and cols.any():
            expected = np.cov(block.T, bias=True).reshape(cols.sum(), cols.sum()) * rows.sum()
            assert np.allclose(summary.m2[p][np.ix_(cols, cols)], expected)


def test_many_waves_use_byte_keys():
    # more than 62 waves switches the pattern key to packed bytes; same grouping
    rng = np.random.default_rng(3)
    x = rng.normal(size=(200, 70))
    x[rng.random(x.shape) < 0.02] = np.nan
    summary = _summary(x, pieces=2)
    assert summary.n.sum() == 200
    assert len({tuple(r) for r in ~np.isnan(x)}) == summary.n_patterns


# ------------------------------------------------------------------------- EM

def test_em_on_complete_data_is_the_sample_moments():
    # reference: numpy mean and np.cov(bias=True) (ML divisor N) on complete data
    rng = np.random.default_rng(4)
    x = rng.multivariate_normal([1.0, 2.0, 3.0, 4.0], np.eye(4) + 0.5, 500)
    em = em_moments(_summary(x, pieces=2))
    assert em.converged
    assert np.allclose(em.means, x.mean(axis=0), atol=1e-12)
    assert np.allclose(em.covariance, np.cov(x.T, bias=True), atol=1e-12)


def _direct_ml(x):
    """Observed-data likelihood maximised with scipy.optimize (independent route):
    a loop over units, scipy.stats.multivariate_normal on each unit's observed waves."""
    t = x.shape[1]
    seen = ~np.isnan(x)
    tril = np.tril_indices(t)

    def unpack(theta):
        mu = theta[:t]
        chol = np.zeros((t, t))
        chol[tril] = theta[t:]
        return mu, chol @ chol.T

    def negative(theta):
        mu, sigma = unpack(theta)
        total = 0.0
        for row, obs in zip(x, seen):
            if obs.any():
                total += stats.multivariate_normal.logpdf(row[obs], mu[obs],
                                                          sigma[np.ix_(obs, obs)])
        return -total

    start = np.r_[np.nanmean(x, axis=0), np.eye(t)[tril]]
    fit = optimize.minimize(negative, start, method="BFGS", options={"gtol": 1e-7})
    return unpack(fit.x), -fit.fun


def test_em_agrees_with_direct_maximisation_of_the_observed_likelihood():
    # reference: scipy.optimize.minimize (BFGS) of the observed-data log-likelihood
    rng = np.random.default_rng(5)
    x = _with_gaps(rng, n=80, t=3, share=0.3)
    x[np.isnan(x).all(axis=1), 0] = 0.0  # keep every unit informative
    em = em_moments(_summary(x), tol=1e-11, max_iter=20000)
    (mu, sigma), loglik = _direct_ml(x)
    assert em.converged
    assert np.allclose(em.means, mu, atol=1e-4)
    assert np.allclose(em.covariance, sigma, atol=1e-4)
    assert em.loglik == pytest.approx(loglik, abs=1e-6)


def test_em_recovers_the_truth_under_mar_dropout():
    # simulation with known truth: dropout after wave t depends on the value at t (MAR),
    # so complete-case means are biased and EM means are not
    from paneldiag.simulate import dropout_after
    rng = np.random.default_rng(6)
    t = 4
    cov = 0.5 + 0.5 * np.eye(t)
    x = rng.multivariate_normal(np.zeros(t), cov, 20000)
    gone = dropout_after(x, rng, base_rate=0.2, log_odds_per_sd=-1.0)
    x[gone] = np.nan
    em = em_moments(_summary(x, pieces=3))
    assert em.converged
    assert np.nanmean(x[:, -1]) > 0.1          # complete cases are biased upwards
    assert np.allclose(em.means, 0.0, atol=0.05)
    assert np.allclose(em.covariance, cov, atol=0.06)


def test_em_leaves_out_a_wave_nobody_answered():
    rng = np.random.default_rng(7)
    x = _with_gaps(rng, n=200, t=3)
    x[:, 1] = np.nan
    em = em_moments(_summary(x))
    assert np.isnan(em.means[1]) and np.isnan(em.covariance[1]).all()
    assert np.isfinite(em.means[[0, 2]]).all()
