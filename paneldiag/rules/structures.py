"""Covariance structures of the process families, fitted to the ML moments under MAR.

Each family implies a structure for the T x T covariance matrix of the waves (wave means
are left free, except where the mean's shape is itself the question):

    occasion noise   Sigma = e I
    stable trait     Sigma = a 11' + e I
    carry-over       Sigma = b K(rho) + e I,              K_st = rho ** |t_s - t_t|
    trait + carry    Sigma = a 11' + b K(rho) + e I
    growth           Sigma = L Psi L' + e I,              L = [1, lambda]
    growth + carry   Sigma = L Psi L' + b K(rho) + e I

with one error variance ``e`` common to all waves (occasion-specific variance and
measurement error, which no covariance structure can tell apart; equal across waves as
in Wiley and Wiley 1970, so that variances fanning out over waves count against the
stationary structures), ``lambda`` the growth basis
(the wave times scaled to run from 0 to 1 over the span, or the shape of the mean),
and ``Psi`` the 2 x 2 covariance of the unit intercepts and slopes. Fitting is by the
normal-theory maximum-likelihood discrepancy F = log|Sigma| + tr(S Sigma^-1) with
analytic gradients; intervals come from the information matrix (the inverse Hessian
of F scaled by 2 / (n - 1)) and the delta method. ``n`` is an effective sample size
supplied by the caller (with missing data, the mean pairwise-complete count: a
conservative choice for a two-stage fit to EM moments, Savalei and Bentler 2009).

References
----------
Wiley, D. E. and Wiley, J. A. (1970). The estimation of measurement error in panel
data. American Sociological Review, 35, 112-117.
Joreskog, K. G. (1970). Estimation and testing of simplex models. British Journal of
Mathematical and Statistical Psychology, 23, 121-145.
Kenny, D. A. and Zautra, A. (1995). The trait-state-error model for multiwave data.
Journal of Consulting and Clinical Psychology, 63(1), 52-59.
Meredith, W. and Tisak, J. (1990). Latent curve analysis. Psychometrika, 55, 107-122.
Browne, M. W. and Cudeck, R. (1993). Alternative ways of assessing model fit. In
Bollen and Long (eds.), Testing Structural Equation Models. Sage.
Savalei, V. and Bentler, P. M. (2009). A two-stage approach to missing data: theory and
application to auxiliary variables. Structural Equation Modeling, 16, 477-497.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from paneldiag import distributions as dist

Z95 = float(dist.norm_ppf(0.975))
# Relative difference of two discrepancies below which they count as equal: the fits
# stop at a relative change of 1e-13, so smaller differences are rounding, and would
# otherwise turn a boundary test's p from 1 into 0.5 at random.
TIE = 1e-10


@dataclass(frozen=True)
class Structure:
    """Which parts a covariance structure has; ``basis`` is the growth lambda or None."""

    name: str
    trait: bool = False
    carry: bool = False
    basis: np.ndarray | None = None

    def names(self, n_waves: int) -> list[str]:
        out = ["error_var"]
        if self.basis is not None:
            out += ["intercept_var", "intercept_slope_cov", "slope_var"]
        elif self.trait:
            out += ["trait_var"]
        if self.carry:
            out += ["carry_var", "rho"]
        return out


@dataclass(frozen=True)
class Fit:
    """A fitted structure: parameters by name, discrepancy, test against the saturated
    covariance (None when the sample covariance is singular), and the parameters'
    covariance matrix from the information matrix."""

    structure: Structure
    params: dict
    theta: np.ndarray
    discrepancy: float
    chi2: float | None
    df: int
    rmsea: float | None
    p_value: float | None
    theta_cov: np.ndarray | None
    sigma: np.ndarray

    def derived(self, fn) -> tuple[float, float, float]:
        """(estimate, ci_low, ci_high) of fn(params) by the delta method."""
        est = _safe(fn, self.params)
        if self.theta_cov is None or not np.isfinite(est):
            return est, np.nan, np.nan
        keys = list(self.params)
        grad = np.zeros(len(keys))
        for i, key in enumerate(keys):
            h = 1e-6 * max(1.0, abs(self.params[key]))
            up, down = dict(self.params), dict(self.params)
            up[key] += h
            down[key] -= h
            grad[i] = (_safe(fn, up) - _safe(fn, down)) / (2 * h)
        var = float(grad @ self.theta_cov @ grad)
        if not np.isfinite(var) or var < 0:
            return est, np.nan, np.nan
        se = np.sqrt(var)
        return est, est - Z95 * se, est + Z95 * se


def _safe(fn, params: dict) -> float:
    """fn(params) as a float; NaN where it is undefined (a zero share denominator)."""
    with np.errstate(all="ignore"):
        try:
            value = fn({k: np.float64(v) for k, v in params.items()})
        except ZeroDivisionError:
            return np.nan
    value = np.real_if_close(value)
    return float(value) if np.isrealobj(value) else np.nan


def _build(structure: Structure, theta: np.ndarray, times: np.ndarray):
    """Sigma(theta) and the list of dSigma/dtheta_k."""
    t = len(times)
    sigma = theta[0] * np.eye(t)
    grads = [np.eye(t)]
    i = 1
    ones = np.ones(t)
    if structure.basis is not None:
        lam = structure.basis
        g11, g12, g22 = theta[i:i + 3]
        d11 = np.outer(ones, ones)
        d12 = np.outer(ones, lam) + np.outer(lam, ones)
        d22 = np.outer(lam, lam)
        sigma = sigma + g11 * d11 + g12 * d12 + g22 * d22
        grads += [d11, d12, d22]
        i += 3
    elif structure.trait:
        d = np.outer(ones, ones)
        sigma = sigma + theta[i] * d
        grads.append(d)
        i += 1
    if structure.carry:
        b, rho = theta[i], theta[i + 1]
        gap = np.abs(times[:, None] - times[None, :])
        kernel = rho ** gap
        with np.errstate(divide="ignore", invalid="ignore"):
            dk = np.where(gap > 0, gap * rho ** (gap - 1), 0.0)
        sigma = sigma + b * kernel
        grads += [kernel, b * dk]
    return sigma, grads


def _objective(theta, structure, times, s):
    sigma, grads = _build(structure, theta, times)
    try:
        chol = np.linalg.cholesky(sigma)
    except np.linalg.LinAlgError:
        return 1e10, np.zeros_like(theta)
    logdet = 2.0 * np.log(np.diag(chol)).sum()
    inv = np.linalg.inv(sigma)
    value = logdet + float(np.sum(s * inv))
    g = inv - inv @ s @ inv
    return value, np.array([float(np.sum(g * d)) for d in grads])


def _starts(structure: Structure, s: np.ndarray) -> list[np.ndarray]:
    t = s.shape[0]
    var = np.diag(s)
    off = s[~np.eye(t, dtype=bool)]
    level = max(float(np.mean(off)) if off.size else 0.0, 0.05 * float(np.mean(var)))
    base = [0.5 * float(np.mean(var))]
    starts = []
    rhos = (0.3, 0.85) if structure.carry else (None,)
    for rho in rhos:
        theta = list(base)
        if structure.basis is not None:
            theta += [level * 0.5, 0.0, 0.1 * float(np.mean(var))]
        elif structure.trait:
            theta += [level * 0.5]
        if structure.carry:
            theta += [0.3 * float(np.mean(var)), rho]
        starts.append(np.array(theta, dtype=float))
    return starts


def _bounds(structure: Structure, s: np.ndarray) -> list[tuple]:
    floor = 1e-6 * float(np.mean(np.diag(s)))
    out = [(floor, None)]
    if structure.basis is not None:
        out += [(0.0, None), (None, None), (0.0, None)]
    elif structure.trait:
        out += [(0.0, None)]
    if structure.carry:
        out += [(0.0, None), (0.0, 0.995)]
    return out


def _hessian(theta, structure, times, s) -> np.ndarray:
    p = len(theta)
    h_mat = np.zeros((p, p))
    for k in range(p):
        step = 1e-5 * max(1.0, abs(theta[k]))
        up, down = theta.copy(), theta.copy()
        up[k] += step
        down[k] -= step
        if structure.carry and k == p - 1:  # rho must stay inside (0, 1) for the kernel
            up[k] = min(up[k], 0.9999)
            down[k] = max(down[k], 1e-6)
            step = (up[k] - down[k]) / 2
        h_mat[:, k] = (_objective(up, structure, times, s)[1]
                       - _objective(down, structure, times, s)[1]) / (2 * step)
    return 0.5 * (h_mat + h_mat.T)


def fit_structure(structure: Structure, s: np.ndarray, times: np.ndarray,
                  n_eff: float) -> Fit:
    """Fit ``structure`` to the covariance ``s`` by maximum likelihood."""
    t = s.shape[0]
    best = None
    for start in _starts(structure, s):
        res = optimize.minimize(_objective, start, args=(structure, times, s), jac=True,
                                method="L-BFGS-B", bounds=_bounds(structure, s),
                                options={"maxiter": 2000, "ftol": 1e-13, "gtol": 1e-9})
        if best is None or res.fun < best.fun:
            best = res
    theta = best.x
    value = float(best.fun)
    df = t * (t + 1) // 2 - len(theta)
    chi2, rmsea, p_value = _fit_statistics(value, s, n_eff, df)
    theta_cov = None
    try:
        hess = _hessian(theta, structure, times, s)
        cov = 2.0 / (n_eff - 1) * np.linalg.pinv(hess)
        if np.all(np.isfinite(cov)):
            theta_cov = cov
    except (np.linalg.LinAlgError, ValueError):
        theta_cov = None
    params = dict(zip(structure.names(t), map(float, theta)))
    sigma, _ = _build(structure, theta, times)
    return Fit(structure, params, theta, value, chi2, df, rmsea, p_value, theta_cov, sigma)


def _fit_statistics(value: float, s: np.ndarray, n_eff: float, df: int):
    """Chi-square of the ML discrepancy, RMSEA and p-value (None where undefined)."""
    t = s.shape[0]
    sign, logdet_s = np.linalg.slogdet(s)
    chi2 = rmsea = p_value = None
    if sign > 0 and n_eff > t:
        chi2 = max(0.0, (n_eff - 1) * (value - logdet_s - t))
        if df > 0:
            rmsea = float(np.sqrt(max(chi2 - df, 0.0) / (df * (n_eff - 1))))
            p_value = float(dist.chi2_sf(chi2, df))
    return chi2, rmsea, p_value


def fit_noise(s: np.ndarray, n_eff: float) -> Fit:
    """The occasion-noise structure e I in closed form (e = the mean wave variance)."""
    t = s.shape[0]
    e = float(np.mean(np.diag(s)))
    value = float(t * np.log(e) + t)
    df = t * (t + 1) // 2 - 1
    chi2, rmsea, p_value = _fit_statistics(value, s, n_eff, df)
    structure = Structure("occasion_noise")
    cov = np.array([[2.0 * e ** 2 / (t * (n_eff - 1))]])
    return Fit(structure, {"error_var": e}, np.array([e]), value, chi2, df, rmsea, p_value,
               cov, e * np.eye(t))


def likelihood_ratio(simple: Fit, rich: Fit, n_eff: float, df: int,
                     boundary: bool = False) -> tuple[float, float]:
    """(statistic, p) of the nested test simple -> rich: (n - 1)(F_simple - F_rich).

    ``boundary``: one added variance sits on the boundary under the null, so the
    statistic follows an equal mixture of chi-square(0) and chi-square(df) (Self and
    Liang 1987, J. American Statistical Association 82, 605-610).
    """
    gain = simple.discrepancy - rich.discrepancy
    if gain < TIE * max(1.0, abs(simple.discrepancy)):
        gain = 0.0   # within the optimiser's precision: the richer fit gains nothing
    stat = (n_eff - 1) * gain
    p = float(dist.chi2_sf(stat, df))
    if boundary:
        p = 0.5 * p if stat > 0 else 1.0
    return stat, p


# ----------------------------------------------------------------- the mean's shape

@dataclass(frozen=True)
class MeanShape:
    """Polynomial parts of the mean trajectory in within-wave SD units, with tests."""

    change_sd: float          # change of the straight-line fit over the span
    change_ci: tuple[float, float]
    change_p: float
    bend_sd: float            # largest departure of the quadratic part from its chord
    bend_ci: tuple[float, float]
    bend_p: float
    remainder_sd: float       # largest departure of the mean from its quadratic fit
    remainder_chi2: float
    remainder_df: int
    remainder_p: float
    sd: float


def mean_shape(mu: np.ndarray, s: np.ndarray, pair_n: np.ndarray, times: np.ndarray
               ) -> MeanShape:
    """Straight-line change, quadratic bend and the remainder of the wave means.

    The sampling covariance of the means is approximated by S_st n_st / (n_s n_t), the
    pairwise-complete form (exact for complete data, conservative for ML means under
    MAR). The remainder is tested with the Wald statistic of the orthogonal polynomial
    contrasts of degree 3 and above (Kirk 1995, Experimental Design, ch. 4: trend
    analysis with orthogonal polynomials).
    """
    t = len(times)
    tau = times - times[0]
    span = float(tau[-1]) if t > 1 else 1.0
    u = tau / span
    n_diag = np.diag(pair_n)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = s * pair_n / np.outer(n_diag, n_diag)
    sd = float(np.sqrt(np.mean(np.diag(s))))
    scale = sd if sd > 0 else np.nan  # no spread within waves: standardised change undefined

    def contrast(w):
        est = float(w @ mu)
        se = float(np.sqrt(max(w @ v @ w, 0.0)))
        p = float(2 * dist.norm_sf(abs(est) / se)) if se > 0 else np.nan
        return est / scale, ((est - Z95 * se) / scale, (est + Z95 * se) / scale), p

    x1 = np.column_stack([np.ones(t), u])
    w1 = np.linalg.pinv(x1)[1]                   # slope over the span (u runs 0..1)
    change = contrast(w1)
    nan3 = (np.nan, (np.nan, np.nan), np.nan)
    if t >= 3:
        x2 = np.column_stack([np.ones(t), u, u ** 2])
        w2 = np.linalg.pinv(x2)[2] / 4.0        # quadratic departure from its chord
        bend = contrast(w2)
        resid_op = np.eye(t) - x2 @ np.linalg.pinv(x2)
        remainder = float(np.max(np.abs(resid_op @ mu))) / scale
    else:
        bend, remainder = nan3, np.nan
    r_chi2, r_df, r_p = np.nan, max(t - 3, 0), np.nan
    if t >= 4 and np.min(n_diag) > t + 1:  # else the means' covariance is (near) singular
        q, _ = np.linalg.qr(np.vander(u, t, increasing=True))
        c = q[:, 3:].T
        est = c @ mu
        cv = c @ v @ c.T
        try:
            r_chi2 = float(est @ np.linalg.solve(cv, est))
            r_p = float(dist.chi2_sf(r_chi2, r_df))
        except np.linalg.LinAlgError:
            pass
    return MeanShape(change[0], change[1], change[2], bend[0], bend[1], bend[2],
                     remainder, r_chi2, r_df, r_p, sd)


def mean_basis(mu: np.ndarray, times: np.ndarray) -> np.ndarray | None:
    """The shape of the mean as a growth basis: 0 at the first wave, 1 at the last
    (None when the mean hardly changes from first to last wave)."""
    change = mu[-1] - mu[0]
    if not np.isfinite(change) or abs(change) < 1e-9:
        return None
    return (mu - mu[0]) / change


def time_basis(times: np.ndarray) -> np.ndarray:
    tau = times - times[0]
    return tau / tau[-1]


def implied(structure: Structure, theta: np.ndarray, times: np.ndarray) -> np.ndarray:
    """The covariance matrix a structure implies at parameters ``theta``."""
    return _build(structure, np.asarray(theta, dtype=float), times)[0]
