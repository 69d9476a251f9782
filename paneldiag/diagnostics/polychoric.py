"""Polychoric correlations by two-step maximum likelihood, from pairwise tables.

The bivariate normal distribution function is computed with the method of Genz (2004),
vectorised over arrays, so a whole set of tables (all wave pairs, and every
leave-one-group-out copy of them) is fitted at once by Fisher scoring.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial.legendre import leggauss
from scipy.special import ndtr, ndtri

_GL_X, _GL_W = leggauss(20)
THRESHOLD_LIMIT = 8.0   # thresholds beyond +-8 are treated as infinite (Phi(-8) ~ 6e-16)
RHO_LIMIT = 0.9999


def bivariate_normal_cdf(h, k, r) -> np.ndarray:
    """P(X <= h, Y <= k) for standard bivariate normal X, Y with correlation r.

    Vectorised over broadcastable arrays. The method is Genz's: Gauss-Legendre
    quadrature (20 points) of the Drezner and Wesolowsky (1990) integral in the arcsine
    of r when |r| < 0.925, and the series-plus-quadrature form for the nearly singular
    case otherwise. Infinite limits are allowed.

    References
    ----------
    Drezner, Z. and Wesolowsky, G. O. (1990). On the computation of the bivariate
    normal integral. Journal of Statistical Computation and Simulation 35, 101-107.
    Genz, A. (2004). Numerical computation of rectangular bivariate and trivariate
    normal and t probabilities. Statistics and Computing 14, 251-260.
    """
    h, k, r = np.broadcast_arrays(np.asarray(h, float), np.asarray(k, float),
                                  np.asarray(r, float))
    hc = np.clip(h, -38.0, 38.0)
    kc = np.clip(k, -38.0, 38.0)
    with np.errstate(all="ignore"):
        p = _bvn_upper(-hc, -kc, r)
    # exact edges: an infinite limit reduces to the univariate distribution
    p = np.where(np.isneginf(h) | np.isneginf(k), 0.0, p)
    p = np.where(np.isposinf(h), ndtr(kc), p)
    p = np.where(np.isposinf(k), ndtr(hc), p)
    p = np.where(np.isposinf(h) & np.isposinf(k), 1.0, p)
    return p


def _bvn_upper(h, k, r):
    """P(X > h, Y > k) (Genz 2004, bvnu), elementwise; each branch on its own elements."""
    shape = h.shape
    h, k, r = h.ravel(), k.ravel(), r.ravel()
    p = np.empty(h.shape)
    small = np.abs(r) < 0.925
    if small.any():
        p[small] = _bvn_small(h[small], k[small], r[small])
    if (~small).any():
        p[~small] = _bvn_large(h[~small], k[~small], r[~small])
    return np.clip(p, 0.0, 1.0).reshape(shape)


def _exp(x):
    """exp of arguments floored at -600 (avoids slow subnormal results; exp(-600) ~ 0)."""
    return np.exp(np.maximum(x, -600.0))


def _bvn_small(h, k, r):
    x = _GL_X
    hk, hs = (h * k)[:, None], ((h * h + k * k) / 2)[:, None]
    asr = np.arcsin(r) / 2
    sn = np.sin(asr[:, None] * (1 + x))   # the nodes are symmetric: 1 + x covers 1 -+ x_i
    total = (_GL_W * _exp((sn * hk - hs) / (1 - sn ** 2))).sum(-1)
    return total * asr / (2 * np.pi) + ndtr(-h) * ndtr(-k)


def _bvn_large(h, k, r):
    x = _GL_X
    neg = r < 0
    k = np.where(neg, -k, k)
    hk = h * k
    exact = np.abs(r) >= 1
    a2 = np.where(exact, 1.0, (1 - r) * (1 + r))
    a = np.sqrt(a2)
    bs = (h - k) ** 2
    c = (4 - hk) / 8
    d = (12 - hk) / 16
    asr = -(bs / a2 + hk) / 2
    bvn = np.where(asr > -100, a * _exp(asr) * (1 - c * (bs - a2) * (1 - d * bs / 5) / 3
                                                 + c * d * a2 * a2 / 5), 0.0)
    b = np.sqrt(bs)
    sp = np.sqrt(2 * np.pi) * ndtr(-b / a)
    bvn = bvn - np.where(hk > -100,
                         _exp(-hk / 2) * sp * b * (1 - c * bs * (1 - d * bs / 5) / 3), 0.0)
    half = (a / 2)[:, None]
    xs = (half * (1 + x)) ** 2            # symmetric nodes again
    rs = np.sqrt(1 - xs)
    asr3 = -(bs[:, None] / xs + hk[:, None]) / 2
    sp3 = 1 + c[:, None] * xs * (1 + d[:, None] * xs)
    ep = _exp(-hk[:, None] * (1 - rs) / (2 * (1 + rs))) / rs
    terms = np.where(asr3 > -100, _GL_W * _exp(asr3) * (ep - sp3), 0.0)
    bvn = -(bvn + half[:, 0] * terms.sum(-1)) / (2 * np.pi)
    lower = np.where(h < 0, ndtr(k) - ndtr(h), ndtr(-h) - ndtr(-k))
    p = np.where(~neg, bvn + ndtr(-np.maximum(h, k)), np.where(h >= k, -bvn, lower - bvn))
    # r = +-1 exactly: the degenerate distribution
    p_exact = np.where(~neg, ndtr(-np.maximum(h, k)), np.maximum(0.0, ndtr(k) - ndtr(h)))
    return np.where(exact, p_exact, p)


def bivariate_normal_pdf(h, k, r) -> np.ndarray:
    """Density of the standard bivariate normal with correlation r at (h, k); 0 at infinity."""
    h, k, r = np.broadcast_arrays(np.asarray(h, float), np.asarray(k, float),
                                  np.asarray(r, float))
    one = 1 - r * r
    with np.errstate(all="ignore"):
        q = (h * h - 2 * r * h * k + k * k) / one
        f = np.exp(-q / 2) / (2 * np.pi * np.sqrt(one))
    return np.where(np.isfinite(h) & np.isfinite(k), f, 0.0)


def thresholds(margin: np.ndarray) -> np.ndarray:
    """Normal thresholds from category counts along the last axis: (..., L) -> (..., L + 1),
    with -inf and +inf at the ends (the first step of Olsson 1979). Inner thresholds of
    empty end categories are held at +-THRESHOLD_LIMIT."""
    total = margin.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        cum = np.cumsum(margin, axis=-1)[..., :-1] / total
        inner = np.clip(ndtri(cum), -THRESHOLD_LIMIT, THRESHOLD_LIMIT)
    shape = margin.shape[:-1] + (1,)
    return np.concatenate([np.full(shape, -np.inf), inner, np.full(shape, np.inf)], axis=-1)


def _cells(a, b, rho, fn):
    """Rectangle sums of ``fn`` over the threshold grid: (..., L, L). Only the inner,
    finite corners are computed by ``fn``; the outer rows and columns are 0 or the
    univariate distribution function (cdf) and 0 (density)."""
    inner = fn(a[..., 1:-1, None], b[..., None, 1:-1], rho[..., None, None])
    shape = inner.shape[:-2] + (inner.shape[-2] + 2, inner.shape[-1] + 2)
    grid = np.zeros(shape)
    grid[..., 1:-1, 1:-1] = inner
    if fn is bivariate_normal_cdf:
        grid[..., -1, 1:-1] = ndtr(b[..., 1:-1])
        grid[..., 1:-1, -1] = ndtr(a[..., 1:-1])
        grid[..., -1, -1] = 1.0
    return grid[..., 1:, 1:] - grid[..., :-1, 1:] - grid[..., 1:, :-1] + grid[..., :-1, :-1]


def polychoric(tables: np.ndarray, tol: float = 1e-10, max_iter: int = 100):
    """Two-step maximum-likelihood polychoric correlations of a stack of tables.

    ``tables`` is (..., L, L) counts (rows: the first variable). Step one fixes each
    variable's thresholds from its marginal counts in that table; step two maximises
    the multinomial likelihood sum n_ij log P_ij(rho), P_ij the bivariate normal
    rectangle probabilities, over rho alone, by Fisher scoring with step halving,
    using dP/drho = the bivariate normal density at the rectangle corners
    (Plackett's identity). Returns (rho, n): NaN where a table has fewer than three
    units or only one non-empty row or column.

    References
    ----------
    Olsson, U. (1979). Maximum likelihood estimation of the polychoric correlation
    coefficient. Psychometrika 44, 443-460.
    Plackett, R. L. (1954). A reduction formula for normal multivariate integrals.
    Biometrika 41, 351-360.
    """
    n = np.asarray(tables, dtype=float)
    lead = n.shape[:-2]
    n = n.reshape((-1,) + n.shape[-2:])
    total = n.sum(axis=(-2, -1))
    rows, cols = n.sum(axis=-1), n.sum(axis=-2)
    a, b = thresholds(rows), thresholds(cols)
    usable = (total >= 3) & ((rows > 0).sum(-1) > 1) & ((cols > 0).sum(-1) > 1)
    rho = np.where(usable, _start(n, rows, cols, total), 0.0)

    def loglik(i, r):
        p = _cells(a[i], b[i], r, bivariate_normal_cdf)
        hit = n[i] > 0
        with np.errstate(divide="ignore"):
            return np.where(hit, n[i] * np.log(np.where(hit, p, 1.0)), 0.0).sum((-2, -1)), p

    active = np.flatnonzero(usable)
    ll = np.zeros(len(n))
    ll[active], p_act = loglik(active, rho[active])
    for _ in range(max_iter):  # Fisher scoring on the tables not yet converged
        if len(active) == 0:
            break
        i = active
        dp = _cells(a[i], b[i], rho[i], bivariate_normal_pdf)
        with np.errstate(invalid="ignore", divide="ignore"):
            safe = np.where(p_act > 0, p_act, np.inf)
            score = (n[i] * dp / safe).sum((-2, -1))
            info = total[i] * (dp * dp / safe).sum((-2, -1))
            step = np.where(info > 0, score / info, 0.0)
        step = np.clip(step, -0.5, 0.5)
        for _ in range(30):  # step halving where the likelihood would fall
            trial = np.clip(rho[i] + step, -RHO_LIMIT, RHO_LIMIT)
            ll_new, p_new = loglik(i, trial)
            worse = ll_new < ll[i] - 1e-12 * np.abs(ll[i])
            if not worse.any():
                break
            step = np.where(worse, step / 2, step)
        keep = ~worse
        moved = np.where(keep, np.abs(trial - rho[i]), 0.0)
        rho[i] = np.where(keep, trial, rho[i])
        ll[i] = np.where(keep, ll_new, ll[i])
        p_act = np.where(keep[:, None, None], p_new, p_act)
        going = moved >= tol
        active, p_act = i[going], p_act[going]
    return np.where(usable, rho, np.nan).reshape(lead), total.reshape(lead)


def _start(n, rows, cols, total):
    """Pearson correlation of the category indices: a starting value for rho."""
    levels = np.arange(n.shape[-1], dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = (rows * levels).sum(-1) / total
        my = (cols * levels).sum(-1) / total
        dx, dy = levels - mx[..., None], levels - my[..., None]
        sxy = (n * dx[..., :, None] * dy[..., None, :]).sum((-2, -1))
        sxx, syy = (rows * dx * dx).sum(-1), (cols * dy * dy).sum(-1)
        r = sxy / np.sqrt(sxx * syy)
    return np.clip(np.nan_to_num(r), -0.95, 0.95)


def latent_scale(margins: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Means and standard deviations of the normal variables behind an ordinal measure
    at each wave, with its thresholds held equal across waves and the first wave's
    latent variable standardised (mean 0, SD 1).

    ``margins`` is (T, L): the category counts of each wave. The thresholds and the
    later waves' means and SDs are fitted jointly by maximising the multinomial
    likelihood of the margins, so change in the latent mean and variance shows, as in
    latent growth models of ordinal outcomes with invariant thresholds (Mehta, Neale and
    Flay 2004, Psychological Methods 9(3), 301-333). Needs at least three categories
    (two thresholds fix the scale); returns None otherwise or when the fit fails.

    References
    ----------
    Mehta, P. D., Neale, M. C. and Flay, B. R. (2004). Squeezing interval change from
    ordinal panel data: latent growth curves with ordinal outcomes. Psychological
    Methods, 9, 301-333.
    """
    from scipy import optimize

    margins = np.asarray(margins, dtype=float)
    used = margins.sum(axis=0) > 0
    margins = margins[:, used]
    n_waves, n_cat = margins.shape
    if n_cat < 3 or n_waves < 1 or np.any(margins.sum(axis=1) <= 0):
        return None
    pooled = thresholds(margins.sum(axis=0))[1:-1]
    start = np.concatenate([pooled, np.zeros(n_waves - 1), np.zeros(n_waves - 1)])

    def unpack(x):
        tau = x[:n_cat - 1]
        mu = np.concatenate([[0.0], x[n_cat - 1:n_cat - 1 + n_waves - 1]])
        sd = np.concatenate([[1.0], np.exp(x[n_cat - 1 + n_waves - 1:])])
        return tau, mu, sd

    def negloglik(x):
        """Minus the log-likelihood of the margins and its gradient (the derivative of
        each category's probability is the normal density at its two thresholds)."""
        tau, mu, sd = unpack(x)
        if np.any(np.diff(tau) <= 0):
            return 1e20, np.zeros_like(x)
        z = (tau[None, :] - mu[:, None]) / sd[:, None]
        cdf = np.concatenate([np.zeros((n_waves, 1)), ndtr(z), np.ones((n_waves, 1))],
                             axis=1)
        prob = np.clip(np.diff(cdf, axis=1), 1e-300, None)
        ratio = margins / prob
        by_z = -np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi) * (ratio[:, :-1] - ratio[:, 1:])
        grad = np.concatenate([(by_z / sd[:, None]).sum(axis=0),
                               -(by_z / sd[:, None]).sum(axis=1)[1:],
                               -(by_z * z).sum(axis=1)[1:]])
        return -float(np.sum(margins * np.log(prob))), grad

    # analytic gradients and a stopping rule relative to the counts: the estimates are
    # reproducible to rounding, not to a numerical gradient's step
    res = optimize.minimize(negloglik, start, jac=True, method="BFGS",
                            options={"maxiter": 5000, "gtol": 1e-10 * margins.sum()})
    if not np.isfinite(res.fun):
        return None
    x = res.x
    grad = negloglik(x)[1]
    for _ in range(3):
        # BFGS stops on rounding in its line search some way from the optimum (one wave
        # in 1e9); Newton steps on the analytic gradient, with its derivative by central
        # differences, take the estimates to rounding, so they do not depend on the
        # order the counts were summed in
        hess = optimize.approx_fprime(x, lambda y: negloglik(y)[1], 1e-6)
        try:
            trial = x - np.linalg.solve(0.5 * (hess + hess.T), grad)
        except np.linalg.LinAlgError:
            break
        trial_grad = negloglik(trial)[1]
        if not np.linalg.norm(trial_grad) < np.linalg.norm(grad):
            break
        x, grad = trial, trial_grad
    _, mu, sd = unpack(x)
    return mu, sd
