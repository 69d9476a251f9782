"""Measurement reliability: quasi-simplex estimates from three waves, and internal
consistency of a scale's items at each wave.

For every triplet of waves s < t < u the quasi-simplex (a first-order autoregression
of true scores, each observed with independent error) identifies the reliability and
the stabilities from the three covariances alone. Heise's version works from the
correlations and assumes one reliability for all waves; Wiley and Wiley's works
from the covariances and assumes one error variance for all waves, so reliabilities
may differ by wave. Each triplet's values are computed exactly as the formulas give
them: a value above 1 or below 0 is kept and marked with the reason, never clipped.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, replace
from itertools import combinations

import numpy as np
from scipy import optimize

from paneldiag import distributions as dist
from paneldiag.ahead import share
from paneldiag.results import Result
from paneldiag.summaries.jackknife import jackknife_ci_bounded, jackknife_se

BASIS_PAIRWISE = "pairwise_complete"
BASIS_EM = "em_missing_at_random"


# ----------------------------------------------------------------------------- formulas

MAX_WAVES_ALL_TRIPLETS = 12   # 220 triplets: above it only a selection is listed


def triplets(n_waves: int) -> np.ndarray:
    """All (s, t, u) with s < t < u, as an (m, 3) integer array in lexicographic order."""
    return np.array(list(combinations(range(n_waves), 3)), dtype=np.int64).reshape(-1, 3)


def listed_triplets(n_waves: int) -> np.ndarray:
    """The triplets listed one by one: all of them up to ``MAX_WAVES_ALL_TRIPLETS`` waves,
    else the adjacent ones (s, s+1, s+2) and the evenly spaced ones from the first wave
    (0, d, 2d): O(T) rows where all would be O(T^3)."""
    if n_waves <= MAX_WAVES_ALL_TRIPLETS:
        return triplets(n_waves)
    adjacent = [(s, s + 1, s + 2) for s in range(n_waves - 2)]
    spread = [(0, d, 2 * d) for d in range(2, (n_waves - 1) // 2 + 1)]
    return np.array(sorted(adjacent + spread), dtype=np.int64)


def triplet_table(corr: np.ndarray, cov: np.ndarray, wave_labels: tuple[str, ...]) -> dict:
    """Every triplet's Heise and Wiley-Wiley values as columns (lists), for a table of
    its own file: O(T^3) rows, so only on request. No standard errors (the listed
    triplets of the report carry them)."""
    trip = triplets(len(wave_labels))
    h, w = heise_values(corr, trip), wiley_wiley_values(cov, trip)
    labels = np.asarray(wave_labels, dtype=object)
    out = {"wave_first": labels[trip[:, 0]], "wave_middle": labels[trip[:, 1]],
           "wave_last": labels[trip[:, 2]], "heise_reliability": h["reliability"],
           "heise_stability_first": h["stability_first"],
           "heise_stability_second": h["stability_second"],
           "heise_impossible": heise_impossible(h),
           "wiley_error_variance": w["error_variance"]}
    for k, name in enumerate(("first", "middle", "last")):
        out[f"wiley_reliability_{name}"] = w["reliability"][:, k]
    return {key: list(value) for key, value in out.items()}


def heise_impossible(v: dict) -> np.ndarray:
    """Per triplet: a defined Heise value outside its range (the vectorised test of
    ``_heise_problems``)."""
    finite = np.isfinite(v["r_st"]) & np.isfinite(v["r_tu"]) & np.isfinite(v["r_su"])
    with np.errstate(invalid="ignore"):
        bad = (v["r_su"] <= 0) | (v["reliability"] > 1) | (v["reliability"] < 0) | \
            (v["stability_first"] > 1) | (v["stability_second"] > 1) | \
            (v["stability_outer"] > 1)
    return finite & bad


def heise_values(corr: np.ndarray, trip: np.ndarray) -> dict[str, np.ndarray]:
    """Heise (1969) reliability and stabilities for each triplet, from correlations.

    reliability = r_st r_tu / r_su; stability s->t = r_su / r_tu; t->u = r_su / r_st;
    s->u = r_su^2 / (r_st r_tu).
    """
    s, t, u = trip.T
    r_st, r_tu, r_su = corr[s, t], corr[t, u], corr[s, u]
    with np.errstate(invalid="ignore", divide="ignore"):
        return {"reliability": r_st * r_tu / r_su,
                "stability_first": r_su / r_tu,
                "stability_second": r_su / r_st,
                "stability_outer": r_su ** 2 / (r_st * r_tu),
                "r_st": r_st, "r_tu": r_tu, "r_su": r_su}


def wiley_wiley_values(cov: np.ndarray, trip: np.ndarray) -> dict[str, np.ndarray]:
    """Wiley and Wiley (1970) estimates with one error variance for the three waves.

    true variance at t: V_t = c_st c_tu / c_su; error variance theta = c_tt - V_t;
    V_s = c_ss - theta, V_u = c_uu - theta; reliability of wave w: V_w / c_ww;
    stabilities (true-score correlations) c_st / sqrt(V_s V_t), c_tu / sqrt(V_t V_u).
    """
    s, t, u = trip.T
    c_st, c_tu, c_su = cov[s, t], cov[t, u], cov[s, u]
    c_ss, c_tt, c_uu = cov[s, s], cov[t, t], cov[u, u]
    with np.errstate(invalid="ignore", divide="ignore"):
        v_t = c_st * c_tu / c_su
        theta = c_tt - v_t
        v_s, v_u = c_ss - theta, c_uu - theta
        return {"error_variance": theta,
                "true_variance": np.stack([v_s, v_t, v_u], axis=1),
                "reliability": np.stack([v_s / c_ss, v_t / c_tt, v_u / c_uu], axis=1),
                "stability_first": c_st / np.sqrt(v_s * v_t),
                "stability_second": c_tu / np.sqrt(v_t * v_u)}


def _heise_problems(v: dict, i: int) -> list[str]:
    r_st, r_tu, r_su = v["r_st"][i], v["r_tu"][i], v["r_su"][i]
    if not np.all(np.isfinite([r_st, r_tu, r_su])):
        return ["undefined: a correlation of the triplet cannot be computed"]
    if r_su <= 0:
        return ["outside the model: the outer waves do not correlate positively (r_su <= 0), "
                "which the quasi-simplex cannot produce"]
    out = []
    rel = v["reliability"][i]
    if rel > 1:
        out.append("reliability above 1: r_st * r_tu exceeds r_su, the outer waves correlate "
                   "more weakly than a quasi-simplex allows")
    if rel < 0:
        out.append("reliability negative: an adjacent correlation is negative")
    for key, text in (("stability_first", "first stability above 1: r_su exceeds r_tu"),
                      ("stability_second", "second stability above 1: r_su exceeds r_st"),
                      ("stability_outer", "outer stability above 1: r_su^2 exceeds r_st * r_tu")):
        if v[key][i] > 1:
            out.append(text)
    return out


def _wiley_problems(v: dict, i: int) -> list[str]:
    if not np.all(np.isfinite(v["true_variance"][i])):
        return ["undefined: a covariance of the triplet is missing or the outer covariance is 0"]
    out = []
    if v["error_variance"][i] < 0:
        out.append("error variance negative: the middle wave's true variance c_st*c_tu/c_su "
                   "exceeds its observed variance")
    for name, value in zip(("first", "middle", "last"), v["true_variance"][i]):
        if value < 0:
            out.append(f"true variance of the {name} wave negative: the common error "
                       "variance exceeds that wave's observed variance")
    if np.any(v["reliability"][i] > 1):
        out.append("a reliability above 1 (follows from a negative error variance)")
    for key, text in (("stability_first", "first stability"),
                      ("stability_second", "second stability")):
        value = v[key][i]
        if np.isfinite(value) and abs(value) > 1:
            out.append(f"{text} beyond +-1: the true-score covariance exceeds what the "
                       "true variances allow")
    return out


# ----------------------------------------------------------------------------- results

@dataclass(frozen=True)
class HeiseRow(Result):
    waves: tuple[str, str, str]
    reliability: float
    reliability_se: float
    stability_first: float
    stability_second: float
    stability_outer: float
    impossible: bool
    problems: tuple[str, ...]


@dataclass(frozen=True)
class WileyWileyRow(Result):
    waves: tuple[str, str, str]
    error_variance: float
    error_variance_se: float
    true_variance: tuple[float, float, float]
    reliability: tuple[float, float, float]
    reliability_se: tuple[float, float, float]
    stability_first: float
    stability_second: float
    impossible: bool
    problems: tuple[str, ...]


@dataclass(frozen=True)
class ReliabilitySummary(Result):
    estimate: float
    ci_low: float
    ci_high: float
    se: float
    method: str
    n_triplets: int
    n_impossible: int
    n_undefined: int = 0
    quartile_low: float = float("nan")     # spread of the Heise values over all triplets
    quartile_high: float = float("nan")
    wiley_middle_median: float = float("nan")  # Wiley-Wiley middle-wave reliability, median
    listed: str = "all triplets"           # which triplets the per-triplet rows hold
    interval_scale: str = "logit"   # "logit" (inside 0-1), or "linear" when the median
    #                                 or a replicate is on or beyond a bound


@dataclass(frozen=True)
class ReliabilityScreen(Result):
    """Quasi-simplex reliability of the measure: one row per triplet of waves."""

    basis: str
    n_replicates: int
    heise: tuple[HeiseRow, ...]
    wiley_wiley: tuple[WileyWileyRow, ...]
    summary: ReliabilitySummary
    internal_consistency: "InternalConsistency | None" = None
    alternative_basis: str | None = None          # the other basis, when both were computed
    alternative_summary: ReliabilitySummary | None = None
    basis_note: str | None = None                 # why this basis was chosen
    all_triplets: dict | None = None              # triplet_table, only when asked for

    def to_dict(self) -> dict:
        out = super().to_dict()
        for key in ("internal_consistency", "alternative_basis", "alternative_summary",
                    "basis_note", "all_triplets"):
            if out[key] is None:
                del out[key]
        return out


def quasi_simplex_reliability(moments, wave_labels: tuple[str, ...],
                              basis: str = BASIS_PAIRWISE, level: float = 0.95,
                              all_triplets: bool = False) -> ReliabilityScreen | None:
    """Heise and Wiley-Wiley reliabilities per triplet of waves, with a summary over all.

    The rows list the triplets of ``listed_triplets`` (all of them up to
    ``MAX_WAVES_ALL_TRIPLETS`` waves); the summary, its quartiles and the counts are over
    every triplet, computed as arrays without listing them (``triplet_table`` lists all).

    ``moments`` provides ``correlation()``, ``covariance()`` and ``leave_one_out()``
    (each replicate group left out in turn), e.g. ``PairwiseMoments``. The summary is
    the median of the Heise reliabilities over all triplets, impossible values
    included as they are, with a delete-a-group jackknife confidence interval over the
    replicate groups (t quantile with K - 1 degrees of freedom), formed on the logit
    scale so that it stays inside 0-1 (on the linear scale, unclipped, when the median
    or a replicate is outside 0-1: an impossible value is shown as such). Returns None with
    fewer than three waves.

    References
    ----------
    Heise, D. R. (1969). Separating reliability and stability in test-retest
    correlation. American Sociological Review, 34(1), 93-101.
    Efron, B., and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman
    & Hall (the interval formed on the logit scale, so it stays inside 0-1).
    Wiley, D. E., and Wiley, J. A. (1970). The estimation of measurement error in
    panel data. American Sociological Review, 35(1), 112-117.
    Kott, P. S. (2001). The delete-a-group jackknife. Journal of Official
    Statistics, 17(4), 521-526.
    """
    n_waves = len(wave_labels)
    if n_waves < 3:
        return None
    trip, shown = triplets(n_waves), listed_triplets(n_waves)
    corr, cov = moments.correlation(), moments.covariance()
    h_all = heise_values(corr, trip)
    h, w = heise_values(corr, shown), wiley_wiley_values(cov, shown)
    rep_h, rep_w, rep_median = [], [], []
    for part in moments.leave_one_out():  # a loop over replicate groups
        part_corr = part.correlation()
        rep_h.append(heise_values(part_corr, shown)["reliability"])
        rep_w.append(wiley_wiley_values(part.covariance(), shown))
        rep_median.append(_median(heise_values(part_corr, trip)["reliability"]))
    k = len(rep_h)
    se_h = jackknife_se(h["reliability"], np.array(rep_h))
    se_w_rel = jackknife_se(w["reliability"], np.array([r["reliability"] for r in rep_w]))
    se_w_err = jackknife_se(w["error_variance"], np.array([r["error_variance"] for r in rep_w]))
    heise_rows, wiley_rows = [], []
    for i, (s, t, u) in enumerate(shown):
        labels = (wave_labels[s], wave_labels[t], wave_labels[u])
        hp, wp = _heise_problems(h, i), _wiley_problems(w, i)
        heise_rows.append(HeiseRow(
            waves=labels, reliability=float(h["reliability"][i]), reliability_se=float(se_h[i]),
            stability_first=float(h["stability_first"][i]),
            stability_second=float(h["stability_second"][i]),
            stability_outer=float(h["stability_outer"][i]),
            impossible=_impossible(hp), problems=tuple(hp)))
        wiley_rows.append(WileyWileyRow(
            waves=labels, error_variance=float(w["error_variance"][i]),
            error_variance_se=float(se_w_err[i]),
            true_variance=tuple(float(v) for v in w["true_variance"][i]),
            reliability=tuple(float(v) for v in w["reliability"][i]),
            reliability_se=tuple(float(v) for v in se_w_rel[i]),
            stability_first=float(w["stability_first"][i]),
            stability_second=float(w["stability_second"][i]),
            impossible=_impossible(wp), problems=tuple(wp)))
    values = h_all["reliability"]
    estimate = _median(values)
    n_undefined = int(np.isnan(values).sum())
    defined = values[~np.isnan(values)]
    quartiles = np.percentile(defined, [25, 75]) if len(defined) else (np.nan, np.nan)
    reps = np.array(rep_median)
    # a reliability lies in [0, 1]: the interval is formed on the logit scale
    low, high, scale = jackknife_ci_bounded(estimate, reps, level)
    undefined = (f", {n_undefined} undefined triplet(s) left out" if n_undefined else "")
    method = (f"median of the Heise reliabilities over {len(trip)} triplet(s) of waves "
              f"({basis.replace('_', ' ')} correlations{undefined}); {int(100 * level)}% "
              f"interval from the delete-a-group jackknife over {k} replicate groups, on "
              f"the {scale} scale")
    listed = "all triplets" if len(shown) == len(trip) else \
        "adjacent triplets and evenly spaced triplets from the first wave"
    summary = ReliabilitySummary(
        estimate=estimate, ci_low=float(low), ci_high=float(high),
        se=float(jackknife_se(estimate, reps)), method=method,
        n_triplets=len(trip), n_impossible=int(heise_impossible(h_all).sum()),
        n_undefined=n_undefined, quartile_low=float(quartiles[0]),
        quartile_high=float(quartiles[1]),
        wiley_middle_median=_median(wiley_wiley_values(cov, trip)["reliability"][:, 1]),
        listed=listed, interval_scale=scale)
    return ReliabilityScreen(basis=basis, n_replicates=k, heise=tuple(heise_rows),
                             wiley_wiley=tuple(wiley_rows), summary=summary,
                             all_triplets=triplet_table(corr, cov, wave_labels)
                             if all_triplets else None)


def _impossible(problems: list[str]) -> bool:
    """A defined value outside its range (an undefined triplet is not 'impossible')."""
    return bool(problems) and not problems[0].startswith("undefined")


def _median(values: np.ndarray) -> float:
    """Median of the defined values (impossible ones included as computed; NaN, where a
    triplet cannot be computed at all, left out)."""
    defined = values[~np.isnan(values)]
    return float(np.median(defined)) if len(defined) else float("nan")


# ----------------------------------------------------------------------------- items

@dataclass(frozen=True)
class ItemWave(Result):
    wave: str
    n: int
    alpha: float
    alpha_ci_low: float
    alpha_ci_high: float
    omega: float
    loadings: tuple[float, ...]
    unique_variances: tuple[float, ...]
    heywood: bool
    problems: tuple[str, ...]


@dataclass(frozen=True)
class InternalConsistency(Result):
    """Cronbach's alpha and McDonald's omega of the scale's items at each wave."""

    items: tuple[str, ...]
    omega_method: str
    waves: tuple[ItemWave, ...]


def item_covariance(items: np.ndarray, weights: np.ndarray | None = None
                    ) -> tuple[np.ndarray, int]:
    """Covariance (n - 1 divisor, centred) of the units with every item observed, and
    their count; with weights, weighted (divisor sum(w) - 1, the weights averaging 1)."""
    complete = ~np.isnan(items).any(axis=1)
    x = items[complete]
    n = len(x)
    if n < 2:
        return np.full((items.shape[1],) * 2, np.nan), n
    if weights is None:
        d = x - x.mean(axis=0)
        return d.T @ d / (n - 1), n
    w = weights[complete]
    d = x - (w @ x) / w.sum()
    return (d * w[:, None]).T @ d / (w.sum() - 1), n


def cronbach_alpha(cov: np.ndarray) -> float:
    """Cronbach (1951): alpha = k / (k - 1) * (1 - sum of item variances / total variance)."""
    k = cov.shape[0]
    total = cov.sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        return float(k / (k - 1) * (1.0 - np.trace(cov) / total))


def alpha_interval(alpha: float, n: int, k: int, level: float = 0.95) -> tuple[float, float]:
    """Feldt (1965, Psychometrika) F-based interval: 1 - (1 - alpha) F quantiles with
    n - 1 and (n - 1)(k - 1) degrees of freedom."""
    if n < 3 or not np.isfinite(alpha):
        return np.nan, np.nan
    df1, df2 = n - 1, (n - 1) * (k - 1)
    tail = (1 - level) / 2
    return (1 - (1 - alpha) * dist.f_ppf(1 - tail, df1, df2),
            1 - (1 - alpha) * dist.f_ppf(tail, df1, df2))


def one_factor_ml(cov: np.ndarray, lower: float = 0.005) -> tuple[np.ndarray, np.ndarray, bool]:
    """One-factor maximum-likelihood factor analysis of a covariance matrix.

    Unique variances are found by minimising Joreskog's (1967) concentrated
    discrepancy over psi in [lower * s_ii, s_ii]; the loadings follow from the
    leading eigenvector of Psi^-1/2 S Psi^-1/2. Returns (loadings, unique variances,
    heywood) where heywood says a unique variance ended at its lower bound.
    """
    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    p = corr.shape[0]

    def discrepancy(psi):
        scale = 1.0 / np.sqrt(psi)
        gamma = np.linalg.eigvalsh(corr * np.outer(scale, scale))[:-1]
        return float(np.sum(gamma - np.log(gamma) - 1.0))

    start = np.clip((1.0 - 0.5 / p) / np.diag(np.linalg.inv(corr)), lower, 1.0)
    fit = optimize.minimize(discrepancy, start, method="L-BFGS-B",
                            bounds=[(lower, 1.0)] * p, options={"ftol": 1e-14, "gtol": 1e-10})
    psi = fit.x
    scale = 1.0 / np.sqrt(psi)
    values, vectors = np.linalg.eigh(corr * np.outer(scale, scale))
    top = vectors[:, -1] * np.sqrt(max(values[-1] - 1.0, 0.0))
    loadings = np.sqrt(psi) * top
    if loadings.sum() < 0:
        loadings = -loadings
    heywood = bool(np.any(psi <= lower * (1 + 1e-6)))
    return loadings * sd, psi * sd ** 2, heywood


def mcdonald_omega(loadings: np.ndarray, unique: np.ndarray) -> float:
    """McDonald (1999): omega = (sum lambda)^2 / ((sum lambda)^2 + sum psi)."""
    common = loadings.sum() ** 2
    return float(common / (common + unique.sum()))


def internal_consistency(items: np.ndarray, wave_labels: tuple[str, ...],
                         item_names: tuple[str, ...], level: float = 0.95,
                         weights: np.ndarray | None = None) -> InternalConsistency:
    """Cronbach's alpha and McDonald's omega of a scale's items, wave by wave.

    ``items`` is (n_units, n_waves, n_items); each wave uses the units with every
    item observed at that wave. Alpha and omega refer to the unweighted sum (or mean)
    of the raw items, so they are computed from covariances (weighted ones with
    ``weights``; Feldt's interval keeps the count of units). Omega uses a one-factor
    model fitted by maximum likelihood; a Heywood case (a unique variance at its
    lower bound) and a negative alpha are reported with the reason, not altered.

    References
    ----------
    Cronbach, L. J. (1951). Coefficient alpha and the internal structure of tests.
    Psychometrika, 16(3), 297-334.
    Feldt, L. S. (1965). The approximate sampling distribution of Kuder-Richardson
    reliability coefficient twenty. Psychometrika, 30(3), 357-370.
    McDonald, R. P. (1999). Test Theory: A Unified Treatment. Mahwah, NJ: Erlbaum.
    Joreskog, K. G. (1967). Some contributions to maximum likelihood factor analysis.
    Psychometrika, 32(4), 443-482.
    """
    rows = []
    k = items.shape[2]
    for t, label in enumerate(wave_labels):  # a loop over waves
        cov, n = item_covariance(items[:, t, :], weights)
        problems = []
        if n < k + 1 or not np.all(np.isfinite(cov)) or np.any(np.diag(cov) <= 0):
            problems.append(f"too few complete units ({n}) or an item without variance")
            rows.append(ItemWave(label, n, np.nan, np.nan, np.nan, np.nan, (), (), False,
                                 tuple(problems)))
            continue
        alpha = cronbach_alpha(cov)
        low, high = alpha_interval(alpha, n, k, level)
        if alpha < 0:
            problems.append("alpha negative: the items covary negatively on average")
        loadings, unique, heywood = one_factor_ml(cov)
        if heywood:
            problems.append("Heywood case: an item's unique variance reached its lower bound "
                            "(0.5% of its variance); omega rests on a boundary solution")
        rows.append(ItemWave(label, n, alpha, float(low), float(high),
                             mcdonald_omega(loadings, unique),
                             tuple(float(v) for v in loadings),
                             tuple(float(v) for v in unique), heywood, tuple(problems)))
    return InternalConsistency(
        items=tuple(item_names),
        omega_method="one-factor maximum likelihood (Joreskog 1967), covariance metric",
        waves=tuple(rows))


class EMBasis:
    """ML means and covariance under missing at random, with leave-one-group-out
    copies, in the interface ``quasi_simplex_reliability`` expects."""

    def __init__(self, cov: np.ndarray, parts: list[np.ndarray], means: np.ndarray | None = None,
                 part_means: list[np.ndarray] | None = None):
        self.cov, self.parts = cov, parts
        self.means, self.part_means = means, part_means or []

    def covariance(self) -> np.ndarray:
        return self.cov

    def correlation(self) -> np.ndarray:
        sd = np.sqrt(np.diag(self.cov))
        return self.cov / np.outer(sd, sd)

    def leave_one_out(self):
        for part in self.parts:
            yield EMBasis(part, [])


# leave-one-group-out EM copies, started at the full fit, converge in tens of
# accelerated steps (the demo panel's districts: median about 20)
COPY_EM_STEPS = 300

_EM_BASIS_CACHE: dict[int, tuple[weakref.ref, EMBasis | None]] = {}


def em_basis(replicates, full=None) -> EMBasis | None:
    """EM moments (Dempster, Laird and Rubin 1977, JRSS B; paneldiag.diagnostics.
    missingness.em_moments) of all units and of each leave-one-group-out set, from
    per-group pattern moments; None when any fit fails to converge. ``full`` may give
    an EMResult already fitted to all units. Computed once per summary object."""
    cached = _EM_BASIS_CACHE.get(id(replicates))
    if cached is not None and cached[0]() is replicates:
        return cached[1]
    result = _em_basis(replicates, full)
    for stale in [k for k, (ref, _) in _EM_BASIS_CACHE.items() if ref() is None]:
        del _EM_BASIS_CACHE[stale]
    _EM_BASIS_CACHE[id(replicates)] = (weakref.ref(replicates), result)
    return result


def _em_basis(replicates, full) -> EMBasis | None:
    from paneldiag.diagnostics.missingness import em_moments

    def fit(patterns, start=None, max_iter=2000):
        try:   # the copies' log-likelihoods are never used
            em = em_moments(patterns, max_iter, start=start, loglik=start is None)
        except np.linalg.LinAlgError:
            return None
        ok = em.converged and np.all(np.isfinite(em.covariance)) and \
            np.all(np.isfinite(em.means))
        return em if ok else None

    if (full is not None and full.method != "em") or not replicates.pooled().ml_affordable:
        return None   # beyond the cost limit of likelihood fits: pairwise moments instead
    full = full if full is not None and full.converged else fit(replicates.pooled())
    if full is None or not np.all(np.isfinite(full.covariance)):
        return None
    # each copy holds all but 1/K of the units, so it starts from the full fit; it is
    # fitted to the same tolerance, so that the interval ends it gives do not depend on
    # the order the summaries were summed in (accelerated EM makes that cheap). The
    # copies are fitted on both threads of the screen (paneldiag.ahead), in group order.
    # A copy that has not converged in COPY_EM_STEPS accelerated steps sits on a flat
    # or degenerate likelihood, and one such copy voids the basis: the rest are skipped.
    parts = share(lambda patterns: fit(patterns, start=full, max_iter=COPY_EM_STEPS),
                  replicates.leave_one_out(), give_up=lambda em: em is None)
    if any(em is None for em in parts):
        return None
    return EMBasis(full.covariance, [p.covariance for p in parts], full.means,
                   [p.means for p in parts])


def reliability_section(ctx) -> ReliabilityScreen | None:
    """The screen's ``reliability`` section for one measure (see paneldiag.pipeline).

    With missing cells and converging EM fits, the basis is the ML covariance under
    missing at random (EM), and the pairwise-complete summary is given beside it;
    with complete data, or when EM fails, the basis is the pairwise-complete moments.
    """
    from paneldiag.diagnostics.missingness import PAIRWISE_FALLBACK_NOTE
    from paneldiag.summaries.pairwise import PairwiseMoments
    from paneldiag.summaries.patterns import PatternMoments
    from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments

    labels = ctx.panel.wave_labels
    table = ctx.options.triplet_table
    result = quasi_simplex_reliability(ctx.summary(PairwiseMoments), labels,
                                       all_triplets=table)
    if result is not None and np.isnan(ctx.values).any():
        em = None
        if ReplicatePatternMoments in ctx.summaries:
            em = em_basis(ctx.summary(ReplicatePatternMoments),
                          getattr(ctx.results.get("missingness"), "em", None))
        if em is not None:
            em_result = quasi_simplex_reliability(em, labels, basis=BASIS_EM,
                                                  all_triplets=table)
            result = replace(em_result, alternative_basis=BASIS_PAIRWISE,
                             alternative_summary=result.summary,
                             basis_note="missing cells present: ML moments under missing at "
                                        "random (EM); pairwise-complete summary beside it")
        elif not ctx.summary(PatternMoments).ml_affordable:
            result = replace(result, basis_note=PAIRWISE_FALLBACK_NOTE)
        else:
            result = replace(result, basis_note="missing cells present but no converging EM "
                                                "fit for every replicate group: "
                                                "pairwise-complete moments")
    items = ctx.panel.items.get(ctx.measure)
    if items is None:
        return result
    from paneldiag.summaries import relative_weights
    consistency = internal_consistency(items, ctx.panel.wave_labels,
                                       ctx.panel.item_columns[ctx.measure],
                                       weights=relative_weights(ctx.panel.weights))
    if result is None:  # two waves: no triplet, but the items still say something
        empty = ReliabilitySummary(
            estimate=float("nan"), ci_low=float("nan"), ci_high=float("nan"), se=float("nan"),
            method="fewer than three waves: no quasi-simplex estimate", n_triplets=0,
            n_impossible=0)
        return ReliabilityScreen(basis=BASIS_PAIRWISE, n_replicates=ctx.options.n_replicates,
                                 heise=(), wiley_wiley=(), summary=empty,
                                 internal_consistency=consistency)
    return replace(result, internal_consistency=consistency)
