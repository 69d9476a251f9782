"""Covariance structures of the process families, fitted by full-information maximum
likelihood from the response-pattern summaries.

A structure is a sum of parts (``paneldiag.rules.parts``: error, trait, carry-over,
quasi-simplex, growth), Sigma(theta) = sum of the parts' shares; the wave means are left
free. Fitting minimises the casewise (full-information) normal log-likelihood under
missing at random, computed from each response pattern's count, means and centred
cross-products (Anderson 1957; Arbuckle 1996; Enders 2010, ch. 4):

    F(theta) = (1/N) sum_p [ n_p log|Sigma_oo| + tr(Sigma_oo^-1 (C_p + n_p d_p d_p')) ]

with Sigma_oo the observed block of pattern p, C_p its centred cross-products and d_p
its means minus mu. For a given Sigma the best mu is the generalised-least-squares
solution mu = (sum_p n_p Q_p)^-1 sum_p n_p Q_p m_p (Q_p the embedded inverse of
Sigma_oo), so mu is profiled out and F has an analytic gradient in theta. With complete
data F reduces to log|Sigma| + tr(S Sigma^-1). Each fit starts from the two-stage fit
to the EM covariance (cheap, T x T algebra only), then the full likelihood is refined.

Fit is judged against the saturated model (the EM moments): chi2 = N (F - F_sat) on
T(T+1)/2 - q df. For small samples the chi-square is multiplied by Swain's correction
(Swain 1975; shown by Herzog and Boomsma 2009 to keep the RMSEA and its interval
calibrated at small N relative to the number of waves; from memory), and the root mean
square error of approximation is given with its 90% interval (Browne and Cudeck 1992)
together with the standardised root mean square residual of the correlations. BIC is
chi2 - df ln N (Raftery 1995). Parameter intervals come from the expected information
at the mean pairwise-complete count (conservative under missing data) and the delta
method.

References
----------
Anderson, T. W. (1957). Maximum likelihood estimates for a multivariate normal
distribution when some observations are missing. JASA, 52, 200-203.
Arbuckle, J. L. (1996). Full information estimation in the presence of incomplete data.
In Marcoulides and Schumacker (eds.), Advanced Structural Equation Modeling. Erlbaum.
Browne, M. W. and Cudeck, R. (1992). Alternative ways of assessing model fit.
Sociological Methods & Research, 21(2), 230-258.
Herzog, W. and Boomsma, A. (2009). Small-sample robust estimators of noncentrality-based
and incremental model fit. Structural Equation Modeling, 16, 1-27.
Raftery, A. E. (1995). Bayesian model selection in social research. Sociological
Methodology, 25, 111-163.
Swain, A. J. (1975). Analysis of parametric structures for variance matrices. PhD
thesis, University of Adelaide (from memory).
Joreskog, K. G. (1970). Estimation and testing of simplex models. British Journal of
Mathematical and Statistical Psychology, 23, 121-145.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
from scipy import linalg, optimize, special

from paneldiag import distributions as dist
from paneldiag.ahead import share
from paneldiag.rules.parts import Carry, Error, Part, Scale

Z95 = float(dist.norm_ppf(0.975))
# Relative difference of two discrepancies below which they count as equal: the fits
# stop at a relative change of 1e-13, so smaller differences are rounding, and would
# otherwise turn a boundary test's p from 1 into 0.5 at random.
TIE = 1e-10
# smallest singular value of the structure's Jacobian, relative to its largest, at a
# generic point: below it the structure is not (locally) identified at these waves
IDENTIFIED = 1e-7
# carry-over coefficients at which a growth + carry-over fit is profiled for flatness
PROFILE_RHO = (0.05, 0.25, 0.45, 0.65, 0.85)


_SIZES: dict = {}   # parameters per part, by (structure, number of waves)


@dataclass(frozen=True)
class Structure:
    """A covariance structure: a named sum of parts; ``label`` says it in words."""

    name: str
    parts: tuple
    label: str = ""

    def part(self, key: str) -> Part | None:
        return next((p for p in self.parts if p.key == key), None)

    @property
    def per_wave(self) -> bool:
        """Whether the structure has parameters per wave (their number grows with T)."""
        return any(p.per_wave for p in self.parts)

    def sizes(self, t: int) -> list[int]:
        key = (self, t)
        if key not in _SIZES:
            _SIZES[key] = [len(p.names(t)) for p in self.parts]
        return _SIZES[key]

    def names(self, t: int) -> list[str]:
        return [n for p in self.parts for n in p.names(t)]

    def split(self, theta, t: int) -> list[np.ndarray]:
        cuts = np.cumsum([0] + self.sizes(t))
        theta = np.asarray(theta, dtype=float)
        return [theta[a:b] for a, b in zip(cuts[:-1], cuts[1:])]

    def build(self, theta, times: np.ndarray):
        """Sigma(theta) and the stacked derivatives dSigma/dtheta_k, (q, T, T)."""
        t = len(times)
        sigma = np.zeros((t, t))
        grads: list[np.ndarray] = []
        for part, values in zip(self.parts, self.split(theta, t)):
            share, g = part.share(values, times)
            sigma = sigma + share
            grads += g
        return sigma, np.array(grads).reshape(len(grads), t, t)

    def bounds(self, scale: Scale) -> list[tuple]:
        return [b for p in self.parts for b in p.bounds(scale)]

    def limits(self, scale: Scale) -> tuple[np.ndarray, np.ndarray]:
        """The bounds as arrays of lower and upper limits (+-inf where open)."""
        bounds = self.bounds(scale)
        return (np.array([-np.inf if lo is None else lo for lo, _ in bounds]),
                np.array([np.inf if hi is None else hi for _, hi in bounds]))

    def starts(self, scale: Scale) -> list[np.ndarray]:
        options = [p.starts(scale) for p in self.parts]
        return [np.concatenate([np.asarray(s, float) for s in combo])
                for combo in itertools.product(*options)]

    def canonical(self, theta, t: int) -> np.ndarray:
        """The reported form of ``theta`` (each part's :meth:`Part.canonical`). On the
        faces where stationary carry-over is no carry-over, any point of the face gives
        the same Sigma, and a fit stops wherever the last bits of its sums put it: with
        no variance rho is reported as 0, and at rho = 0 (b I, occasion-specific) its
        variance is moved into the error variances."""
        values = [part.canonical(v) for part, v in zip(self.parts, self.split(theta, t))]
        carry = next((i for i, p in enumerate(self.parts) if isinstance(p, Carry)), None)
        error = next((i for i, p in enumerate(self.parts) if isinstance(p, Error)), None)
        if carry is not None and error is not None:
            b, rho = values[carry]
            if rho == 0.0:
                values[error] = values[error] + b
            if b == 0.0 or rho == 0.0:
                values[carry] = np.zeros(2)
        return np.concatenate(values)

    def regular_point(self, theta, t: int, sizes) -> np.ndarray:
        """``theta`` moved off the folds of the parameterisation (each part's
        :meth:`Part.regular_point`), for the delta method."""
        return np.concatenate([part.regular_point(values, part_sizes) for part, values,
                               part_sizes in zip(self.parts, self.split(theta, t),
                                                 self.split(sizes, t))])

    def regular_jacobian(self, theta, t: int) -> np.ndarray:
        """d phi / d theta for the well-conditioned parameters phi of the delta method
        (each part's :meth:`Part.regular_jacobian`, block-diagonal)."""
        return linalg.block_diag(*[part.regular_jacobian(values) for part, values
                                   in zip(self.parts, self.split(theta, t))])

    def error_variances(self, theta, t: int) -> np.ndarray:
        for part, values in zip(self.parts, self.split(theta, t)):
            if isinstance(part, Error):
                return part.variances(values, t)
        return np.zeros(t)

    def identified(self, scale: Scale, times: np.ndarray) -> bool:
        """Local identification at a generic point near the start values: the Jacobian
        of the distinct covariances in theta has full column rank (Bekker, Merckens and
        Wansbeek 1994, Identification, Equivalent Models, and Computer Algebra)."""
        t = len(times)
        theta = self.starts(scale)[0]
        wobble = 1.0 + 0.07 * np.sin(1.0 + np.arange(len(theta)) * 2.3)
        theta = theta * wobble + 0.013 * _typical(self, scale) * np.cos(np.arange(len(theta)))
        theta = np.clip(theta, *self.limits(scale))
        _, grads = self.build(theta, times)
        iu = np.triu_indices(t)
        jac = grads[:, iu[0], iu[1]].T
        if jac.shape[1] > jac.shape[0]:
            return False
        norms = np.linalg.norm(jac, axis=0)
        if np.any(norms == 0):
            return False
        sv = np.linalg.svd(jac / norms, compute_uv=False)   # rank is scale-free
        return bool(sv[-1] > IDENTIFIED * sv[0])


# ------------------------------------------------------------------- likelihoods

def _factor(sigma: np.ndarray):
    """(log|Sigma|, Sigma^-1), or None unless Sigma is positive definite and far from
    singular (its Cholesky diagonal within 1e-7 of its largest entry): beyond that,
    log|Sigma| and Sigma^-1 lose every digit and a fit could run down a numerical cliff
    to a discrepancy below the saturated model's."""
    try:
        chol = np.linalg.cholesky(sigma)
        inv = np.linalg.inv(sigma)
    except np.linalg.LinAlgError:
        return None
    d = np.diag(chol)
    if not (np.all(np.isfinite(d)) and d.min() > 1e-7 * d.max()):
        return None
    return 2.0 * float(np.log(d).sum()), inv


class CovarianceLikelihood:
    """F = log|Sigma| + tr(S Sigma^-1): complete data (S the ML covariance), or the
    first stage of a fit to the EM covariance."""

    def __init__(self, s: np.ndarray):
        self.s = np.asarray(s, dtype=float)

    def value_grad(self, sigma: np.ndarray):
        factored = _factor(sigma)
        if factored is None:
            return None
        logdet, inv = factored
        value = logdet + float(np.sum(self.s * inv))
        return value, inv - inv @ self.s @ inv

    def at_population(self, sigma0: np.ndarray) -> "CovarianceLikelihood":
        return CovarianceLikelihood(sigma0)

    def expected_hessian(self, sigma: np.ndarray, grads) -> np.ndarray | None:
        return _expected_hessian(sigma, grads)


def _inverse_and_logdet(sigma, precision, logdet_all, g):
    """Each pattern's inverse observed block Q and log|Sigma_oo|, (P, k, k) and (P,).
    With fewer missing than observed waves, from the precision matrix P: Q is the Schur
    complement P_oo - P_om P_mm^-1 P_mo and log|Sigma_oo| = log|Sigma| + log|P_mm|, so
    only the small missing blocks are factored."""
    k, m = g.obs.shape[1], g.mis.shape[1]
    if m >= k:
        block = np.take(sigma.ravel(), g.flat)
        sign, logdet = np.linalg.slogdet(block)
        if np.any(sign <= 0):
            return None, None
        return np.linalg.inv(block), logdet
    flat = precision.ravel()
    p_oo = np.take(flat, g.flat)
    if m == 0:
        return p_oo, np.full(len(g.n), logdet_all)
    p_mm = np.take(flat, g.flat_mm)
    sign, logdet_mm = np.linalg.slogdet(p_mm)
    if np.any(sign <= 0):
        return None, None
    p_mo = np.take(flat, g.flat_mo)
    p_om = np.ascontiguousarray(np.swapaxes(p_mo, 1, 2))
    return p_oo - p_om @ (np.linalg.inv(p_mm) @ p_mo), logdet_all + logdet_mm


# patterns x waves^4 above which the full-information fit's scoring uses the complete-data
# Hessian (at 100 patterns of 10 waves the exact one costs a few milliseconds a step)
EXACT_INFORMATION_COST = 2e6


class PatternLikelihood:
    """The full-information discrepancy from the response-pattern summary (module
    docstring); ``groups`` as built by ``diagnostics.missingness._groups``."""

    def __init__(self, groups: list, n_waves: int):
        self.groups = groups
        self.t = n_waves
        self.n_total = float(sum(g.n.sum() for g in groups))

    def value_grad(self, sigma: np.ndarray):
        from paneldiag.diagnostics.missingness import _scatter
        t = self.t
        with np.errstate(all="ignore"):
            factored = _factor(sigma)
            if factored is None:
                return None
            logdet_all, precision = factored
            blocks = []
            a = np.zeros(t * t)
            b = np.zeros(t)
            for g in self.groups:
                q, logdet = _inverse_and_logdet(sigma, precision, logdet_all, g)
                if q is None:
                    return None
                qm = np.einsum("pij,pj->pi", q, g.mean)
                blocks.append((q, logdet))
                a += _scatter(g.n[:, None, None] * q, g.flat, t * t)
                b += _scatter(g.n[:, None] * qm, g.obs, t)
            try:
                mu = np.linalg.solve(a.reshape(t, t), b)
            except np.linalg.LinAlgError:
                return None
            value = 0.0
            grad = np.zeros(t * t)
            for g, (q, logdet) in zip(self.groups, blocks):
                qd = np.einsum("pij,pj->pi", q, g.mean - mu[g.obs])
                qcq = q @ g.m2 @ q
                value += float(np.sum(g.n * (logdet + np.einsum("pi,pi->p", qd, g.mean -
                                                                  mu[g.obs])))
                               + np.einsum("pij,pji->", q, g.m2))
                part = g.n[:, None, None] * (q - qd[:, :, None] * qd[:, None, :]) - qcq
                grad += _scatter(part, g.flat, t * t)
        if not np.isfinite(value):
            return None
        return value / self.n_total, grad.reshape(t, t) / self.n_total

    def expected_hessian(self, sigma: np.ndarray, grads) -> np.ndarray | None:
        """The expected Hessian of the discrepancy under MAR: each pattern's
        complete-data one on its observed waves, n_p tr(Q_p D_k Q_p D_l), summed and
        divided by N (the saturated means are orthogonal to the covariance parameters).
        It costs about P T^4 a step; above ``EXACT_INFORMATION_COST`` (thousands of
        patterns of many waves) the complete-data Hessian stands in, and scoring rescales
        it along each step by a secant."""
        if sum(len(g.n) for g in self.groups) * self.t ** 4 > EXACT_INFORMATION_COST:
            return _expected_hessian(sigma, grads)
        factored = _factor(sigma)
        if factored is None:
            return None
        logdet_all, precision = factored
        flat_grads = np.asarray(grads).reshape(len(grads), -1)
        hess = np.zeros((len(grads), len(grads)))
        for g in self.groups:
            q, _ = _inverse_and_logdet(sigma, precision, logdet_all, g)
            if q is None:
                return None
            m = np.einsum("pij,apjk->apik", q, flat_grads[:, g.flat])
            hess += np.einsum("apij,bpji,p->ab", m, m, g.n)
        return hess / self.n_total

    def at_population(self, sigma0: np.ndarray) -> "PatternLikelihood":
        """The same patterns with their expected moments under covariance ``sigma0``
        (and equal means): the discrepancy of a structure from it, times N, is the
        noncentrality of a test at this panel's response patterns."""
        from dataclasses import replace
        groups = [replace(g, mean=np.zeros_like(g.mean),
                          m2=g.n[:, None, None] * np.take(sigma0.ravel(), g.flat))
                  for g in self.groups]
        return PatternLikelihood(groups, self.t)


# ------------------------------------------------------------------------ fitting

@dataclass(frozen=True)
class Fit:
    """A fitted structure: parameters by name, discrepancy F, test against the
    saturated model (None when the saturated covariance is singular), fit indices, BIC,
    and the covariance matrix of its well-conditioned parameters from the expected
    information."""

    structure: Structure
    params: dict
    theta: np.ndarray
    discrepancy: float
    chi2: float | None
    df: int
    p_value: float | None
    rmsea: float | None
    rmsea_ci: tuple
    srmr: float | None
    bic: float | None
    # the inverse expected information of phi, the parameters in which the delta
    # method is taken (Structure.regular_jacobian: a growth factor's Psi, not its C)
    regular_cov: np.ndarray | None
    sigma: np.ndarray
    n_params: int = 0
    # where the fit is weakly identified (``flat_likelihood``), or None
    weak_identification: dict | None = None
    # the parameters at which the delta method's derivatives are taken: off the folds
    # of the parameterisation (Structure.regular_point), else ``params``
    delta_point: dict | None = None
    # d phi / d theta at ``delta_point``
    regular_jacobian: np.ndarray | None = None

    def derived(self, fn) -> tuple[float, float, float]:
        """(estimate, ci_low, ci_high) of fn(params) by the delta method, its derivatives
        taken at ``delta_point`` (where a growth factor's Cholesky diagonal is 0 its
        derivatives vanish, and the interval would follow how close to 0 the search
        stopped) and carried to phi (d fn / d phi = J'^-1 d fn / d theta), where the
        information is well conditioned."""
        est = _safe(fn, self.params)
        if self.regular_cov is None or not np.isfinite(est):
            return est, np.nan, np.nan
        point = self.delta_point or self.params
        keys = list(point)
        grad = np.zeros(len(keys))
        # steps relative to each parameter, and at least to its typical size (its unit is
        # the measure's, or none): a step relative to a factor entry near 0 would leave
        # a derivative of rounding, which J'^-1 then multiplies by about 1 / entry
        typical = _typical(self.structure, Scale.of(self.sigma))
        for i, key in enumerate(keys):
            h = 1e-6 * max(abs(point[key]), typical[i])
            up, down = dict(point), dict(point)
            up[key] += h
            down[key] -= h
            grad[i] = (_safe(fn, up) - _safe(fn, down)) / (2 * h)
        if self.regular_jacobian is not None:
            grad = np.linalg.solve(self.regular_jacobian.T, grad)
        var = float(grad @ self.regular_cov @ grad)
        if not np.isfinite(var) or var < 0:
            return est, np.nan, np.nan
        se = np.sqrt(var)
        if se == 0:
            return est, np.nan, np.nan
        return est, est - Z95 * se, est + Z95 * se

    def error_variances(self) -> np.ndarray:
        return self.structure.error_variances(self.theta, self.sigma.shape[0])


@dataclass(frozen=True)
class Skipped:
    """A specification that was not fitted, and why."""

    structure: Structure
    reason: str


def _safe(fn, params: dict) -> float:
    """fn(params) as a float; NaN where it is undefined (a zero share denominator)."""
    with np.errstate(all="ignore"):
        try:
            value = fn({k: np.float64(v) for k, v in params.items()})
        except ZeroDivisionError:
            return np.nan
    value = np.real_if_close(value)
    return float(value) if np.isrealobj(value) else np.nan


@dataclass
class Moments:
    """What every fit of one measure shares: the saturated (EM) moments, the wave
    times, the likelihood to maximise, the number of units N, and the effective n of
    the parameter intervals. Fits are cached by structure."""

    mu: np.ndarray
    sigma: np.ndarray
    times: np.ndarray
    likelihood: object
    n_units: float
    n_eff: float
    cache: dict = field(default_factory=dict)
    # what the likelihood ratios and BIC's likelihood are divided by (>= 1): the
    # elliptical kurtosis scaling, or the copies' average inflation (``copy_inflation``)
    lr_scaling: float = 1.0
    # delete-a-group copies of ``sigma`` (K, T, T): when given, each nested test gets its
    # own scaling from them (``scaling``)
    copies: np.ndarray | None = None
    # above this many waves, specifications with a parameter per wave are not fitted
    max_waves_per_wave: int | None = None
    # a flat likelihood: starts within this scaled -2 log-likelihood of the best whose
    # carry-over coefficients differ by more than ``flat_coefficient`` (None: not checked)
    flat_loglik: float | None = None
    flat_coefficient: float | None = None

    def __post_init__(self):
        self.scale = Scale.of(self.sigma)
        self.first_stage = CovarianceLikelihood(self.sigma)
        self.full = not isinstance(self.likelihood, CovarianceLikelihood)
        out = self.likelihood.value_grad(self.sigma)
        self.saturated = out[0] if out is not None else np.nan
        sign, _ = np.linalg.slogdet(self.sigma)
        self.singular = sign <= 0 or self.n_units <= len(self.times)

    @property
    def n_waves(self) -> int:
        return len(self.times)

    def fit(self, structure: Structure) -> "Fit | Skipped":
        if structure not in self.cache:
            self.cache[structure] = _fit(structure, self)
        return self.cache[structure]

    def fit_many(self, structures) -> None:
        """Fit the structures not fitted yet, on both threads of the screen (each fit
        is a function of its structure and these moments alone)."""
        todo = list(dict.fromkeys(s for s in structures if s not in self.cache))
        for structure, fit in zip(todo, share(lambda s: _fit(s, self), todo)):
            self.cache[structure] = fit


def _objective(likelihood, structure: Structure, times: np.ndarray):
    def fn(theta):
        sigma, grads = structure.build(theta, times)
        out = likelihood.value_grad(sigma)
        if out is None:
            return 1e10, np.zeros_like(theta)
        value, g = out
        return value, grads.reshape(len(grads), -1) @ g.ravel()
    return fn


def _expected_hessian(sigma: np.ndarray, grads: list) -> np.ndarray | None:
    """tr(Sigma^-1 D_k Sigma^-1 D_l): the expected Hessian of the discrepancy with
    complete data (the Fisher scoring matrix of covariance structures)."""
    try:
        inv = np.linalg.inv(sigma)
    except np.linalg.LinAlgError:
        return None
    mats = inv @ grads                          # (q, T, T)
    q = len(mats)
    return mats.reshape(q, -1) @ np.swapaxes(mats, 1, 2).reshape(q, -1).T


SCORING_STEPS = 40         # Fisher scoring steps in a round
MORE_SCORING_ROUNDS = 4    # further rounds while a round lowers the discrepancy ...
SCORING_PROGRESS = 1e5     # ... by this many times the fit's tolerance (a chi-square 0.01)


def _scoring(likelihood, structure: Structure, times, start, lower, upper, tol: float,
             max_iter: int = SCORING_STEPS):
    """Fisher scoring with the complete-data expected Hessian, projected onto the
    bounds (variables at a bound whose gradient points outward stay there), with
    step halving. Converges in tens of steps where a quasi-Newton search needs
    thousands on the quasi-simplex, whose parameters differ in scale by orders of
    magnitude (Lee and Jennrich 1979, Psychometrika 44, 99-113). Converged when the
    predicted decrease of the discrepancy is below ``tol``; returns (theta, value,
    converged, at_limit), at_limit when it stopped at ``max_iter`` steps while still
    going down."""
    fn = _objective(likelihood, structure, times)
    theta = np.clip(np.asarray(start, dtype=float), lower, upper)
    value, grad = fn(theta)
    curvature = 1.0   # secant rescaling of the complete-data Hessian (missing information)
    last_length = 1.0
    for _ in range(max_iter):
        sigma, grads = structure.build(theta, times)
        hess = likelihood.expected_hessian(sigma, grads)
        if hess is not None:
            hess = curvature * hess
        if hess is None or not np.isfinite(value):
            break
        at_low = (theta <= lower) & (grad > 0)
        at_high = (theta >= upper) & (grad < 0)
        free = ~(at_low | at_high)
        if not free.any():
            break
        h = hess[np.ix_(free, free)]
        # a ridge relative to each parameter's own curvature: the parameters' units differ
        # (variances in the measure's unit squared, coefficients in none), so one ridge
        # for all would swamp the variances of a measure in large units
        d = np.abs(np.diag(h))
        ridge = 1e-10 * np.where(d > 0, d, max(float(d.max()), 1e-300))
        try:
            step_free = -np.linalg.solve(h + np.diag(ridge), grad[free])
        except np.linalg.LinAlgError:
            break
        step = np.zeros_like(theta)
        step[free] = step_free
        slope = float(grad @ step)
        if not slope < 0:
            break
        # the predicted decrease under the unscaled Hessian: a secant factor above 1
        # shrinks it, and a search slowed by a large factor would pass for converged
        if -0.5 * slope * max(curvature, 1.0) < tol:
            return theta, value, True, False
        # a search that needed short steps starts the next one near them (a ridge or a
        # bound along which the full step overshoots), not 20 halvings above
        length, accepted = min(1.0, 4.0 * last_length), False
        for _ in range(40):
            trial = np.clip(theta + length * step, lower, upper)
            new_value, new_grad = fn(trial)
            if new_value <= value + 1e-4 * length * slope:
                accepted = True
                break
            length *= 0.5
        if not accepted:
            break
        moved = trial - theta
        along = float(moved @ hess @ moved)
        if along > 0:
            curvature *= float(np.clip((new_grad - grad) @ moved / along, 0.05, 20.0))
        theta, value, grad, last_length = trial, new_value, new_grad, length
    else:
        return theta, value, False, True
    return theta, value, False, False


@dataclass
class _Result:
    x: np.ndarray
    fun: float
    ends: list = field(default_factory=list)   # (x, fun) reached from every start


def _minimise(likelihood, structure: Structure, times, starts, scale: Scale, tol: float,
              limits: tuple | None = None):
    """The best of Fisher scoring from each start, polished by L-BFGS-B (in units of
    the parameters' typical sizes) where scoring stops short of a stationary point.
    ``limits`` (lower, upper) replace the structure's bounds (to hold parameters)."""
    lower, upper = limits or structure.limits(scale)
    typical = _typical(structure, scale)
    # a size of 0 or one far below a bound (starts on a near-constant measure) would put
    # the bounds at infinity in the polish's units: such a parameter takes its bound's size
    with np.errstate(all="ignore"):
        usable = np.isfinite(typical) & (typical > 0)
        for bound in (lower, upper):
            usable &= ~np.isfinite(bound) | np.isfinite(bound / typical)
    typical = np.where(usable, typical,
                       np.maximum(np.abs(np.where(np.isfinite(lower), lower, 0.0)), 1.0))
    fn = _objective(likelihood, structure, times)

    def scaled(z):
        value, grad = fn(z * typical)
        return value, grad * typical

    def search(start):
        theta, value, converged, at_limit = _scoring(likelihood, structure, times, start,
                                                     lower, upper, tol)
        # on a ridge (a weakly identified part, parameters at their bounds) scoring
        # crawls: a search cut off at its step limit would end where the last bits of the
        # sums put it, so it goes on while a round of steps still lowers the chi-square
        for _ in range(MORE_SCORING_ROUNDS):
            if not at_limit:
                break
            before = value
            theta, value, converged, at_limit = _scoring(likelihood, structure, times,
                                                         theta, lower, upper, tol)
            if before - value < SCORING_PROGRESS * tol:
                break
        if not converged:
            res = optimize.minimize(scaled, theta / typical, jac=True, method="L-BFGS-B",
                                    bounds=list(zip(lower / typical, upper / typical)),
                                    options={"maxiter": 500, "ftol": 1e-13, "gtol": 1e-9})
            if res.fun <= value:
                theta, value = res.x * typical, float(res.fun)
        return theta, value

    best, ends = None, []
    for start in starts:
        theta, value = search(start)
        ends.append((theta, value))
        if best is None or value < best.fun:
            best = _Result(theta, value)
    best.ends = ends
    return best


def _typical(structure: Structure, scale: Scale) -> np.ndarray:
    """The typical size of each parameter: its start value. A parameter that starts at
    zero (an off-diagonal entry of a growth part's Cholesky factor) takes the largest
    start of the parameters of its own part that share its unit: those in the measure's
    unit (Part.in_measure_unit) or the unit-free ones (coefficients and loadings). A
    size taken from the variances would be the square of the right one, off by the
    measure's unit squared."""
    t = len(scale.var)
    sizes = []
    for part, start in zip(structure.parts, structure.split(structure.starts(scale)[0], t)):
        start = np.abs(np.asarray(start, dtype=float))
        measured = part.in_measure_unit(scale)
        size = start.copy()
        for kind, fallback in ((measured, np.sqrt(scale.mean_var)), (~measured, 1.0)):
            alike = start[kind]
            fill = alike.max() if alike.size and alike.max() > 0 else fallback
            size[kind & (start == 0)] = fill
        sizes.append(size)
    return np.concatenate(sizes)


def _fit(structure: Structure, m: Moments) -> "Fit | Skipped":
    """The fit of one specification, or why it was skipped: a numerical failure of one
    specification skips it, never the screen."""
    try:
        return _fit_or_skip(structure, m)
    except (np.linalg.LinAlgError, FloatingPointError, ValueError) as problem:
        return Skipped(structure, f"the fit failed numerically ({problem})")


def _fit_or_skip(structure: Structure, m: Moments) -> "Fit | Skipped":
    t = m.n_waves
    q = len(structure.names(t))
    n_moments = t * (t + 1) // 2
    if q > n_moments:
        return Skipped(structure, f"{q} parameters for {n_moments} distinct covariances "
                                  f"of {t} waves")
    if structure.per_wave and m.max_waves_per_wave is not None and t > m.max_waves_per_wave:
        return Skipped(structure, f"parameters per wave are not fitted with more than "
                                  f"{m.max_waves_per_wave} waves ({t} here; the "
                                  f"max_waves_per_wave threshold)")
    if not structure.identified(m.scale, m.times):
        return Skipped(structure, f"not identified with {t} waves at these times")
    with np.errstate(all="ignore"):
        tol = 1e-7 / m.n_units     # a change of 1e-7 in a chi-square
        first = _minimise(m.first_stage, structure, m.times, structure.starts(m.scale),
                          m.scale, tol)
        best = first
        if m.full:
            best = _minimise(m.likelihood, structure, m.times, [first.x], m.scale, tol)
    value = float(best.fun)
    if not np.isfinite(value) or value >= 1e9:
        return Skipped(structure, "the fit did not reach a positive definite covariance")
    if np.isfinite(m.saturated) and value < m.saturated - 1e-8 * max(1.0, abs(m.saturated)):
        return Skipped(structure, "the fit ran to a numerically singular covariance")
    theta = structure.canonical(best.x, t)
    sigma, _ = structure.build(theta, m.times)
    df = n_moments - q
    stats = fit_statistics(value, m, df, sigma)
    names = structure.names(t)
    point = structure.regular_point(theta, t, _typical(structure, m.scale))
    point_sigma, point_grads = structure.build(point, m.times)
    jacobian = structure.regular_jacobian(point, t)
    # dSigma / dphi from dSigma / dtheta = J' dSigma / dphi
    regular_grads = np.linalg.solve(jacobian.T, point_grads.reshape(q, -1)).reshape(
        point_grads.shape)
    return Fit(structure, dict(zip(names, map(float, theta))), theta, value,
               *stats, regular_cov=_information_cov(point_sigma, regular_grads, m.n_eff),
               sigma=sigma, n_params=q, weak_identification=flat_likelihood(structure, first, m),
               delta_point=dict(zip(names, map(float, point))), regular_jacobian=jacobian)


def flat_likelihood(structure: Structure, result: _Result, m: Moments) -> dict | None:
    """Where the likelihood of a growth + carry-over fit is flat along the carry-over
    (``{"rho": [low, high], "deviance_gap": g}``: two values of rho whose fits differ by
    g in scaled deviance), or None. Candidates are the ends of the fit's starts and the
    profile of rho: the fit with rho held at each of ``PROFILE_RHO`` (those more than
    ``m.flat_coefficient`` from the estimate). When one reaches a scaled -2 log-likelihood (N F / scaling)
    within ``m.flat_loglik`` of the best at a rho more than ``m.flat_coefficient``
    away, the data cannot tell the carry-over from the growth and error parts (with
    few waves they trade off: Bollen and Curran 2004, Sociological Methods & Research
    32(3), 336-383, from memory) and the best point is one of many nearly equal ones.
    A carry-over of no variance makes rho meaningless: such ends are not compared."""
    if m.flat_loglik is None or m.flat_coefficient is None or \
            not isinstance(structure.part("carry"), Carry) or structure.part("growth") is None:
        return None
    names = structure.names(m.n_waves)
    b_at, rho_at = names.index("carry_var"), names.index("rho")
    best = np.asarray(result.x, dtype=float)

    def carries(x) -> bool:
        return x[b_at] * x[rho_at] > 0.01 * m.scale.mean_var

    candidates = list(result.ends)
    lower, upper = structure.limits(m.scale)
    for rho in PROFILE_RHO:
        if abs(rho - best[rho_at]) <= m.flat_coefficient:
            continue
        start = best.copy()
        start[rho_at] = rho
        held_low, held_high = lower.copy(), upper.copy()
        held_low[rho_at] = held_high[rho_at] = rho
        held = _minimise(m.first_stage, structure, m.times, [start], m.scale,
                         1e-7 / m.n_units, limits=(held_low, held_high))
        candidates.append((held.x, held.fun))
    for x, value in candidates:
        gap = m.n_units * (value - result.fun) / m.lr_scaling
        apart = abs(float(x[rho_at]) - float(best[rho_at]))
        if gap <= m.flat_loglik and apart > m.flat_coefficient and (carries(x) or
                                                                     carries(best)):
            low, high = sorted((float(best[rho_at]), float(x[rho_at])))
            return {"rho": [low, high], "deviance_gap": max(float(gap), 0.0)}
    return None


def _information_cov(sigma, grads, n_eff) -> np.ndarray | None:
    """Inverse of the expected information (n/2) tr(S^-1 D_k S^-1 D_l)."""
    info = _expected_hessian(sigma, grads)
    if info is None:
        return None
    cov = _pinv_scaled(0.5 * max(n_eff, 1.0) * info)
    return cov if np.all(np.isfinite(cov)) else None


def _pinv_scaled(a: np.ndarray) -> np.ndarray:
    """The pseudo-inverse of a symmetric information matrix, taken on its unit-diagonal
    form: its entries are in the units of the parameters (a variance's in the measure's
    unit to the power -4, a coefficient's in none), and the pseudo-inverse's cut-off,
    relative to the largest singular value, would otherwise drop every direction of the
    parameters in the smaller units."""
    d = np.sqrt(np.abs(np.diag(a)))
    d = np.where(d > 0, d, 1.0)
    return np.linalg.pinv(a / np.outer(d, d)) / np.outer(d, d)


def swain_factor(n: float, p: int, df: int) -> float:
    """Swain's (1975) small-sample correction of the ML chi-square for p variables."""
    if df <= 0 or n <= 1:
        return 1.0
    q = (np.sqrt(1.0 + 4.0 * p * (p + 1) - 8.0 * df) - 1.0) / 2.0
    return float(1.0 - (p * (2 * p ** 2 + 3 * p - 1) - q * (2 * q ** 2 + 3 * q - 1))
                 / (12.0 * df * (n - 1.0)))


def rmsea_interval(chi2: float, df: int, n: float, level: float = 0.90):
    """RMSEA and its interval by inverting the noncentral chi-square in its
    noncentrality (Browne and Cudeck 1992)."""
    point = float(np.sqrt(max(chi2 - df, 0.0) / (df * (n - 1.0))))
    tail = (1.0 - level) / 2.0

    def bound(p):
        if special.chdtr(df, chi2) < p:
            return 0.0
        lam = float(special.chndtrinc(chi2, df, p))
        return float(np.sqrt(max(lam, 0.0) / (df * (n - 1.0)))) if np.isfinite(lam) else np.nan

    return point, (bound(1.0 - tail), bound(tail))


def srmr(s: np.ndarray, sigma: np.ndarray) -> float:
    """Standardised root mean square residual: the root mean square of the residual
    correlations (s_ij - sigma_ij) / sqrt(s_ii s_jj) over i <= j (Bentler 1995)."""
    return float(np.sqrt(np.mean(correlation_residuals(s, sigma)[np.triu_indices(len(s))] ** 2)))


def correlation_residuals(s: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    sd = np.sqrt(np.diag(s))
    return (s - sigma) / np.outer(sd, sd)


def fit_statistics(value: float, m: Moments, df: int, sigma: np.ndarray):
    """(chi2, df, p, rmsea, rmsea_ci, srmr, bic); the test parts None when undefined."""
    none = (None, df, None, None, (None, None), None, None)
    if m.singular or not np.isfinite(m.saturated):
        return none
    n, t = m.n_units, m.n_waves
    chi2 = max(0.0, n * (value - m.saturated))
    bic = chi2 - df * np.log(n)
    fit_srmr = srmr(m.sigma, sigma)
    if df <= 0:
        return (chi2, df, None, None, (None, None), fit_srmr, bic)
    corrected = chi2 * swain_factor(n, t, df)
    point, ci = rmsea_interval(corrected, df, n)
    return (chi2, df, float(dist.chi2_sf(corrected, df)), point, ci, fit_srmr, bic)


def likelihood_ratio(simple: Fit, rich: Fit, n_units: float, boundary: bool = False
                     ) -> tuple[float, int, float]:
    """(statistic, df, p) of the nested test simple -> rich: N (F_simple - F_rich) on
    the difference in parameters.

    ``boundary``: the added parts include one variance on its boundary under the null
    (with its covariances, when df > 1), so the statistic follows an equal mixture of
    chi-square(df - 1) and chi-square(df) (Self and Liang 1987, J. American Statistical
    Association 82, 605-610; Stram and Lee 1994, Biometrics 50, 1171-1177).
    """
    df = max(rich.n_params - simple.n_params, 1)
    gain = simple.discrepancy - rich.discrepancy
    if gain < TIE * max(1.0, abs(simple.discrepancy)):
        gain = 0.0   # within the optimiser's precision: the richer fit gains nothing
    stat = n_units * gain
    return stat, df, chi2_mixture_sf(stat, df) if boundary else float(dist.chi2_sf(stat, df))


def chi2_mixture_sf(stat: float, df: int) -> float:
    """Tail of the 50:50 mixture of chi-square(df - 1) and chi-square(df), chi-square(0)
    being a point mass at 0 (Stram and Lee 1994)."""
    if stat <= 0:
        return 1.0
    lower = float(dist.chi2_sf(stat, df - 1)) if df > 1 else 0.0
    return 0.5 * (lower + float(dist.chi2_sf(stat, df)))


def scaling(simple: Fit, rich: Fit, m: Moments) -> float:
    """The Satorra-Bentler scaling of the difference test simple -> rich, with the
    asymptotic covariance of the moments estimated from the delete-a-group copies of the
    covariance (a jackknife) instead of from fourth moments: c = tr(U_d Gamma) / df,
    U_d = U_simple - U_rich, U = W - W D (D'W D)^-1 D'W, W the normal-theory weight at the
    richer fit (Satorra and Bentler 2001, Psychometrika 66, 507-514). In the metric of
    W, d'U_d d = b_r' M_r^-1 b_r - b_s' M_s^-1 b_s, with b_k = tr(S^-1 G_k S^-1 d) / 2 and
    M the halved expected Hessian, so no T^2 x T^2 matrix is formed. At least 1: the
    normal-theory statistic is kept when the copies vary no more than normal theory
    says. Returns 1 without copies."""
    if m.copies is None or len(m.copies) < 2:
        return 1.0
    k = len(m.copies)
    try:
        inv = np.linalg.inv(rich.sigma)
    except np.linalg.LinAlgError:
        return 1.0
    dev = m.copies - m.copies.mean(axis=0)                 # (K, T, T)
    total = 0.0
    for fit, sign in ((rich, 1.0), (simple, -1.0)):
        _, grads = fit.structure.build(fit.theta, m.times)
        half = 0.5 * _expected_hessian(rich.sigma, grads)
        b = 0.5 * np.einsum("kij,gji->gk", inv @ grads, inv @ dev)   # S^-1 G_k, S^-1 d_g
        total += sign * float(np.einsum("gk,kl,gl->", b, _pinv_scaled(half), b))
    df = max(rich.n_params - simple.n_params, 1)
    c = m.n_units * (k - 1) / k * total / df
    return float(max(c, 1.0)) if np.isfinite(c) else 1.0


def copy_inflation(sigma: np.ndarray, copies: np.ndarray, n: float) -> float:
    """How much more the covariances vary across the delete-a-group copies than normal
    theory says, (sigma_ss sigma_tt + sigma_st^2) / n, on average over the distinct
    off-diagonal entries (at least 1): one scaling for the likelihood that BIC reads,
    where each test has its own (``scaling``)."""
    k, t = len(copies), sigma.shape[0]
    if k < 2 or t < 2:
        return 1.0
    iu = np.triu_indices(t, 1)
    reps = copies[:, iu[0], iu[1]]
    jack = (k - 1) / k * np.sum((reps - reps.mean(axis=0)) ** 2, axis=0)
    var = np.diag(sigma)
    normal = (var[iu[0]] * var[iu[1]] + sigma[iu] ** 2) / n
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = jack / normal
    ratio = ratio[np.isfinite(ratio)]
    return float(max(1.0, np.mean(ratio))) if ratio.size else 1.0


def noncentrality(simple: Structure, rich: Fit, m: Moments) -> float:
    """N times the discrepancy of ``simple`` from the covariance ``rich`` implies, at
    this panel's response patterns: the noncentrality of the test of the part that
    ``rich`` adds (Satorra and Saris 1985, Psychometrika 50, 83-90)."""
    population = m.likelihood.at_population(rich.sigma)
    base = population.value_grad(rich.sigma)
    if base is None:
        return np.nan
    starts = [fit.theta for fit in [m.fit(simple)] if isinstance(fit, Fit)] or \
        simple.starts(m.scale)
    with np.errstate(all="ignore"):
        best = _minimise(population, simple, m.times, starts, m.scale, 1e-7 / m.n_units)
    return float(max(0.0, m.n_units * (best.fun - base[0])))


def implied(structure: Structure, theta, times: np.ndarray) -> np.ndarray:
    """The covariance matrix a structure implies at parameters ``theta``."""
    return structure.build(np.asarray(theta, dtype=float), np.asarray(times, float))[0]


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




MEAN_SHAPES = ("flat", "linear", "quadratic", "free")


def mean_terms(mu: np.ndarray, s: np.ndarray, pair_n: np.ndarray, times: np.ndarray
               ) -> dict[str, tuple[float, int]]:
    """(Wald statistic, parameters) of each shape of the wave means: flat, linear,
    quadratic (polynomials in time) and free (T parameters, statistic 0).

    The Wald statistic of the contrasts orthogonal to the shape, with the means'
    sampling covariance S_st n_st / (n_s n_t), stands in for the likelihood-ratio
    statistic of the restriction (asymptotically equal; Buse 1982, The American
    Statistician 36, 153-157), so a family's BIC can count its mean structure.
    """
    t = len(times)
    u = time_basis(times) if t > 1 else np.zeros(1)
    n_diag = np.diag(pair_n)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = s * pair_n / np.outer(n_diag, n_diag)
    out = {"free": (0.0, t)}
    for shape, k in (("flat", 1), ("linear", 2), ("quadratic", 3)):
        if k >= t:
            out[shape] = (0.0, t)
            continue
        q, _ = np.linalg.qr(np.vander(u, t, increasing=True))
        c = q[:, k:].T
        est = c @ mu
        try:
            wald = float(est @ np.linalg.solve(c @ v @ c.T, est))
        except np.linalg.LinAlgError:
            wald = np.inf
        out[shape] = (wald if np.isfinite(wald) else np.inf, k)
    return out
