"""The parts a family's covariance structure is built from.

A structure is a sum of parts: Sigma(theta) = sum over parts of the part's share. Each
part owns its parameters (names, bounds, start values) and its share's derivatives, so
a new specification is a new combination of parts, never a new branch in the fit.

    error           diag(e): one variance for all waves, one per wave, or one per wave
                    with the first two and the last two tied (the quasi-simplex's
                    identification constraint, Joreskog 1970)
    trait           a 11'
    carry-over      b K(rho), K_st = rho ** |t_s - t_t| (stationary, per unit of time), or
                    the quasi-simplex A D A': eta_1 = z_1, eta_t = beta_t eta_(t-1) + z_t
                    with wave-specific coefficients beta_t and innovation variances
                    (D = diag(var z)), A = (I - B)^-1 (Joreskog 1970)
    growth          L Psi L': random intercept and slope (and curvature), loadings fixed
                    on a basis (the wave times scaled to 0..1) or free apart from the
                    first (0) and the last (1) (the latent basis of Meredith and Tisak 1990)

References
----------
Joreskog, K. G. (1970). Estimation and testing of simplex models. British Journal of
Mathematical and Statistical Psychology, 23, 121-145.
Kenny, D. A. and Zautra, A. (1995). The trait-state-error model for multiwave data.
Journal of Consulting and Clinical Psychology, 63(1), 52-59.
Meredith, W. and Tisak, J. (1990). Latent curve analysis. Psychometrika, 55, 107-122.
Wiley, D. E. and Wiley, J. A. (1970). The estimation of measurement error in panel data.
American Sociological Review, 35, 112-117.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Scale:
    """Summary figures of a covariance matrix that set start values and bounds."""

    var: np.ndarray     # the wave variances
    level: float        # the mean covariance between waves (at least 5% of the variance)

    @classmethod
    def of(cls, s: np.ndarray) -> "Scale":
        t = s.shape[0]
        var = np.diag(s).copy()
        off = s[~np.eye(t, dtype=bool)]
        level = max(float(np.mean(off)) if off.size else 0.0, 0.05 * float(np.mean(var)))
        return cls(var, level)

    @property
    def mean_var(self) -> float:
        return float(np.mean(self.var))


class Part(ABC):
    """One additive share of Sigma; each kind of part sets ``key`` and says its own
    parameters, bounds, start values and share."""

    key = "part"
    # whether the part has a parameter per wave (their number grows with the waves)
    per_wave = False

    @abstractmethod
    def names(self, t: int) -> list[str]:
        """The names of the part's parameters at ``t`` waves."""

    @abstractmethod
    def bounds(self, scale: Scale) -> list[tuple]:
        """(lower, upper) of each parameter, None where open."""

    @abstractmethod
    def starts(self, scale: Scale) -> list[list[float]]:
        """One or more start vectors (the fit tries every combination over parts)."""

    @abstractmethod
    def share(self, theta: np.ndarray, times: np.ndarray):
        """(this part's T x T share of Sigma, list of its derivatives by parameter)."""

    def canonical(self, theta: np.ndarray) -> np.ndarray:
        """The one of the parameter vectors giving the same share that is reported."""
        return theta

    def in_measure_unit(self, scale) -> np.ndarray:
        """Which parameters are in the measure's unit (or its square), not unit-free: by
        default those open above (variances); those bounded on both sides are
        coefficients and loadings."""
        return np.array([hi is None for _, hi in self.bounds(scale)], dtype=bool)

    def regular_point(self, theta: np.ndarray, sizes: np.ndarray) -> np.ndarray:
        """A point next to ``theta`` (within 1e-3 of the parameters' ``sizes``) at which
        the map from the parameters to the share has full rank; ``theta`` itself for
        parts whose map has full rank everywhere."""
        return theta

    def regular_jacobian(self, theta: np.ndarray) -> np.ndarray:
        """d phi / d theta, where phi are parameters in which the share is linear or
        well conditioned (the delta method is taken in them): the identity for parts
        whose own parameters are such."""
        return np.eye(len(theta))


@dataclass(frozen=True)
class Error(Part):
    """Error variances: ``kind`` 'equal' (one), 'wave' (one per wave) or 'tied_ends'
    (one per wave, the first two waves sharing one and the last two another)."""

    kind: str = "equal"
    key = "error"

    @property
    def per_wave(self) -> bool:
        return self.kind != "equal"

    def groups(self, t: int) -> np.ndarray:
        if self.kind == "equal":
            return np.zeros(t, dtype=int)
        if self.kind == "wave" or t < 4:
            return np.arange(t)
        inner = np.arange(t)
        inner[0] = 1
        inner[-1] = t - 2
        return inner - 1

    def names(self, t):
        g = self.groups(t)
        if self.kind == "equal":
            return ["error_var"]
        return [f"error_var_{'+'.join(str(w + 1) for w in np.flatnonzero(g == k))}"
                for k in range(g.max() + 1)]

    def bounds(self, scale):
        floor = 1e-6 * scale.mean_var
        return [(floor, None)] * len(self.names(len(scale.var)))

    def starts(self, scale):
        g = self.groups(len(scale.var))
        per = np.array([scale.var[g == k].mean() for k in range(g.max() + 1)])
        return [list(0.5 * per)]

    def share(self, theta, times):
        t = len(times)
        g = self.groups(t)
        grads = np.zeros((len(theta), t, t))
        grads[g, np.arange(t), np.arange(t)] = 1.0
        return np.diag(np.asarray(theta, dtype=float)[g]), list(grads)

    def variances(self, theta, t: int) -> np.ndarray:
        """The error variance of each wave."""
        return np.asarray(theta, dtype=float)[self.groups(t)]


@dataclass(frozen=True)
class Trait(Part):
    """A stable unit effect: a 11'."""

    key = "trait"

    def names(self, t):
        return ["trait_var"]

    def bounds(self, scale):
        return [(0.0, None)]

    def starts(self, scale):
        return [[0.5 * scale.level]]

    def share(self, theta, times):
        ones = np.ones((len(times), len(times)))
        return theta[0] * ones, [ones]


@dataclass(frozen=True)
class Carry(Part):
    """Stationary carry-over per unit of time: b rho ** |t_s - t_t|."""

    key = "carry"

    def names(self, t):
        return ["carry_var", "rho"]

    def bounds(self, scale):
        return [(0.0, None), (0.0, 0.995)]

    def starts(self, scale):
        return [[0.3 * scale.mean_var, 0.3], [0.3 * scale.mean_var, 0.85]]

    def regular_point(self, theta, sizes) -> np.ndarray:
        # with no carried-over variance rho is not identified (a fit reports it as 0,
        # Structure.canonical): the delta method of b's share is taken at a moderate
        # carry-over, rho 0.5, where b is not confounded with the error variance
        b, rho = theta
        return np.array([b, 0.5 if b == 0.0 else rho], dtype=float)

    def share(self, theta, times):
        b, rho = theta
        gap = np.abs(times[:, None] - times[None, :])
        kernel = rho ** gap
        with np.errstate(divide="ignore", invalid="ignore"):
            dk = np.where(gap > 0, gap * rho ** (gap - 1), 0.0)
        return b * kernel, [kernel, b * dk]


@dataclass(frozen=True)
class QuasiSimplex(Part):
    """Carry-over with wave-specific coefficients and innovation variances (the
    quasi-simplex of Joreskog 1970): the true-score variances may change over waves."""

    key = "carry"
    per_wave = True

    def names(self, t):
        return (["start_var"] + [f"innovation_var_{w + 1}" for w in range(1, t)]
                + [f"coefficient_{w + 1}" for w in range(1, t)])

    def bounds(self, scale):
        t = len(scale.var)
        return [(0.0, None)] * t + [(-5.0, 5.0)] * (t - 1)

    def starts(self, scale):
        out = []
        for beta in (0.85, 0.4, 0.1):
            true_var = 0.5 * scale.var
            innov = [true_var[0]]
            for w in range(1, len(true_var)):
                innov.append(max(true_var[w] - beta ** 2 * true_var[w - 1],
                                 0.05 * scale.mean_var))
            out.append(innov + [beta] * (len(true_var) - 1))
        return out

    @staticmethod
    def _paths(beta: np.ndarray) -> np.ndarray:
        """A = (I - B)^-1: A[t, s] = beta_(s+1) ... beta_t for t >= s."""
        t = len(beta) + 1
        a = np.eye(t)
        for w in range(1, t):  # a loop over waves
            a[w, :w] = beta[w - 1] * a[w - 1, :w]
        return a

    def share(self, theta, times):
        t = len(times)
        d = np.asarray(theta[:t], dtype=float)
        beta = np.asarray(theta[t:], dtype=float)
        a = self._paths(beta)
        phi = (a * d) @ a.T      # A D A'; its row w-1 is A[w-1] D A'
        by_var = a.T[:, :, None] * a.T[:, None, :]                 # A[:, s] A[:, s]'
        m = a.T[1:, :, None] * phi[:-1, None, :]                    # A[:, w] (A D A')[w-1]
        return phi, list(by_var) + list(m + np.swapaxes(m, 1, 2))

    def true_variances(self, theta, t: int) -> np.ndarray:
        d = np.asarray(theta[:t], dtype=float)
        a = self._paths(np.asarray(theta[t:], dtype=float))
        return np.einsum("ts,s,ts->t", a, d, a)


@dataclass(frozen=True)
class Growth(Part):
    """Random intercept and slope (``order`` 1) or intercept, slope and curvature
    (``order`` 2), loadings on ``basis`` (T values from 0 to 1); with ``free_loadings``
    the slope loadings between the first (0) and the last wave (1) are estimated.

    The factors' covariance is Psi = C C' with C lower triangular (the Cholesky
    parameterisation of random-effect covariances; Lindstrom and Bates 1988, JASA 83,
    1014-1022), so Psi is never indefinite: a zero slope variance forces a zero
    covariance with the intercept, and growth cannot be mimicked by a covariance
    without a variance. The diagonal is searched without a sign (a column of C and its
    negative give the same Psi): a bound at zero there would be a wall at which the
    search stops short of the optimum, one side of a fold of the parameter space; the
    fit is reported with a non-negative diagonal."""

    basis: tuple = ()
    order: int = 1
    free_loadings: bool = False
    basis_name: str = "time"     # what the basis is: 'time' or 'mean' (the mean's shape)
    key = "growth"

    @property
    def per_wave(self) -> bool:
        return self.free_loadings

    FACTORS = ("intercept", "slope", "curvature")

    def _cov_names(self) -> list[tuple[int, int]]:
        q = self.order + 1
        return [(i, j) for i in range(q) for j in range(i + 1)]

    def names(self, t):
        out = [f"{self.FACTORS[i]}_factor" if i == j
               else f"{self.FACTORS[i]}_on_{self.FACTORS[j]}_factor"
               for i, j in self._cov_names()]
        if self.free_loadings:
            out += [f"loading_{w + 1}" for w in range(1, t - 1)]
        return out

    def bounds(self, scale):
        # no sign, but a box: an entry of C a thousand times the largest wave SD gives a
        # factor variance a million times any wave's, which no panel's waves can hold;
        # without it a search on a small, ill-conditioned panel can run off to where
        # Sigma's rounding makes up a likelihood above the saturated one
        top = float(np.sqrt(np.max(scale.var))) if np.all(np.isfinite(scale.var)) else 0.0
        box = (-1e3 * top, 1e3 * top) if top > 0 else (None, None)
        out = [box] * len(self._cov_names())
        if self.free_loadings:
            out += [(-5.0, 5.0)] * (len(scale.var) - 2)
        return out

    def starts(self, scale):
        start = []
        for i, j in self._cov_names():
            start.append(np.sqrt(0.5 * scale.level) if i == j == 0 else
                         np.sqrt(0.1 * scale.mean_var) if i == j else 0.0)
        if self.free_loadings:
            start += list(np.asarray(self.basis, float)[1:-1])
        return [start]

    def in_measure_unit(self, scale) -> np.ndarray:
        # the factor entries are in the measure's unit though boxed; loadings have none
        n_cov = len(self._cov_names())
        return np.arange(len(self.bounds(scale))) < n_cov

    def loadings(self, theta, t: int) -> np.ndarray:
        lam = np.asarray(self.basis, dtype=float).copy()
        if self.free_loadings:
            lam[1:-1] = theta[len(self._cov_names()):]
        columns = [np.ones(t), lam] + ([lam ** 2] if self.order == 2 else [])
        return np.column_stack(columns)

    def factor(self, theta) -> np.ndarray:
        q = self.order + 1
        c = np.zeros((q, q))
        for k, (i, j) in enumerate(self._cov_names()):
            c[i, j] = theta[k]
        return c

    def canonical(self, theta) -> np.ndarray:
        c = self.factor(theta)
        c = c * np.where(np.diag(c) < 0, -1.0, 1.0)    # each column's sign
        out = np.array(theta, dtype=float)
        out[:len(self._cov_names())] = [c[i, j] for i, j in self._cov_names()]
        return out

    def regular_point(self, theta, sizes) -> np.ndarray:
        # where a diagonal entry of C is 0, Psi = C C' is singular and its derivatives
        # by that column vanish; 1e-3 of the entry's size away they do not, and the
        # delta method there is that of Psi itself (the chain rule through C cancels)
        out = np.array(theta, dtype=float)
        for k, (i, j) in enumerate(self._cov_names()):
            if i == j and np.isfinite(sizes[k]) and sizes[k] > 0:
                out[k] = max(abs(out[k]), 1e-3 * sizes[k])
        return out

    def regular_jacobian(self, theta) -> np.ndarray:
        # phi: the entries of Psi = C C' (lower triangle), in which Sigma is linear, so
        # their information stays well conditioned where C is nearly singular; through C
        # it has a condition number of about 1 / c_ii^4 there, and the delta method's
        # cancellations are lost to rounding
        c = self.factor(theta)
        pairs = self._cov_names()
        jac = np.eye(len(theta))
        for r, (a, b) in enumerate(pairs):
            for k, (i, j) in enumerate(pairs):
                jac[r, k] = (a == i) * c[b, j] + (b == i) * c[a, j]
        return jac

    def psi(self, theta) -> np.ndarray:
        c = self.factor(theta)
        return c @ c.T

    def share(self, theta, times):
        t = len(times)
        lam = self.loadings(theta, t)
        c = self.factor(theta)
        psi = c @ c.T
        grads = []
        for i, j in self._cov_names():
            # dPsi/dc_ij = e_i (C e_j)' + (C e_j) e_i', so dSigma = a b' + b a'
            a, b = lam[:, i], lam @ c[:, j]
            d = np.outer(a, b)
            grads.append(d + d.T)
        if self.free_loadings:
            w = lam @ psi[:, 1]
            for s in range(1, t - 1):
                m = np.zeros((t, t))
                m[s, :] = w
                grads.append(m + m.T)
        return lam @ psi @ lam.T, grads
