"""Missingness: maximum-likelihood moments under MAR, Little's MCAR test, response
patterns, pairwise coverage and declared missing codes.

Everything here is a function of the per-pattern summary ``PatternMoments`` (and, for
codes, of the code counts the reader keeps). Expectation-maximisation iterates on
pattern statistics only: one batch of small-matrix algebra per number of observed
waves, never a pass over units.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, replace

import numpy as np

from paneldiag import distributions as dist
from paneldiag.results import Result, plain
from paneldiag.diagnostics.attrition import coverage_shown, known_patterns
from paneldiag.summaries.patterns import (MISSING_MARK, OBSERVED_MARK, PatternMoments,
                                          display_order, pattern_text)


# --------------------------------------------------------------------------- EM

@dataclass(frozen=True)
class EMResult(Result):
    """ML mean vector and covariance of the waves under MAR (multivariate normal).

    ``means`` (T,) and ``covariance`` (T, T) are NaN for waves never observed.
    ``loglik`` is the observed-data log-likelihood at the estimates; ``n_units`` the
    units with at least one observed wave (units with none carry no information).
    """

    converged: bool
    iterations: int
    means: np.ndarray
    covariance: np.ndarray
    loglik: float
    n_units: int
    method: str = "em"    # or PAIRWISE_FALLBACK: likelihood fits beyond ML_COST_LIMIT


PAIRWISE_FALLBACK = "pairwise_complete"
PAIRWISE_FALLBACK_NOTE = (
    "ML moments under missing at random were not computed: with this many waves and "
    "response patterns each likelihood iteration costs more than the screen's limit "
    "(paneldiag.summaries.patterns.ML_COST_LIMIT); the moments are pairwise-complete, "
    "which assumes missingness completely at random")


def pairwise_fallback(patterns: PatternMoments) -> EMResult:
    """Available-case means and pairwise-complete covariances in place of the ML
    moments, when a likelihood fit over the patterns would cost too much."""
    means, cov = patterns.pairwise_moments()
    return EMResult(converged=True, iterations=0, means=means, covariance=cov,
                    loglik=float("nan"), n_units=int(patterns.n[patterns.observed.any(axis=1)]
                                                     .sum()), method=PAIRWISE_FALLBACK)


@dataclass(frozen=True)
class _Group:
    """Patterns with the same number k of observed waves, in batch form."""

    n: np.ndarray        # (P_k,) units, or weight sums (a pseudo-likelihood)
    obs: np.ndarray      # (P_k, k) observed wave indices (into the used waves)
    mean: np.ndarray     # (P_k, k) pattern means of the observed waves
    m2: np.ndarray       # (P_k, k, k) centred cross-products of the observed waves
    flat: np.ndarray     # (P_k, k, k) flat index s * T + t of each block entry
    mis: np.ndarray      # (P_k, T - k) missing wave indices (into the used waves)
    flat_mo: np.ndarray  # (P_k, T - k, k) flat indices of the missing x observed block
    flat_mm: np.ndarray  # (P_k, T - k, T - k) flat indices of the missing x missing block


def _groups(patterns: PatternMoments, used: np.ndarray) -> list[_Group]:
    observed = patterns.observed[:, used]
    count = observed.sum(axis=1)
    t = int(used.sum())
    waves = np.flatnonzero(used)
    out = []
    for k in range(1, t + 1):  # a loop over numbers of observed waves
        rows = np.flatnonzero((count == k) & (patterns.mass > 0))
        if len(rows) == 0:
            continue
        # stable argsort of "not observed" lists the observed waves first, in order
        both = np.argsort(~observed[rows], axis=1, kind="stable")
        obs, mis = both[:, :k], both[:, k:]
        full = waves[obs]
        mean = np.take_along_axis(patterns.mean[rows], full, axis=1)
        m2 = patterns.m2[rows[:, None, None], full[:, :, None], full[:, None, :]]
        out.append(_Group(patterns.mass[rows], obs, mean, m2, obs[:, :, None] * t + obs[:, None, :],
                          mis, mis[:, :, None] * t + obs[:, None, :],
                          mis[:, :, None] * t + mis[:, None, :]))
    return out


def _scatter(values: np.ndarray, index: np.ndarray, size: int) -> np.ndarray:
    """Sum per-pattern entries into a flat array of ``size`` by their wave indices."""
    return np.bincount(index.ravel(), weights=values.ravel(), minlength=size)


def _block_inverse(sigma: np.ndarray, g: _Group, precision: np.ndarray | None = None,
                   ) -> np.ndarray:
    """Inverse of each pattern's observed block of sigma, (P_k, k, k).

    With ``precision`` (the inverse of sigma) and fewer missing than observed waves,
    it is the Schur complement P_oo - P_om P_mm^-1 P_mo, which needs only the small
    missing-wave blocks solved; otherwise the observed blocks are inverted."""
    k, m = g.obs.shape[1], g.mis.shape[1]
    # blocks gathered by precomputed flat indices: several times faster than indexing
    # with broadcast index arrays, and this runs for every pattern at every iteration
    if precision is None or m >= k:
        return np.linalg.inv(np.take(sigma.ravel(), g.flat))
    flat = precision.ravel()
    p_oo = np.take(flat, g.flat)
    if m == 0:
        return p_oo
    p_mo = np.take(flat, g.flat_mo)
    # the missing blocks are small (m < k) and well conditioned (as sigma is): their
    # inverses, then products, are cheaper than a batched solve with k right-hand sides
    p_om = np.ascontiguousarray(np.swapaxes(p_mo, 1, 2))   # contiguous: a faster product
    return p_oo - p_om @ (np.linalg.inv(np.take(flat, g.flat_mm)) @ p_mo)


def _precision(sigma: np.ndarray) -> np.ndarray | None:
    """The inverse of sigma when sigma is well conditioned (for the Schur complements
    of ``_block_inverse``), else None (the blocks are then inverted one by one)."""
    with np.errstate(all="ignore"):
        if not np.all(np.isfinite(sigma)) or np.linalg.cond(sigma) > 1e8:
            return None
        try:
            return np.linalg.inv(sigma)
        except np.linalg.LinAlgError:
            return None


def _em_step(groups: list[_Group], mu: np.ndarray, sigma: np.ndarray, n_total: float):
    """One EM iteration.

    With Q_p the inverse of the observed block of sigma embedded in T x T (zero
    elsewhere) and d the deviations of the observed waves from mu (zero at missing
    waves), the conditional mean of a unit's waves is mu + sigma Q_p d and the
    conditional covariance is sigma - sigma Q_p sigma. Summed over units:
      sum E[x - mu]              = sigma sum_p Q_p (n_p dbar_p)
      sum E[(x - mu)(x - mu)']   = sigma (sum_p Q_p D_p Q_p - n_p Q_p) sigma + N sigma
    with D_p = W_p + n_p dbar_p dbar_p' the cross-products around mu, so every
    pattern only needs k x k algebra on its observed block.
    """
    t = len(mu)
    first = np.zeros(t)
    second = np.zeros(t * t)
    precision = _precision(sigma)
    for g in groups:
        q = _block_inverse(sigma, g, precision)
        dev = g.mean - mu[g.obs]
        qd = np.einsum("pij,pj->pi", q, dev)
        qwq = q @ g.m2 @ q
        part = qwq + g.n[:, None, None] * (qd[:, :, None] * qd[:, None, :] - q)
        first += _scatter(g.n[:, None] * qd, g.obs, t)
        second += _scatter(part, g.flat, t * t)
    shift = sigma @ first / n_total
    cross = sigma @ second.reshape(t, t) @ sigma / n_total + sigma
    new_sigma = cross - np.outer(shift, shift)
    return mu + shift, 0.5 * (new_sigma + new_sigma.T)


def _observed_loglik(groups: list[_Group], mu: np.ndarray, sigma: np.ndarray) -> float:
    total = 0.0
    for g in groups:
        k = g.obs.shape[1]
        s_oo = sigma[g.obs[:, :, None], g.obs[:, None, :]]
        sign, logdet = np.linalg.slogdet(s_oo)
        if np.any(sign <= 0):
            return -np.inf
        q = np.linalg.inv(s_oo)
        dev = g.mean - mu[g.obs]
        trace = np.einsum("pij,pji->p", q, g.m2)
        quad = np.einsum("pi,pij,pj->p", dev, q, dev)
        total += float(np.sum(-0.5 * (g.n * (k * np.log(2 * np.pi) + logdet)
                                      + trace + g.n * quad)))
    return total


def _start(patterns: PatternMoments, used: np.ndarray):
    """Available-case means and variances, zero covariances."""
    n = patterns.mass[:, None] * patterns.observed
    count = n.sum(axis=0)
    mean = (n * patterns.mean).sum(axis=0) / np.maximum(count, 1)
    diag = np.einsum("ptt->pt", patterns.m2)
    var = (diag + n * (patterns.mean - mean) ** 2 * patterns.observed).sum(axis=0)
    var = var / np.maximum(count, 1)
    var = np.where(var > 0, var, 1.0)
    return mean[used], np.diag(var[used])


_EM_CACHE: dict[tuple, tuple[weakref.ref, EMResult]] = {}


def em_moments(patterns: PatternMoments, max_iter: int = 2000, tol: float = 1e-12,
               start: EMResult | None = None, loglik: bool = True) -> EMResult:
    """ML estimates of the wave means and covariance under missing at random.

    Multivariate normal model for the T waves; every response pattern allowed.
    Each iteration computes, per pattern, the conditional expectation of the missing
    waves given the observed ones (the E-step, on pattern means and centred
    cross-products, so the cost is O(P k^3) per iteration for patterns with k observed
    waves, independent of N), and the new mean and covariance (ML divisor N) from the
    completed sums (the M-step). Patterns with the same number of observed waves are
    handled as one batch of small matrices.
    Iteration stops when no mean or covariance entry changes by more than ``tol``
    relative to the scale of the waves involved. Waves never observed are left out
    (NaN). When the covariance becomes singular (a constant or collinear wave, or
    fewer units than waves) iteration stops with ``converged`` False and the last
    estimates.
    With weights (``patterns.w``) the weight sums stand where the counts did: the
    estimates maximise the weighted log-likelihood (a pseudo-likelihood; Binder 1983,
    International Statistical Review 51, 279-292), and ``n_units`` stays a count.

    Parameters
    ----------
    patterns : PatternMoments
        The per-pattern summary of one measure.
    max_iter : int
        Most iterations before giving up (``converged`` is then False).
    tol : float
        Largest relative change of any parameter counted as converged.
    start : EMResult, optional
        Estimates to start from instead of the available-case moments, e.g. the fit to
        all units when refitting with one replicate group left out (a few iterations
        then suffice). Used only when finite on every wave observed here; the
        estimate converged to is the same optimum, to within ``tol``.
    loglik : bool
        Whether to evaluate the observed-data log-likelihood at the estimates (NaN
        when False; a refit whose only use is its moments can skip it).

    Returns
    -------
    EMResult
        ``converged``, ``iterations``, ``means``, ``covariance``, ``loglik``, ``n_units``.

    References
    ----------
    Dempster, A. P., Laird, N. M. and Rubin, D. B. (1977). Maximum likelihood from
    incomplete data via the EM algorithm. Journal of the Royal Statistical Society B,
    39(1), 1-38.
    Little, R. J. A. and Rubin, D. B. (2002). Statistical Analysis with Missing Data,
    2nd ed., chapter 11 (the multivariate normal with any pattern). Wiley.
    """
    if not patterns.ml_affordable:
        return pairwise_fallback(patterns)
    if start is not None or not loglik:   # a refit: not cached
        return _em(patterns, max_iter, tol, start, loglik)
    # several sections ask for the same estimates: compute them once per summary
    key = (id(patterns), max_iter, tol)
    cached = _EM_CACHE.get(key)
    if cached is not None and cached[0]() is patterns:
        return cached[1]
    result = _em(patterns, max_iter, tol)
    for stale in [k for k, (ref, _) in _EM_CACHE.items() if ref() is None]:
        del _EM_CACHE[stale]
    _EM_CACHE[key] = (weakref.ref(patterns), result)
    return result


def _em(patterns: PatternMoments, max_iter: int, tol: float,
        start: EMResult | None = None, with_loglik: bool = True) -> EMResult:
    t_all = patterns.n_waves
    wave_n = (patterns.mass[:, None] * patterns.observed).sum(axis=0)
    used = wave_n > 0
    means = np.full(t_all, np.nan)
    covariance = np.full((t_all, t_all), np.nan)
    if not used.any():
        return EMResult(False, 0, means, covariance, np.nan, 0)
    groups = _groups(patterns, used)
    mu, sigma = _start(patterns, used)
    if start is not None and start.means.shape == used.shape:
        mu0, sigma0 = start.means[used], start.covariance[np.ix_(used, used)]
        if np.all(np.isfinite(mu0)) and np.all(np.isfinite(sigma0)):
            mu, sigma = mu0.copy(), sigma0.copy()
    n_total = float(sum(g.n.sum() for g in groups))
    mu, sigma, converged, iteration = _squarem(groups, mu, sigma, n_total, max_iter, tol)
    means[used] = mu
    covariance[np.ix_(used, used)] = sigma
    try:
        with np.errstate(all="ignore"):
            loglik = _observed_loglik(groups, mu, sigma) if converged and with_loglik \
                else np.nan
    except np.linalg.LinAlgError:
        loglik = np.nan
    return EMResult(converged, iteration, means, covariance, loglik,
                    _units_seen(patterns, used))


def _em_map(groups, n_total, mu, sigma):
    """One EM step and its outcome: ``ok``, ``failed`` (a singular block or a non-
    finite estimate: the ML estimate is degenerate, keep the previous one) or
    ``degenerate`` (a constant or collinear wave: stop at this estimate)."""
    try:
        with np.errstate(all="ignore"):
            new_mu, new_sigma = _em_step(groups, mu, sigma, n_total)
    except np.linalg.LinAlgError:
        return mu, sigma, "failed"
    if not (np.all(np.isfinite(new_mu)) and np.all(np.isfinite(new_sigma))):
        return mu, sigma, "failed"
    with np.errstate(all="ignore"):
        sd = np.sqrt(np.diag(new_sigma))
        if not np.all(sd > 0) or \
                np.linalg.eigvalsh(new_sigma / np.outer(sd, sd)).min() < 1e-10:
            return new_mu, new_sigma, "degenerate"
    return new_mu, new_sigma, "ok"


def _em_change(mu, sigma, new_mu, new_sigma) -> float:
    """The largest change of a mean or covariance entry relative to the waves' scale."""
    with np.errstate(all="ignore"):
        scale = np.sqrt(np.maximum(np.diag(new_sigma), np.finfo(float).tiny))
        return max(np.max(np.abs(new_mu - mu) / scale),
                   np.max(np.abs(new_sigma - sigma) / np.outer(scale, scale)))


def _squarem(groups, mu, sigma, n_total, max_iter, tol):
    """EM steps accelerated by squared extrapolation (SQUAREM, scheme S3: Varadhan,
    R. and Roland, C. 2008, Simple and globally convergent methods for accelerating
    the convergence of any EM algorithm, Scandinavian Journal of Statistics 35(2),
    335-353). Each cycle makes two EM steps from the current estimate, extrapolates
    along them with the step length -|r|/|v|, and makes one EM step from there. The
    extrapolated estimate is kept when that step succeeds and its change (the residual
    of the EM map) is no larger than the first plain step's; else the two plain steps
    are kept. A residual, not the likelihood, judges it: the log-likelihood over the
    patterns costs as much as an EM step. Converged when one EM step changes no entry by
    more than ``tol`` of the waves' scale, the rule of plain EM; with much missing
    information plain EM needs hundreds of steps, this a few dozen.
    Returns (mu, sigma, converged, EM steps made)."""
    steps = 0

    def advance(mu0, sigma0):
        nonlocal steps
        steps += 1
        new_mu, new_sigma, outcome = _em_map(groups, n_total, mu0, sigma0)
        change = _em_change(mu0, sigma0, new_mu, new_sigma) if outcome == "ok" else np.inf
        return new_mu, new_sigma, outcome, change

    while steps < max_iter:
        mu1, sigma1, outcome, change1 = advance(mu, sigma)
        if outcome != "ok" or change1 <= tol:
            return (mu1, sigma1, outcome == "ok", steps)
        mu2, sigma2, outcome, change2 = advance(mu1, sigma1)
        if outcome != "ok" or change2 <= tol or steps >= max_iter:
            return (mu2, sigma2, outcome == "ok" and change2 <= tol, steps)
        # the first step r and the change between the steps v, each of mu and sigma;
        # their lengths in the waves' scale set the step length
        r_mu, r_sigma = mu1 - mu, sigma1 - sigma
        v_mu, v_sigma = mu2 - 2 * mu1 + mu, sigma2 - 2 * sigma1 + sigma
        scale = np.sqrt(np.diag(sigma))
        r = np.concatenate([r_mu / scale, (r_sigma / np.outer(scale, scale)).ravel()])
        v = np.concatenate([v_mu / scale, (v_sigma / np.outer(scale, scale)).ravel()])
        alpha = -np.sqrt(r @ r / (v @ v)) if v @ v > 0 else -1.0
        if not alpha < -1.0:   # no longer than the plain steps: keep them
            mu, sigma = mu2, sigma2
            continue
        mu_x = mu - 2 * alpha * r_mu + alpha ** 2 * v_mu
        sigma_x = sigma - 2 * alpha * r_sigma + alpha ** 2 * v_sigma
        mu3, sigma3, outcome, change3 = advance(mu_x, 0.5 * (sigma_x + sigma_x.T))
        if outcome == "ok" and change3 <= change1:
            if change3 <= tol:
                return (mu3, sigma3, True, steps)
            mu, sigma = mu3, sigma3
        else:
            mu, sigma = mu2, sigma2   # the extrapolation went astray
    return (mu, sigma, False, steps)


def _units_seen(patterns: PatternMoments, used: np.ndarray) -> int:
    """Units (a count, never a weight sum) observed at one of the ``used`` waves."""
    return int(patterns.n[patterns.observed[:, used].any(axis=1)
                          & (patterns.mass > 0)].sum())


# ------------------------------------------------------------------ Little's test

@dataclass(frozen=True)
class LittleMCAR(Result):
    """Little's chi-square statistic for missing completely at random."""

    statistic: float
    df: int
    pvalue: float
    n_patterns: int


def little_mcar_test(patterns: PatternMoments, em: EMResult | None = None) -> LittleMCAR:
    """Little's test that the waves are missing completely at random (MCAR).

    d^2 = sum_j n_j (ybar_j - mu_j)' Sigma_j^-1 (ybar_j - mu_j) over response
    patterns j with at least one observed wave, where ybar_j is the mean of the
    observed waves of pattern j and mu_j, Sigma_j are the matching parts of the ML
    estimates under MAR (``em_moments``). Under MCAR d^2 is asymptotically
    chi-square with sum_j k_j - T degrees of freedom (k_j observed waves of pattern j,
    T waves observed at all).

    References
    ----------
    Little, R. J. A. (1988). A test of missing completely at random for multivariate
    data with missing values. Journal of the American Statistical Association,
    83(404), 1198-1202.
    """
    em = em if em is not None else em_moments(patterns)
    if em.method != "em":   # the test needs the ML estimates
        return LittleMCAR(np.nan, 0, np.nan, patterns.n_patterns)
    wave_n = (patterns.mass[:, None] * patterns.observed).sum(axis=0)
    used = wave_n > 0
    groups = _groups(patterns, used)
    n_patterns = sum(len(g.n) for g in groups)
    df = int(sum(len(g.n) * g.obs.shape[1] for g in groups) - used.sum())
    if (df <= 0 or not em.converged
            or not np.all(np.isfinite(em.covariance[np.ix_(used, used)]))):
        return LittleMCAR(np.nan, max(df, 0), np.nan, n_patterns)
    mu = em.means[used]
    sigma = em.covariance[np.ix_(used, used)]
    d2 = 0.0
    try:
        for g in groups:
            s_oo = sigma[g.obs[:, :, None], g.obs[:, None, :]]
            dev = g.mean - mu[g.obs]
            sol = np.linalg.solve(s_oo, dev[:, :, None])[:, :, 0]
            d2 += float(np.sum(g.n * np.einsum("pk,pk->p", dev, sol)))
    except np.linalg.LinAlgError:
        return LittleMCAR(np.nan, df, np.nan, n_patterns)
    return LittleMCAR(d2, df, float(dist.chi2_sf(d2, df)), n_patterns)


# ------------------------------------------------------------- response patterns

@dataclass(frozen=True)
class PatternRow(Result):
    pattern: str
    n: int
    share: float
    n_observed_waves: int


@dataclass(frozen=True)
class ResponsePatterns(Result):
    """The most frequent response patterns and a pooled remainder.

    ``rows``: at most ``top`` patterns, each with at least ``min_cell`` units, most
    frequent first (ties by pattern text). ``remainder``: every other pattern
    pooled; its unit count is 0 or at least ``min_cell`` (the smallest listed
    patterns are moved into it when needed), so nothing can be recovered by
    subtraction from the total. ``n_small_patterns`` patterns had fewer than
    ``min_cell`` units each; their units together (``n_small_units``) are shown only
    when that total is itself at least ``min_cell``.
    """

    legend: str
    n_patterns: int
    n_units: int
    rows: tuple[PatternRow, ...]
    remainder_patterns: int
    remainder_units: int
    remainder_share: float
    n_small_patterns: int
    n_small_units: int | None

    def to_dict(self) -> dict:
        return {"legend": self.legend, "n_patterns": self.n_patterns, "n_units": self.n_units,
                "rows": [r.to_dict() for r in self.rows],
                "remainder": {"n_patterns": self.remainder_patterns,
                              "n_units": self.remainder_units,
                              "share": plain(self.remainder_share),
                              "n_small_patterns": self.n_small_patterns,
                              "n_small_units": self.n_small_units}}


def response_patterns(patterns: PatternMoments, min_cell: int = 5, top: int = 10,
                      ) -> ResponsePatterns:
    """Distinct observed/missing patterns of the waves with their unit counts.

    A pattern among the ``top`` most frequent is listed unless ``known_patterns``
    withholds it: no count of 1 to ``min_cell`` - 1 units can then be recovered by
    subtracting listed patterns from any total the report shows (all units, a wave's
    respondents, a coverage cell, a unit type).

    The display (one character per wave) and the pooling rules are paneldiag's own.

    References
    ----------
    Little, R. J. A. and Rubin, D. B. (2002). Statistical Analysis with Missing Data,
    2nd ed., sec. 1.3 (missing-data patterns). Wiley.
    """
    total = float(patterns.n.sum())
    mass = patterns.mass[order := display_order(patterns)]   # shares: weighted
    text = pattern_text(patterns.observed)
    counts = patterns.n[order]
    big = counts >= min_cell
    known = known_patterns(patterns, min_cell, top)[order]
    listed = [i for i in np.flatnonzero(big)[:top] if known[i]]
    small = counts[~big].sum()
    remainder = total - counts[listed].sum()
    rows = tuple(PatternRow(text[order[i]], int(counts[i]), float(mass[i] / mass.sum()),
                            int(patterns.observed[order[i]].sum())) for i in listed)
    return ResponsePatterns(
        legend=f"one character per wave: '{OBSERVED_MARK}' observed, '{MISSING_MARK}' missing",
        n_patterns=int(patterns.n_patterns), n_units=int(total), rows=rows,
        remainder_patterns=int(patterns.n_patterns - len(rows)),
        remainder_units=int(remainder),
        remainder_share=(mass.sum() - mass[listed].sum()) / mass.sum() if total else np.nan,
        n_small_patterns=int((~big).sum()),
        n_small_units=int(small) if small >= min_cell else None)


# ------------------------------------------------------------------- coverage

@dataclass(frozen=True)
class Coverage(Result):
    """Units observed at both waves s and t (``n``) and their share of all units;
    cells below ``min_cell`` are null. The diagonal is the response at each wave."""

    waves: tuple[str, ...]
    n: np.ndarray
    share: np.ndarray
    lowest_pair: tuple[str, str] | None
    lowest_share: float | None

    def to_dict(self) -> dict:
        return {"waves": list(self.waves), "n": _int_matrix(self.n),
                "share": plain(self.share),
                "lowest": None if self.lowest_pair is None else
                {"waves": list(self.lowest_pair), "share": plain(self.lowest_share)}}


def _int_matrix(a):
    return [[None if not np.isfinite(v) else int(v) for v in row] for row in a]


def coverage(patterns: PatternMoments, wave_labels, min_cell: int = 5) -> Coverage:
    """Pairwise coverage: the share of units observed at both waves of each pair,
    the quantity behind pairwise-available estimates. Cells below ``min_cell``
    are null, and so is a cell whose difference from either wave's own count (the
    units seen at one wave of the pair but not the other) would be a count of 1 to
    ``min_cell`` - 1, since the diagonal is shown.

    References
    ----------
    Enders, C. K. (2010). Applied Missing Data Analysis, ch. 1 (covariance coverage).
    Guilford Press. (Chapter from memory.)
    """
    obs = patterns.observed.astype(float)
    both = (obs * patterns.n[:, None]).T @ obs
    total = patterns.n.sum()
    show = coverage_shown(both, min_cell)
    n = np.where(show, both, np.nan)
    weighted = (obs * patterns.mass[:, None]).T @ obs    # shares: weighted
    share = np.where(show, weighted / patterns.mass.sum() if total else np.nan, np.nan)
    labels = tuple(str(w) for w in wave_labels)
    off = np.where(~np.eye(len(labels), dtype=bool) & show, share, np.inf)
    if np.isfinite(off).any():
        i, j = np.unravel_index(np.argmin(off), off.shape)
        return Coverage(labels, n, share, (labels[i], labels[j]), float(off[i, j]))
    return Coverage(labels, n, share, None, None)


# ------------------------------------------------------------ declared codes

@dataclass(frozen=True)
class CodeRow(Result):
    code: str
    label: str | None
    counts: tuple[int | None, ...]   # per wave; None where below min_cell


@dataclass(frozen=True)
class DeclaredCodes(Result):
    waves: tuple[str, ...]
    rows: tuple[CodeRow, ...]

    def to_dict(self) -> dict:
        return {"waves": list(self.waves), "rows": [r.to_dict() for r in self.rows]}


def declared_codes(codes: dict, labels: dict, wave_labels, min_cell: int = 5,
                   ) -> DeclaredCodes:
    """Counts of each declared missing code (refusal, don't know, ...) per wave, with
    the file's value label where it declares one. Counts below ``min_cell`` are null;
    no totals are given, so none can be recovered by subtraction.

    References
    ----------
    de Leeuw, E. D., Hox, J. J. and Huisman, M. (2003). Prevention and treatment of
    item nonresponse. Journal of Official Statistics, 19(2), 153-176.
    """
    rows = tuple(CodeRow(str(code), labels.get(code),
                         tuple(int(c) if c >= min_cell else None for c in np.asarray(counts)))
                 for code, counts in codes.items())
    return DeclaredCodes(tuple(str(w) for w in wave_labels), rows)


# -------------------------------------------------------------------- section

@dataclass(frozen=True)
class Missingness(Result):
    patterns: ResponsePatterns
    coverage: Coverage
    em: EMResult
    little_mcar: LittleMCAR
    codes: DeclaredCodes

    def to_dict(self) -> dict:
        em = self.em.to_dict()
        em["waves"] = list(self.coverage.waves)
        return {"patterns": self.patterns.to_dict(), "coverage": self.coverage.to_dict(),
                "em": em, "little_mcar": self.little_mcar.to_dict(),
                "codes": self.codes.to_dict()}


def missingness_section(ctx) -> Missingness:
    """The ``missingness`` block of the report for one measure."""
    patterns = ctx.summaries.get(PatternMoments) or PatternMoments.empty(
        ctx.panel.n_waves, ctx.options.n_replicates)
    labels = ctx.panel.wave_labels
    m = ctx.options.min_cell
    em = em_moments(patterns)
    # disclosure control: the units with an observed value, against the panel's count,
    # give the units never observed (as the pattern table withholds a small pattern)
    never_observed = ctx.panel.n_units - em.n_units
    shown_em = em if em.n_units >= m and not 0 < never_observed < m \
        else replace(em, n_units=None)
    codes = declared_codes(ctx.panel.codes.get(ctx.measure, {}),
                           ctx.panel.code_labels.get(ctx.measure, {}), labels, m)
    return Missingness(response_patterns(patterns, m), coverage(patterns, labels, m), shown_em,
                       little_mcar_test(patterns, em), codes)
