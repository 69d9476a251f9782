"""The distribution functions agree with scipy.stats (reference library), edges included."""

import numpy as np
import pytest
from scipy import stats

from paneldiag import distributions as dist

X = np.array([-3.0, -0.5, 0.0, 0.3, 1.96, 7.5, 40.0])
P = np.array([1e-6, 0.025, 0.3, 0.5, 0.9, 0.975, 1 - 1e-6])


@pytest.mark.parametrize("df", [1, 2.5, 7, 120])
def test_t_and_chi2_match_scipy_stats(df):
    np.testing.assert_allclose(dist.t_sf(X, df), stats.t.sf(X, df), rtol=1e-12)
    np.testing.assert_allclose(dist.t_ppf(P, df), stats.t.ppf(P, df), rtol=1e-10)
    np.testing.assert_allclose(dist.chi2_sf(X, df), stats.chi2.sf(X, df), rtol=1e-12)


@pytest.mark.parametrize("dfn, dfd", [(1, 5), (3, 40.5), (19, 999)])
def test_f_matches_scipy_stats(dfn, dfd):
    np.testing.assert_allclose(dist.f_sf(X, dfn, dfd), stats.f.sf(X, dfn, dfd), rtol=1e-12)
    np.testing.assert_allclose(dist.f_ppf(P, dfn, dfd), stats.f.ppf(P, dfn, dfd), rtol=1e-10)


def test_normal_matches_scipy_stats():
    np.testing.assert_allclose(dist.norm_cdf(X), stats.norm.cdf(X), rtol=1e-12)
    np.testing.assert_allclose(dist.norm_sf(X), stats.norm.sf(X), rtol=1e-12)
    np.testing.assert_allclose(dist.norm_ppf(P), stats.norm.ppf(P), rtol=1e-12)
    np.testing.assert_allclose(dist.norm_pdf(X, 1.5, 2.0), stats.norm.pdf(X, 1.5, 2.0),
                               rtol=1e-12)


def test_edges_follow_scipy_stats():
    assert dist.chi2_sf(-1.0, 2) == stats.chi2.sf(-1.0, 2) == 1.0
    assert np.isnan(dist.chi2_sf(3.0, 0)) and np.isnan(stats.chi2.sf(3.0, 0))
    assert np.isnan(dist.chi2_sf(np.nan, 3))
    assert dist.chi2_sf(np.inf, 3) == 0.0
    assert dist.f_sf(-1.0, 2, 5) == stats.f.sf(-1.0, 2, 5) == 1.0
    assert isinstance(dist.chi2_sf(3.0, 2), float)   # scalars in, a float out
