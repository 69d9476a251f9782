"""Tail probabilities and quantiles of the normal, t, chi-square and F distributions.

Thin names over ``scipy.special``, with the conventions of ``scipy.stats`` at the edges
(a negative chi-square statistic has tail probability 1; zero degrees of freedom give
NaN). The screen runs as a fresh process each time, and loading scipy.stats takes about
0.4 s more than scipy.special (docs/performance.md); nothing else of scipy.stats is
needed on the screen's path.
"""

from __future__ import annotations

import numpy as np
from scipy import special


def _out(value):
    return float(value) if np.ndim(value) == 0 else value


def norm_cdf(x):
    return _out(special.ndtr(x))


def norm_sf(x):
    return _out(special.ndtr(np.negative(x)))


def norm_ppf(p):
    return _out(special.ndtri(p))


def norm_pdf(x, loc=0.0, scale=1.0):
    z = (np.asarray(x, dtype=float) - loc) / scale
    return _out(np.exp(-0.5 * z * z) / (np.sqrt(2.0 * np.pi) * scale))


def t_sf(x, df):
    return _out(special.stdtr(df, np.negative(x)))


def t_ppf(p, df):
    return _out(special.stdtrit(df, p))


def chi2_sf(x, df):
    x, df = np.asarray(x, dtype=float), np.asarray(df, dtype=float)
    with np.errstate(invalid="ignore"):
        p = np.where(x < 0, 1.0, special.chdtrc(df, np.maximum(x, 0.0)))
    return _out(np.where(df > 0, p, np.nan))


def f_sf(x, dfn, dfd):
    x = np.asarray(x, dtype=float)
    with np.errstate(invalid="ignore"):
        return _out(np.where(x < 0, 1.0, special.fdtrc(dfn, dfd, np.maximum(x, 0.0))))


def f_ppf(p, dfn, dfd):
    return _out(special.fdtri(dfn, dfd, p))
