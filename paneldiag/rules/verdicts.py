"""Process-family verdicts: which families the data plausibly support, and why.

Every family is judged by the best of a small set of specifications (``specs``: error
variances equal or per wave, stationary carry-over or the quasi-simplex, random
curvature, free loadings), fitted by full-information maximum likelihood from the
response-pattern summary (``structures``), chosen within the family by BIC. Families
are compared by BIC differences and BIC weights; each family's BIC counts its mean
structure too (a linear mean for linear growth, a quadratic one for quadratic growth,
free means for free-shape growth; the best of flat, linear, quadratic and free for the
families that say nothing about the mean). The parts that separate neighbouring
families are tested by likelihood ratios between specifications of the same flavour
(same error part and carry-over part):

- dependence: the mean correlation of adjacent waves against ``min_correlation``;
- unit-specific growth: trait + carry-over against growth + carry-over (the slope
  variance and its covariance), the slopes' share of the last wave's variance, and
  growth ahead of every stationary family (the quasi-simplex included) by BIC;
- a stable trait: carry-over against trait + carry-over; without carry-over, a flat
  lag profile;
- carry-over: trait against trait + carry-over;
- carry-over in the deviations from growth: growth against growth + carry-over;
- the mean's shape: straight-line change, quadratic bend and the remainder.

A family is supported when its defining part is evidenced (test below ``alpha``, effect
above its threshold) and its BIC is the best among such families and within
``bic_margin`` of the best of all. Misfit is a caveat naming the wave pairs that fit
worst; only when every family's best specification misfits grossly (comparative fit
index below ``min_cfi``) is a verdict lowered. Every evidence sentence quotes numbers
stored in the ``verdict_basis`` section of the report.

References
----------
Raftery, A. E. (1995). Bayesian model selection in social research. Sociological
Methodology, 25, 111-163.
Kass, R. E. and Raftery, A. E. (1995). Bayes factors. JASA, 90, 773-795.
Bentler, P. M. (1990). Comparative fit indexes in structural models. Psychological
Bulletin, 107, 238-246.
Browne, M. W. (1984). Asymptotically distribution-free methods for the analysis of
covariance structures. British Journal of Mathematical and Statistical Psychology, 37,
62-83.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import special

from paneldiag import distributions as dist
from paneldiag.ahead import share
from paneldiag.labels import FAMILY_NAMES, STATISTIC_LABELS, measurement_label
from paneldiag.results import Result
from paneldiag.rules import structures as st
from paneldiag.rules.parts import Carry, Error, Growth, QuasiSimplex, Trait
from paneldiag.rules.specs import family_specs, structure
from paneldiag.rules.thresholds import Thresholds, default_thresholds

FAMILY_IDS = ("occasion_noise", "stable_trait", "autoregressive", "trait_autoregressive",
              "linear_growth", "quadratic_growth", "free_shape_growth",
              "growth_autoregressive")
DISPLAY = FAMILY_NAMES   # one table of display names for every output
MODELS = {
    "occasion_noise": "independence model with free wave means (a baseline for comparison)",
    "stable_trait": "random-intercept model (compound symmetry)",
    "autoregressive": "quasi-simplex model (first-order autoregression of the true scores "
                      "with measurement error)",
    "trait_autoregressive": "random intercept plus first-order autoregression of the "
                            "deviations, with measurement error (trait-state-error structure)",
    "linear_growth": "linear latent growth model (random intercept and random slope)",
    "quadratic_growth": "quadratic latent growth model (random intercept and slope, "
                        "quadratic mean)",
    "free_shape_growth": "latent basis growth model (shape loadings estimated freely)",
    "growth_autoregressive": "latent growth model with first-order autoregressive residuals",
}
# the evidence sentences that carry each family's defining part (for next_models)
KEY_EVIDENCE = {
    "occasion_noise": ("Mean correlation",),
    "stable_trait": ("No decaying part", "Stable share"),
    "autoregressive": ("Carry-over per unit", "Carry-over rho"),
    "trait_autoregressive": ("Stable share", "Carry-over per unit"),
    "linear_growth": ("Unit-specific growth", "Change of the mean"),
    "quadratic_growth": ("Unit-specific growth", "Quadratic bend"),
    "free_shape_growth": ("Unit-specific growth", "Largest departure"),
    "growth_autoregressive": ("Unit-specific growth", "Carry-over in the deviations"),
}
STATIONARY = ("stable_trait", "autoregressive", "trait_autoregressive")
GROWTH_SHAPES = ("linear_growth", "quadratic_growth", "free_shape_growth")
GROWTH = GROWTH_SHAPES + ("growth_autoregressive",)
# the mean structures a family allows (its BIC takes the best of them)
MEAN_OPTIONS = {"linear_growth": ("flat", "linear"), "quadratic_growth": ("quadratic",),
                "free_shape_growth": ("free",)}
VERDICT_ORDER = {"supported": 0, "plausible": 1, "undetermined": 2, "unlikely": 3}
SCORE_BANDS = {"supported": (0.8, 0.2), "plausible": (0.45, 0.3),
               "undetermined": (0.3, 0.0), "unlikely": (0.0, 0.25)}


@dataclass(frozen=True)
class FamilyVerdict(Result):
    family: str
    verdict: str
    score: float
    specification: str | None     # the family's specification chosen by BIC
    bic_difference: float | None  # its BIC minus the best family's
    bic_weight: float | None      # exp(-diff / 2), normalised over the families
    evidence: tuple[str, ...]
    caveats: tuple[str, ...]


@dataclass(frozen=True)
class Measurement(Result):
    reliability: float | None
    ci_low: float | None
    ci_high: float | None
    verdict: str | None
    advice: str
    basis: str
    method: str | None = None
    lower_bound: bool = False
    label: str | None = None      # the figure's name in every output


@dataclass(frozen=True)
class NextModel(Result):
    rank: int
    family: str
    model: str
    why: str


@dataclass(frozen=True)
class PartPower(Result):
    """What this panel can tell apart: the power of the test that separates two
    neighbouring families at the panel's N, waves, response patterns and the richer
    family's estimated parameters (Satorra and Saris 1985)."""

    test: str
    simpler: str
    richer: str
    df: int
    noncentrality: float
    power: float
    units_for_power_90: int | None
    evidenced: bool
    target_power: float = 0.9     # the power the unit count is for


@dataclass(frozen=True)
class Judgement:
    """Everything the rules produced for one measure."""

    families: tuple[FamilyVerdict, ...]
    measurement: Measurement
    next_models: tuple[NextModel, ...]
    basis: dict
    power: tuple[PartPower, ...] = ()


# ------------------------------------------------------------------ number citing

def _r(x, digits=3):
    return None if x is None or not np.isfinite(x) else round(float(x), digits)


def _f(x, digits=3):
    return "n/a" if x is None or not np.isfinite(x) else f"{round(float(x), digits):.{digits}f}"


class Citations:
    """Collects the statistics that evidence sentences cite, rounded as printed."""

    def __init__(self, thresholds: Thresholds):
        self.stats: dict = {}
        self.th = thresholds

    def thr(self, name: str) -> str:
        return f"{self.th[name]:g}"

    def estimate(self, name, est, lo=np.nan, hi=np.nan, digits=3) -> str:
        self.stats[name] = {"estimate": _r(est, digits), "ci_low": _r(lo, digits),
                            "ci_high": _r(hi, digits)}
        if not (np.isfinite(lo) and np.isfinite(hi)):
            return f"{_f(est, digits)} (no interval available)"
        low, high = _r(lo, digits), _r(hi, digits)
        if low == high:   # every replicate on a bound: no uncertainty could be measured
            return f"{_f(est, digits)}, at the boundary (an interval of zero width)"
        if low == 0 and high == 1:   # a share whose interval was clipped at both ends
            return f"{_f(est, digits)}, not estimable here (95% CI spans 0 to 1)"
        return f"{_f(est, digits)} [95% CI {_f(lo, digits)}, {_f(hi, digits)}]"

    def test(self, name, stat, df, p) -> str:
        alpha = self.th["alpha"]
        self.stats[name] = {"statistic": _r(stat, 1), "df": int(df), "p_value": _r(p, 3)
                            if p is not None and np.isfinite(p) and p >= alpha else
                            (None if p is None or not np.isfinite(p) else float(f"{p:.3g}"))}
        if p is None or not np.isfinite(p):
            return f"chi-square {_f(stat, 1)} on {int(df)} df"
        ptext = f"p < {alpha:g}" if p < alpha else f"p = {_f(p, 3)}"
        return f"chi-square {_f(stat, 1)} on {int(df)} df, {ptext}"

    def p(self, name, p) -> str:
        """'p < alpha' below the threshold, else the cited p-value."""
        if p < self.th["alpha"]:
            return "p < " + self.thr("alpha")
        return f"p = {self.value(name, float(p))}"

    def value(self, name, x, digits=3) -> str:
        self.stats[name] = _r(x, digits) if isinstance(x, float) else x
        return _f(x, digits) if isinstance(x, float) else str(x)


# -------------------------------------------------------------------- inputs

@dataclass
class Inputs:
    """The moments and facts of the panel the rules need."""

    mu: np.ndarray
    sigma: np.ndarray
    pair_n: np.ndarray
    times: np.ndarray
    n_units: int
    retention: float
    dropout_smd: float
    categories: int
    slope_reliability: float | None = None
    residual_autocorrelation: dict | None = None  # from the growth screen, when present
    # False when n_units must not be shown (disclosure control: it would give away a
    # small count of units never observed, against the panel's unit count)
    units_disclosed: bool = True
    retention_disclosed: bool = True   # False when the share would give a small count
    # the likelihood the structures maximise: the full-information one of the response
    # patterns, or the covariance ``sigma`` itself (complete data; polychoric input)
    likelihood: object = None
    # relative multivariate kurtosis (>= 1): the likelihood-ratio statistics are divided
    # by it (the elliptical correction of Browne 1984), unless ``copies`` are given
    kurtosis: float = 1.0
    # 'pearson' (ML moments of the scores), 'polychoric' (ordinal measure: the
    # polychoric correlations) or 'polychoric-latent' (scaled by the latent SDs)
    moments_kind: str = "pearson"
    wave_labels: tuple | None = None
    # delete-a-group copies of sigma (K, T, T) for the scaled difference tests
    copies: np.ndarray | None = None


def inputs_from_patterns(patterns, em, times, categories: int) -> Inputs:
    """Moments from the EM result; retention and selective dropout from the patterns;
    the full-information likelihood from the patterns (or the covariance itself when
    every unit answered every wave)."""
    from paneldiag.diagnostics.missingness import _groups
    obs = patterns.observed
    n = patterns.n
    t = obs.shape[1]
    pair_n = (obs.T * n) @ obs.astype(float)
    # kept to the end of follow-up, counted from each unit's own first wave
    from paneldiag.diagnostics.attrition import retention_to_end
    mass = patterns.mass   # the estimates weighted; the thresholds on counts of units
    if patterns.weighted:
        from paneldiag.diagnostics.attrition import end_of_follow_up, follow_up_span
        due, kept_rows = end_of_follow_up(obs, follow_up_span(obs, n))
        base, kept = float(mass @ due), float(mass @ kept_rows)
    else:
        base, kept = retention_to_end(obs, n)
    retention = kept / base if base > 0 else np.nan
    # the previous score of units that leave after wave s vs units seen again later
    last = np.where(obs.any(axis=1), t - 1 - np.argmax(obs[:, ::-1], axis=1), -1)
    smds, weights = [], []
    sd = np.sqrt(np.diag(em.covariance))
    for s in range(t - 1):  # a loop over waves
        here = obs[:, s]
        leave = here & (last == s)
        stay = here & (last > s)
        n_leave, n_stay = n[leave].sum(), n[stay].sum()
        w_leave, w_stay = mass[leave].sum(), mass[stay].sum()
        if n_leave >= 5 and n_stay >= 5 and sd[s] > 0 and w_leave > 0 and w_stay > 0:
            m_leave = (mass[leave] * patterns.mean[leave, s]).sum() / w_leave
            m_stay = (mass[stay] * patterns.mean[stay, s]).sum() / w_stay
            smds.append((m_leave - m_stay) / sd[s])
            weights.append(w_leave)
    smd = float(np.average(smds, weights=weights)) if smds else np.nan
    sigma = np.asarray(em.covariance, float)
    used = mass > 0
    complete = bool(np.all(obs[used & obs.any(axis=1)]))
    likelihood = None
    if np.all(np.isfinite(sigma)) and em.method == "em":
        likelihood = (st.CovarianceLikelihood(sigma) if complete else
                      st.PatternLikelihood(_groups(patterns, np.ones(t, dtype=bool)), t))
    return Inputs(mu=np.asarray(em.means, float), sigma=sigma, pair_n=pair_n,
                  times=np.asarray(times, float), n_units=int(em.n_units),
                  retention=retention, dropout_smd=smd, categories=categories,
                  likelihood=likelihood,
                  moments_kind="pearson" if em.method == "em" else "pairwise-complete")


# -------------------------------------------------------------------- the fits

@dataclass
class FamilyFit:
    """One family's specifications, the one chosen by BIC, and the family's BIC
    criterion (covariance part N F + q ln N plus its mean structure's Wald + k ln N)."""

    family: str
    options: list                 # (structure, Fit or Skipped) in plan order
    chosen: st.Fit | None = None
    criterion: float = np.inf
    mean_shape: str | None = None


@dataclass
class Evidence:
    moments: st.Moments
    families: dict = field(default_factory=dict)   # family -> FamilyFit
    tests: dict = field(default_factory=dict)      # test -> (stat, df, p, simple, rich)
    shape: st.MeanShape | None = None
    best: str | None = None
    difference: dict = field(default_factory=dict)  # family -> BIC difference
    weight: dict = field(default_factory=dict)

    def chosen(self, family: str) -> st.Fit | None:
        ff = self.families.get(family)
        return ff.chosen if ff is not None else None


def covers(rich: st.Structure, simple: st.Structure) -> bool:
    """Whether ``simple`` is a special case of ``rich`` (nested in it): each part of
    the simpler structure is a restriction of its own part of the richer one (a trait of
    a growth part's intercept; linear growth of curvature or free loadings; one error
    variance of one per wave; stationary carry-over only of itself)."""
    free = list(rich.parts)
    for part in simple.parts:
        match = next((r for r in free if _restricts(part, r)), None)
        if match is None:
            return False
        free.remove(match)
    return True


def _restricts(part, rich_part) -> bool:
    if isinstance(part, Error):
        return isinstance(rich_part, Error) and (part.kind == "equal" or rich_part.kind in
                                                 (part.kind, "wave"))
    if isinstance(part, Trait):
        return isinstance(rich_part, (Trait, Growth))
    if isinstance(part, Growth):
        return isinstance(rich_part, Growth) and part.basis == rich_part.basis and \
            part.order <= rich_part.order and (rich_part.free_loadings or
                                               not part.free_loadings)
    return type(part) is type(rich_part)


def moments_of(inp: Inputs, max_waves_per_wave: int | None = None,
               flat: tuple[float, float] | None = None) -> st.Moments:
    t = len(inp.times)
    iu = np.triu_indices(t, 1)
    n_eff = float(np.mean(inp.pair_n[iu])) if t > 1 else float(inp.n_units)
    likelihood = inp.likelihood or st.CovarianceLikelihood(inp.sigma)
    m = st.Moments(inp.mu, inp.sigma, inp.times, likelihood, float(inp.n_units), n_eff)
    m.copies = inp.copies
    m.max_waves_per_wave = max_waves_per_wave
    m.flat_loglik, m.flat_coefficient = flat if flat is not None else (None, None)
    m.lr_scaling = (st.copy_inflation(inp.sigma, inp.copies, float(inp.n_units))
                    if inp.copies is not None else max(float(inp.kurtosis), 1.0))
    return m


def _criterion(fit: st.Fit, m: st.Moments) -> float:
    """BIC of the covariance part up to a constant: N F / scaling + q ln N (the
    likelihood scaled like the test statistics)."""
    return m.n_units * fit.discrepancy / m.lr_scaling + fit.n_params * np.log(m.n_units)


def _fit_all(inp: Inputs, alpha: float, max_waves_per_wave: int | None = None,
             flat: tuple[float, float] | None = None, families=None) -> Evidence:
    """Every family's specifications fitted (or those of ``families`` only: a part test
    needs its richer family alone), the choice within and across families by BIC, and
    the part tests whose richer family was fitted."""
    t = len(inp.times)
    m = moments_of(inp, max_waves_per_wave, flat)
    ev = Evidence(m)
    if t >= 3:
        ev.shape = st.mean_shape(inp.mu, inp.sigma, inp.pair_n, inp.times)
    means = st.mean_terms(inp.mu, inp.sigma, inp.pair_n, inp.times)
    log_n = np.log(m.n_units)
    departs = ev.shape is not None and t >= 4 and np.isfinite(ev.shape.remainder_p) and \
        ev.shape.remainder_p < alpha
    shape_basis = st.mean_basis(inp.mu, inp.times) if departs else None
    plans = {family: plan for family, plan in family_specs(inp.times, shape_basis).items()
             if families is None or family in families}
    m.fit_many(s for plan in plans.values() for s in plan)
    for family, plan in plans.items():
        ff = FamilyFit(family, [(s, m.fit(s)) for s in plan])
        fits = [fit for _, fit in ff.options if isinstance(fit, st.Fit)]
        if fits:
            ff.chosen = min(fits, key=lambda fit: _criterion(fit, m))
            shape = min(MEAN_OPTIONS.get(family, st.MEAN_SHAPES),
                        key=lambda k: means[k][0] + means[k][1] * log_n)
            ff.mean_shape = shape
            ff.criterion = _criterion(ff.chosen, m) + means[shape][0] + means[shape][1] * log_n
        ev.families[family] = ff
    finite = {f: ff.criterion for f, ff in ev.families.items() if np.isfinite(ff.criterion)}
    if finite:
        ev.best = min(finite, key=finite.get)
        low = finite[ev.best]
        ev.difference = {f: c - low for f, c in finite.items()}
        raw = {f: np.exp(-0.5 * d) for f, d in ev.difference.items()}
        total = sum(raw.values())
        ev.weight = {f: w / total for f, w in raw.items()}
    for name, test in PART_TESTS.items():
        ev.tests[name] = _part_test(ev, *test)
    if ev.tests["growth"] is None:
        ev.tests["growth"] = _part_test(ev, *GROWTH_WITHOUT_CARRY)
    return ev


def _part_test(ev: Evidence, simple: str, rich: str, drop: tuple, add, boundary: bool):
    """(statistic, df, p, simpler fit, richer fit): the richer family's chosen
    specification against the simpler family's structure made from it by dropping the
    part the test is about (and putting ``add`` in its place): nested by construction."""
    rich_fit = ev.chosen(rich)
    if rich_fit is None:
        return None
    simple_fit = ev.moments.fit(nested(rich_fit.structure, simple, drop, add))
    if not isinstance(simple_fit, st.Fit):
        return None
    stat, df, p = st.likelihood_ratio(simple_fit, rich_fit, ev.moments.n_units, boundary)
    scale = _test_scaling(ev, simple_fit, rich_fit)
    copies = ev.moments.copies
    if copies is not None:
        # scaled by the replicate groups; the scaling is itself estimated from K - 1
        # degrees of freedom, so the scaled statistic / df is referred to F(df, K - 1)
        stat = stat / scale
        k = len(copies) - 1
        p = float(dist.f_sf(stat / df, df, k))
        if boundary:   # the equal mixture of the df - 1 and df references
            p = 0.5 * (p + (float(dist.f_sf(stat / (df - 1), df - 1, k)) if df > 1
                            else 0.0)) if stat > 0 else 1.0
    elif scale > 1.0:
        stat = stat / scale
        p = st.chi2_mixture_sf(stat, df) if boundary else float(dist.chi2_sf(stat, df))
    return stat, df, p, simple_fit, rich_fit


def _test_scaling(ev: Evidence, simple_fit: st.Fit, rich_fit: st.Fit) -> float:
    """What a part test's statistic (and its noncentrality) is divided by: the test's
    own factor from the replicate copies for ordinal measures, else the panel's
    elliptical kurtosis scaling (1 for normal tails)."""
    if ev.moments.copies is not None:
        return st.scaling(simple_fit, rich_fit, ev.moments)
    return ev.moments.lr_scaling


def nested(rich: st.Structure, name: str, drop: tuple, add=None) -> st.Structure:
    """The structure ``rich`` without its parts of the types ``drop`` (and with ``add``
    in the first dropped part's place), named as family ``name``."""
    parts = []
    for part in rich.parts:
        if isinstance(part, drop):
            if add is not None and add not in parts:
                parts.append(add)
            continue
        parts.append(part)
    return structure(name, tuple(parts))


# The tests that add a part to a family: (simpler family, richer family, the part types
# the simpler family lacks, the part it has in their place, whether the added variance
# sits on its boundary under the simpler one).
PART_TESTS = {
    "trait": ("autoregressive", "trait_autoregressive", (Trait,), None, True),
    "carry": ("stable_trait", "trait_autoregressive", (Carry, QuasiSimplex), None, False),
    "growth": ("trait_autoregressive", "growth_autoregressive", (Growth,), Trait(), True),
    "growth_carry": ("linear_growth", "growth_autoregressive", (Carry,), None, False),
    "dependence": ("occasion_noise", "stable_trait", (Trait,), None, True),
}
# the growth test when growth + carry-over cannot be fitted (too few moments)
GROWTH_WITHOUT_CARRY = ("stable_trait", "linear_growth", (Growth,), Trait(), True)


def _one_thread():
    """Small-matrix work runs many times faster on one BLAS thread than on several
    competing ones; limit the pool while fitting (a no-op without threadpoolctl)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover
        import contextlib
        return contextlib.nullcontext()
    return threadpool_limits(limits=1)


# ------------------------------------------------- figures of a fitted structure
# Functions of a fit's parameter dict (for the delta method); they read the parts.

def _theta(p: dict) -> np.ndarray:
    return np.fromiter(p.values(), dtype=float, count=len(p))


def _part_values(fit: st.Fit, p: dict, key: str):
    t = fit.sigma.shape[0]
    for part, values in zip(fit.structure.parts, fit.structure.split(_theta(p), t)):
        if part.key == key:
            return part, values
    return None, None


def _carry_variance(fit: st.Fit, times: np.ndarray):
    """The carried-over variance: b (stationary), or the quasi-simplex's true-score
    variance averaged over waves."""
    def fn(p):
        part, values = _part_values(fit, p, "carry")
        if isinstance(part, QuasiSimplex):
            return float(np.mean(part.true_variances(values, len(times))))
        return float(values[0])
    return fn


def _carry_rho(fit: st.Fit, times: np.ndarray):
    """Carry-over per unit of time: rho (stationary), or the quasi-simplex's mean
    correlation of adjacent true scores, per unit of time."""
    def fn(p):
        part, values = _part_values(fit, p, "carry")
        if isinstance(part, QuasiSimplex):
            t = len(times)
            var = part.true_variances(values, t)
            beta = np.asarray(values[t:], dtype=float)
            r = beta * np.sqrt(var[:-1] / var[1:])
            return float(np.mean(np.sign(r) * np.abs(r) ** (1.0 / np.diff(times))))
        return float(values[1])
    return fn


def _mean_error(fit: st.Fit, times: np.ndarray):
    def fn(p):
        return float(np.mean(fit.structure.error_variances(_theta(p), len(times))))
    return fn


def _stable_share(fit: st.Fit, times: np.ndarray):
    carry = _carry_variance(fit, times)

    def fn(p):
        a, b = p["trait_var"], carry(p)
        return a / (a + b) if a + b > 0 else np.nan
    return fn


def _trait_share(fit: st.Fit, times: np.ndarray):
    error = _mean_error(fit, times)

    def fn(p):
        return p["trait_var"] / (p["trait_var"] + error(p))
    return fn


def _slope_share(fit: st.Fit, times: np.ndarray):
    """Share of the variance of change from the first to the last wave, y_T - y_1, that
    the unit-specific change factors carry: individual differences in change, not in
    level, are what growth adds to a stationary process."""
    def fn(p):
        part, values = _part_values(fit, p, "growth")
        lam = part.loadings(values, len(times))
        step = lam[-1, 1:] - lam[0, 1:]
        psi = part.psi(values)[1:, 1:]
        sigma = st.implied(fit.structure, _theta(p), times)
        change = sigma[-1, -1] + sigma[0, 0] - 2 * sigma[0, -1]
        return float(step @ psi @ step) / change
    return fn


def _dev_carry_share(fit: st.Fit, times: np.ndarray):
    carry, error = _carry_variance(fit, times), _mean_error(fit, times)

    def fn(p):
        b = carry(p)
        return b / (b + error(p))
    return fn


def _reliability(fit: st.Fit, times: np.ndarray):
    def fn(p):
        sigma = st.implied(fit.structure, _theta(p), times)
        e = fit.structure.error_variances(_theta(p), len(times))
        return float(np.mean(1.0 - e / np.diag(sigma)))
    return fn


def _profile_decline(fit: st.Fit, times: np.ndarray):
    """Decline of r(k) = a + b rho^k from the shortest to the longest distance, as a
    share of r at the shortest (stationary trait + carry-over)."""
    span = float(times[-1] - times[0])

    def fn(p):
        return p["carry_var"] * (p["rho"] - p["rho"] ** span) / \
            (p["trait_var"] + p["carry_var"] * p["rho"])
    return fn


def _clip(triple, low=0.0, high=1.0):
    """An estimate and its interval kept inside the natural range of a share."""
    return tuple(float(np.clip(v, low, high)) if np.isfinite(v) else v for v in triple)


def _phi(z):
    return float(dist.norm_cdf(z)) if np.isfinite(z) else 0.5


def _not_shown_small(est, lo, hi, threshold) -> bool:
    """Whether an effect of a part whose test rejected is not shown to be below its
    threshold: its 95% interval reaches the threshold (the point estimate when there is
    no interval). Used for growth's effects, which the likelihood trades against
    carry-over, so that their point estimates wander far from the truth in panels
    where both tests reject (docs/validation.md)."""
    return bool((hi if np.isfinite(hi) else est) >= threshold)


def _margin(est, lo, hi, threshold):
    """How clearly an estimate clears a threshold, in [0, 1] (0.5 = on it)."""
    se = (hi - lo) / (2 * st.Z95) if np.isfinite(lo) and np.isfinite(hi) else np.nan
    if not np.isfinite(est):
        return 0.5
    if not np.isfinite(se) or se <= 0:
        return 1.0 if est >= threshold else 0.0
    return _phi((est - threshold) / se)


# --------------------------------------------------------------------- the rules

# fewest units seen at both waves of some pair for any covariance between waves to count
# (with two, a correlation is +-1 whatever the process)
MIN_UNITS_SHARED = 3


def judge(inp: Inputs, thresholds: Thresholds | None = None) -> Judgement:
    """The verdicts, measurement judgement, power and next models from the panel."""
    th = thresholds or default_thresholds()
    led = Citations(th)
    t = len(inp.times)
    alpha = th["alpha"]
    ev_text: dict[str, list[str]] = {f: [] for f in FAMILY_IDS}
    verdict: dict[str, str] = {}
    strength: dict[str, float] = {f: 0.5 for f in FAMILY_IDS}
    general: list[str] = []  # caveats for every family

    led.value("n_units", int(inp.n_units) if inp.units_disclosed else None)
    led.value("n_waves", int(t))
    if t < 2 or inp.n_units < 3 or not np.all(np.isfinite(inp.sigma)) or \
            np.any(np.diag(inp.sigma) <= 0):
        for fam in FAMILY_IDS:
            verdict[fam] = "undetermined"
            ev_text[fam].append("Too few waves or units, or a wave without variation: the "
                                "covariance of the waves cannot be used.")
        return _finish(inp, th, led, verdict, strength, ev_text, general, None, None)
    iu = np.triu_indices(t, 1)
    if np.max(inp.pair_n[iu]) < MIN_UNITS_SHARED:
        for fam in FAMILY_IDS:
            verdict[fam] = "undetermined"
            ev_text[fam].append(f"No pair of waves has {MIN_UNITS_SHARED} or more units "
                                "observed at both: the dependence between waves cannot be "
                                "estimated.")
        return _finish(inp, th, led, verdict, strength, ev_text, general, None, None)

    with _one_thread():
        ev = _fit_all(inp, alpha, int(th["max_waves_per_wave"]),
                      (float(th["flat_loglik"]), float(th["flat_coefficient"])))
    tests, shape, times = ev.tests, ev.shape, inp.times
    led.value("n_effective", float(ev.moments.n_eff), 1)
    if inp.moments_kind == "pairwise-complete":
        from paneldiag.diagnostics.missingness import PAIRWISE_FALLBACK_NOTE
        general.append(PAIRWISE_FALLBACK_NOTE + ".")
    led.value("likelihood", "full information from the response patterns"
              if ev.moments.full else "complete-data" if inp.moments_kind == "pearson"
              else inp.moments_kind)

    # ------------------------------------------------ caveats about identification
    general += _identification_caveats(inp, led, th, t)
    scale = ev.moments.lr_scaling
    if scale > 1.0:
        led.value("likelihood_scaling", float(scale))
    if inp.copies is not None and scale >= 1.1:
        general.append(f"The correlations vary more across the replicate groups than "
                       f"normal theory says (by a factor of {_f(scale)} on average): each "
                       "test is scaled by its own factor from the replicate groups and BIC "
                       "reads the likelihood divided by the average.")
    elif scale >= 1.1:
        general.append(f"Scores with heavier tails than normal (relative kurtosis "
                       f"{_f(scale)}): every likelihood-ratio statistic and BIC's "
                       "likelihood are divided by it (Browne's elliptical correction).")
    if inp.moments_kind == "polychoric":
        general.append("The structures are fitted to the polychoric correlations of the "
                       "ordinal scores, whose variances are fixed at 1: growth shows only "
                       "in the correlations, not in variances that fan out.")
    elif inp.moments_kind == "polychoric-latent":
        general.append("The structures are fitted to the covariance of the normal "
                       "variables behind the ordinal scores (polychoric correlations scaled "
                       "by latent SDs, thresholds held equal across waves): the verdicts "
                       "assume the categories mean the same at every wave.")

    # ------------------------------------------------ dependence between waves
    sd = np.sqrt(np.diag(inp.sigma))
    corr = inp.sigma / np.outer(sd, sd)
    adj = np.array([corr[k, k + 1] for k in range(t - 1)])
    # Fisher z of the mean adjacent correlation; its SE treats the adjacent
    # correlations as independent, which they are under no dependence (the null the
    # equivalence check for occasion noise is about)
    z = np.arctanh(np.clip(np.mean(adj), -0.999999, 0.999999))
    n_adj = np.array([inp.pair_n[k, k + 1] for k in range(t - 1)])
    half = st.Z95 * np.sqrt(np.sum(1.0 / np.maximum(n_adj - 3, 1.0))) / (t - 1)
    r1, r1_lo, r1_hi = float(np.tanh(z)), float(np.tanh(z - half)), float(np.tanh(z + half))
    r1_text = led.estimate("adjacent_correlation", r1, r1_lo, r1_hi)
    min_r = th["min_correlation"]
    dep_clear = r1_lo > min_r
    dep_absent = r1_hi < min_r
    dep_sentence = (f"Mean correlation of adjacent waves {r1_text}; dependence counts from "
                    f"{led.thr('min_correlation')}.")

    # ------------------------------------------------ parts
    def part_test(key):
        res = tests.get(key)
        if res is None:
            return None, None
        stat, df, p, _, rich_fit = res
        text = led.test(f"{key}_test", stat, df, p)
        return p, f"{text}, specification: {rich_fit.structure.label}"

    p_growth, growth_test_text = part_test("growth")
    p_trait, trait_test_text = part_test("trait")
    p_carry, carry_test_text = part_test("carry")
    p_gcarry, gcarry_test_text = part_test("growth_carry")

    # growth: slopes' share of the last wave's variance, and growth ahead by BIC
    G = False
    slope_sentence = None
    slope = (np.nan, np.nan, np.nan)
    gfit = ev.chosen("growth_autoregressive") or ev.chosen("linear_growth")
    if gfit is not None:
        slope = _clip(gfit.derived(_slope_share(gfit, times)))
        slope_text = led.estimate("slope_share", *slope)
        if p_growth is not None:
            slope_sentence = (f"Unit-specific growth: share of the variance of change from "
                              f"the first to the last wave carried by unit slopes "
                              f"{slope_text} (counts unless its interval lies below "
                              f"{led.thr('min_slope_share')}); test against a stationary "
                              f"trait + carry-over structure: {growth_test_text} (threshold "
                              f"{led.thr('alpha')}).")
            G = p_growth < alpha and _not_shown_small(*slope, th["min_slope_share"])
            # a stationary family the growth structures do not nest (the quasi-simplex,
            # whose variances may rise like growth's) must be beaten by BIC
            best_growth = min(GROWTH, key=lambda g: ev.families[g].criterion)
            rivals = [f for f in STATIONARY if ev.chosen(f) is not None and not any(
                covers(ev.chosen(g).structure, ev.chosen(f).structure)
                for g in GROWTH if ev.chosen(g) is not None)]
            if G and rivals:
                best_still = min(rivals, key=lambda g: ev.families[g].criterion)
                lead = ev.families[best_still].criterion - ev.families[best_growth].criterion
                lead_text = led.value("growth_bic_lead", float(lead), 1)
                if lead <= 0:
                    G = False
                    slope_sentence += (
                        f" But {DISPLAY[best_still]} ({ev.chosen(best_still).structure.label})"
                        f", which no growth structure nests, has the lower BIC (growth's "
                        f"lead {lead_text}): variances that change over waves without "
                        "unit-specific slopes, so growth is not counted.")
                else:
                    slope_sentence += (f" Growth is ahead by BIC of {DISPLAY[best_still]} "
                                       f"({ev.chosen(best_still).structure.label}), which no "
                                       f"growth structure nests ({lead_text}).")
    growth_undetermined = p_growth is None

    # stable trait and carry-over (stationary or quasi-simplex)
    ta = ev.chosen("trait_autoregressive")
    S = A = False
    share = rho = (np.nan, np.nan, np.nan)
    flat = False
    trait_sentence = carry_sentence = None
    if ta is not None:
        share = _clip(ta.derived(_stable_share(ta, times)))
        rho = _clip(ta.derived(_carry_rho(ta, times)), -1.0, 1.0)
        share_text = led.estimate("stable_share", *share)
        rho_text = led.estimate("carry_rho", *rho)
        flat = rho[0] < th["min_rho"]
        if p_carry is not None:
            if flat:
                carry_sentence = (f"Carry-over rho {rho_text} is below "
                                  f"{led.thr('min_rho')}: the decaying part is not "
                                  "identified and the lag profile is flat.")
            else:
                carry_sentence = (f"Carry-over per unit of time rho {rho_text} (counts from "
                                  f"{led.thr('min_rho')}), decaying share 1 - a/(a+b) "
                                  f"(counts from {led.thr('min_carry_share')}); test of "
                                  f"the decaying part: {carry_test_text} (threshold "
                                  f"{led.thr('alpha')}).")
            A = (p_carry < alpha and not flat
                 and (1 - share[0]) >= th["min_carry_share"])
        if A and p_trait is not None:
            trait_sentence = (f"Stable share a/(a+b) of the carried-over variance, error "
                              f"variance free: {share_text} (counts from "
                              f"{led.thr('min_stable_share')}); test of the stable part: "
                              f"{trait_test_text} (threshold {led.thr('alpha')}).")
            S = p_trait < alpha and share[0] >= th["min_stable_share"]
        elif ev.chosen("stable_trait") is not None and tests.get("dependence") is not None:
            tfit = ev.chosen("stable_trait")
            icc = _clip(tfit.derived(_trait_share(tfit, times)))
            share = icc
            icc_text = led.estimate("trait_share", *icc)
            _, dep_test_text = part_test("dependence")
            trait_sentence = (f"No decaying part evidenced, so the dependence is flat: the "
                              f"stable trait's share of each wave's variance is {icc_text} "
                              f"(counts from {led.thr('min_stable_share')}); test against "
                              f"occasion noise: {dep_test_text} (threshold {led.thr('alpha')}).")
            stationary = ev.moments.fit(structure(
                "trait_autoregressive", (Trait(), Carry(), tfit.structure.part("error"))))
            stationary = stationary if isinstance(stationary, st.Fit) else None
            decline = (stationary.derived(_profile_decline(stationary, times))
                       if stationary is not None else (np.nan, np.nan, np.nan))
            decline_text = led.estimate("profile_decline", *decline)
            trait_sentence += (f" Decline of the lag profile from the shortest to the longest "
                               f"distance, as a share of r at the shortest: {decline_text} "
                               f"(flat when its upper limit is below {led.thr('max_flat_decline')}).")
            if np.isfinite(decline[2]):
                flat_shown = decline[2] < th["max_flat_decline"]
            else:  # the decaying part sits on its boundary: judge the point estimate
                flat_shown = np.isfinite(decline[0]) and decline[0] < th["max_flat_decline"] / 2
            # or the BIC prefers no decay: the stable trait ahead of both carry-over families
            lead = min(ev.families[f].criterion for f in ("autoregressive",
                                                          "trait_autoregressive")) \
                - ev.families["stable_trait"].criterion
            if np.isfinite(lead):
                trait_sentence += (f" The stable trait's BIC is "
                                   f"{led.value('trait_bic_lead', float(lead), 1)} below the "
                                   f"best carry-over family's (no decay counts from "
                                   f"{led.thr('bic_positive')}).")
                flat_shown = flat_shown or lead >= th["bic_positive"]
            S = (tests["dependence"][2] < alpha and dep_clear and flat_shown
                 and icc[0] >= th["min_stable_share"])

    # carry-over in the deviations from growth
    AG = False
    gcarry_sentence = None
    ga = ev.chosen("growth_autoregressive")
    grho = dshare = (np.nan, np.nan, np.nan)
    if ga is not None and p_gcarry is not None:
        grho = _clip(ga.derived(_carry_rho(ga, times)))
        dshare = _clip(ga.derived(_dev_carry_share(ga, times)))
        grho_text = led.estimate("growth_carry_rho", *grho)
        dshare_text = led.estimate("growth_carry_share", *dshare)
        gcarry_sentence = (f"Carry-over in the deviations from growth: rho {grho_text}, "
                           f"carried-over share of the deviations {dshare_text} (each "
                           f"counts unless its interval lies below {led.thr('min_rho')} and "
                           f"{led.thr('min_carry_share')}); test against growth with "
                           f"independent deviations: {gcarry_test_text} (threshold "
                           f"{led.thr('alpha')}).")
        AG = (p_gcarry < alpha and _not_shown_small(*grho, th["min_rho"])
              and _not_shown_small(*dshare, th["min_carry_share"]))

    # the growth screen's within-unit residual autocorrelation (quoted, not decisive)
    rac = inp.residual_autocorrelation
    if rac and gcarry_sentence and all(np.isfinite(rac.get(k, np.nan)) for k in
                                       ("lag1", "expected", "ci_low", "ci_high")):
        gcarry_sentence += (
            " For comparison, the growth screen's lag-1 autocorrelation of "
            "within-unit residuals after each unit's own trend "
            f"{led.estimate('residual_lag1', rac['lag1'], rac['ci_low'], rac['ci_high'])}, "
            f"against {led.value('residual_lag1_expected', float(rac['expected']))} "
            "expected under independence.")

    # the mean's shape
    shape_kind, shape_sentences = _mean_shape_kind(shape, led, th, t)
    target = {"free": "free_shape_growth", "quadratic": "quadratic_growth"}.get(
        shape_kind, "linear_growth")
    few_waves = t < th["min_waves_separate"]

    # ------------------------------------------------ verdicts from the parts
    ev_text["occasion_noise"].append(dep_sentence)
    if dep_absent:
        G = False
    strength["occasion_noise"] = 1 - _margin(r1, r1_lo, r1_hi, min_r)
    verdict["occasion_noise"] = ("supported" if dep_absent else "unlikely" if G or dep_clear
                                 else "plausible")
    if dep_absent:   # no dependence to speak of: nothing else can be evidenced
        for fam in STATIONARY + GROWTH:
            verdict[fam] = "unlikely"
            ev_text[fam].append(dep_sentence)
            strength[fam] = _margin(r1, r1_lo, r1_hi, min_r)
    elif G:
        _growth_branch(verdict, strength, ev_text, slope_sentence, gcarry_sentence,
                       shape_sentences, slope, dshare, target, shape, th, t, AG,
                       growth_undetermined or p_gcarry is None)
    else:
        _stationary_branch(verdict, strength, ev_text, dep_sentence, slope_sentence,
                           trait_sentence, carry_sentence, share, flat, S, A, dep_clear,
                           dep_absent, few_waves,
                           ta is None or p_trait is None or p_carry is None, th)
        shape_target = {"free": "free_shape_growth", "quadratic": "quadratic_growth",
                        "linear": "linear_growth"}.get(shape_kind)
        for fam in GROWTH_SHAPES:
            if slope_sentence:
                ev_text[fam].append(slope_sentence)
            ev_text[fam] += shape_sentences
            if fam == shape_target:
                verdict[fam] = "plausible"
            elif (fam == "linear_growth" and shape_target is None and p_growth is not None
                  and p_growth < alpha):
                verdict[fam] = "plausible"
            else:
                verdict[fam] = "undetermined" if growth_undetermined else "unlikely"
            strength[fam] = _margin(*slope, th["min_slope_share"])
        for sentence in (slope_sentence, gcarry_sentence):
            if sentence:
                ev_text["growth_autoregressive"].append(sentence)
        any_growth = any(verdict[g] == "plausible" for g in GROWTH_SHAPES)
        verdict["growth_autoregressive"] = (
            "plausible" if any_growth and (A or verdict["trait_autoregressive"] == "plausible")
            else "undetermined" if growth_undetermined else "unlikely")
        strength["growth_autoregressive"] = min(strength["linear_growth"],
                                                strength["autoregressive"])

    # ------------------------------------------------ the choice by BIC
    evidenced = {"occasion_noise": dep_absent, "stable_trait": S and not G,
                 "autoregressive": A and not G, "trait_autoregressive": S and A and not G,
                 "growth_autoregressive": G and AG}
    for fam in GROWTH_SHAPES:
        evidenced[fam] = G and fam == target
    power = _power_rows(ev, th)
    # relevant growth ruled out: the slopes' share interval lies below its threshold
    growth_excluded = bool(np.isfinite(slope[2]) and slope[2] < th["min_slope_share"])
    _choose_by_bic(ev, evidenced, verdict, ev_text, led, th, power, growth_excluded)

    # few waves and much error: richer neighbours hide behind the supported family
    rich = [ev.chosen(k) for k in ("autoregressive", "trait_autoregressive",
                                   "growth_autoregressive") if ev.chosen(k) is not None]
    if rich and t <= th["min_waves_separate"] + 1:
        # the largest error share any carry-over structure finds
        error_share = max(float(np.mean(fit.error_variances())) /
                          float(np.mean(np.diag(fit.sigma))) for fit in rich)
        if np.isfinite(error_share) and 1 - error_share < th["reliability_substantial"]:
            general.append(
                f"Only {led.value('n_waves', int(t))} waves with much measurement error "
                f"(about {led.value('error_free_share', float(1 - error_share))} of the "
                f"variance free of error, below {led.thr('reliability_substantial')}): a "
                "stable part or carry-over added to the supported family is hard to detect, "
                "so read a supported carry-over or growth family as 'this or its richer "
                "neighbour'.")
    # with a singular covariance of the waves (fewer effective units than waves) no
    # structure can be tested against the data: nothing is more than plausible
    if ev.moments.singular:
        _cap_at_plausible(verdict, general,
                          f"The covariance of the waves is singular (about "
                          f"{led.value('n_effective', float(ev.moments.n_eff), 1)} units with data "
                          f"for {led.value('n_waves', int(t))} waves): no family can be "
                          "tested against it, so none is rated above plausible; the "
                          "specifications are still compared by BIC.")
    own: dict[str, list[str]] = {}   # caveats of one family
    _judge_fit(ev, verdict, ev_text, general, led, th, inp, own)
    _power_sentences(power, verdict, ev_text, led, th)
    return _finish(inp, th, led, verdict, strength, ev_text, general, ev,
                   dict(G=G, S=S, A=A, AG=AG, shape=shape_kind, flat=flat), power, own)


def _growth_branch(verdict, strength, ev_text, slope_sentence, gcarry_sentence,
                   shape_sentences, slope, dshare, target, shape, th, t, AG, undetermined):
    """Verdicts when unit-specific growth is evidenced."""
    for fam in STATIONARY:
        verdict[fam] = "unlikely"
        ev_text[fam].append(slope_sentence)
        strength[fam] = 1 - _margin(slope[0], slope[1], slope[2], th["min_slope_share"])
    for fam in GROWTH:
        ev_text[fam].append(slope_sentence)
    for fam in GROWTH_SHAPES:
        ev_text[fam] += shape_sentences
    if gcarry_sentence:
        for fam in GROWTH:
            ev_text[fam].append(gcarry_sentence)
    strength["growth_autoregressive"] = _margin(*dshare, th["min_carry_share"])
    if AG:
        verdict["growth_autoregressive"] = "supported"
        for fam in GROWTH_SHAPES:
            verdict[fam] = "plausible" if fam == target else "unlikely"
    else:
        verdict["growth_autoregressive"] = (
            "undetermined" if undetermined else
            "plausible" if np.isfinite(dshare[2]) and dshare[2] >= th["min_carry_share"]
            else "unlikely")
        for fam in GROWTH_SHAPES:
            verdict[fam] = _shape_verdict(fam, target, shape, th, t)
    for fam in GROWTH_SHAPES:
        strength[fam] = _margin(*slope, th["min_slope_share"])


def _stationary_branch(verdict, strength, ev_text, dep_sentence, slope_sentence,
                       trait_sentence, carry_sentence, share, flat, S, A, dep_clear,
                       dep_absent, few_waves, untested, th):
    """Verdicts of the stationary families when no unit-specific growth is evidenced:
    which of trait / carry-over / both."""
    for fam in STATIONARY:
        ev_text[fam].append(dep_sentence)
        if slope_sentence:
            ev_text[fam].append(slope_sentence)
    for fam in ("stable_trait", "trait_autoregressive"):
        if trait_sentence:
            ev_text[fam].append(trait_sentence)
    for fam in ("autoregressive", "trait_autoregressive"):
        if carry_sentence:
            ev_text[fam].append(carry_sentence)
    share_hi = share[2] if np.isfinite(share[2]) else 1.0
    share_lo = share[1] if np.isfinite(share[1]) else 0.0
    if few_waves or untested:
        for fam in STATIONARY:
            verdict[fam] = "undetermined" if not dep_absent else "unlikely"
    elif not dep_clear and not (S or A):
        for fam in STATIONARY:
            verdict[fam] = "plausible" if not dep_absent else "unlikely"
    elif S and A:
        verdict.update(trait_autoregressive="supported", stable_trait="unlikely",
                       autoregressive="unlikely")
    elif S:
        verdict.update(stable_trait="supported", autoregressive="unlikely",
                       trait_autoregressive="plausible" if (1 - share_lo) >=
                       th["min_carry_share"] and not flat else "unlikely")
    elif A:
        verdict.update(autoregressive="supported", stable_trait="unlikely",
                       trait_autoregressive="plausible" if share_hi >= th["min_stable_share"]
                       else "unlikely")
    else:
        for fam in STATIONARY:
            verdict[fam] = "plausible"
    strength["stable_trait"] = _margin(*share, th["min_stable_share"])
    strength["autoregressive"] = (_margin(1 - share[0], 1 - share[2], 1 - share[1],
                                          th["min_carry_share"]) if not flat else 0.0)
    strength["trait_autoregressive"] = min(strength["stable_trait"],
                                           strength["autoregressive"])


def _mean_shape_kind(shape, led: Citations, th: Thresholds, t: int):
    """'free', 'quadratic', 'linear' or None (no systematic change of the mean)."""
    if shape is None:
        return None, []
    alpha = th["alpha"]
    out = []
    change = led.estimate("mean_change_sd", shape.change_sd, *shape.change_ci)
    p_text = led.p("mean_change_p", shape.change_p)
    out.append(f"Change of the mean over the span, straight-line fit, in within-wave SDs: "
               f"{change}, {p_text} (counts from {led.thr('min_mean_change_sd')}).")
    linear = shape.change_p < alpha and abs(shape.change_sd) >= th["min_mean_change_sd"]
    bend = False
    if np.isfinite(shape.bend_sd):
        bend_text = led.estimate("mean_bend_sd", shape.bend_sd, *shape.bend_ci)
        p_text = led.p("mean_bend_p", shape.bend_p)
        out.append(f"Quadratic bend of the mean in SDs {bend_text}, {p_text} (counts from "
                   f"{led.thr('min_shape_sd')}).")
        bend = shape.bend_p < alpha and abs(shape.bend_sd) >= th["min_shape_sd"]
    free = False
    if t >= 4 and np.isfinite(shape.remainder_chi2):
        rem = led.value("mean_remainder_sd", float(shape.remainder_sd))
        test = led.test("mean_remainder_test", shape.remainder_chi2, shape.remainder_df,
                        shape.remainder_p)
        out.append(f"Largest departure of the mean from its quadratic fit, in SDs, {rem} "
                   f"(counts from {led.thr('min_shape_sd')}); test of the remainder: {test}.")
        free = shape.remainder_p < alpha and shape.remainder_sd >= th["min_shape_sd"]
    kind = "free" if free else "quadratic" if bend else "linear" if linear else None
    led.value("mean_shape", kind or "flat")
    return kind, out


def _shape_verdict(fam: str, target: str, shape, th: Thresholds, t: int) -> str:
    """Verdict of a growth shape when unit-specific growth is evidenced."""
    if fam == target:
        return "supported"
    if shape is None:
        return "undetermined"
    bend_open = np.isfinite(shape.bend_ci[1]) and max(abs(shape.bend_ci[0]),
                                                      abs(shape.bend_ci[1])) >= th["min_shape_sd"]
    if fam == "free_shape_growth":
        if t < 4:
            return "undetermined"
        return "unlikely"  # the remainder was tested and not evidenced (or target is free)
    if fam == "quadratic_growth":
        if target == "free_shape_growth":
            return "unlikely"
        return "plausible" if bend_open else "unlikely"
    # linear
    return "unlikely"


def _identification_caveats(inp: Inputs, led: Citations, th: Thresholds, t: int) -> list[str]:
    out = []
    if t < th["min_waves_separate"]:
        out.append(f"Only {led.value('n_waves', int(t))} waves: a quasi-simplex, a stable "
                   "trait plus carry-over and measurement error cannot all be separated "
                   f"(at least {led.thr('min_waves_separate')} waves are needed).")
    if inp.n_units < th["min_units"]:
        count = led.value('n_units', int(inp.n_units)) if inp.units_disclosed else "fewer"
        out.append(f"Small sample: {count} units (below "
                   f"{led.thr('min_units')}); tests have little power and intervals are wide, "
                   "so a missing 'supported' is weak evidence.")
    if np.isfinite(inp.retention) and inp.retention < th["min_retention"]:
        share = led.value('retention', float(inp.retention)) if inp.retention_disclosed \
            else "a share (withheld by disclosure control)"
        out.append(f"Heavy dropout: {share} of the units, counted from their own first "
                   f"wave, are seen at the end of their follow-up (below "
                   f"{led.thr('min_retention')}); the later waves weigh little.")
    else:
        led.value("retention", float(inp.retention) if inp.retention_disclosed else None)
    if np.isfinite(inp.dropout_smd) and abs(inp.dropout_smd) >= th["max_dropout_smd"]:
        out.append(f"Selective dropout: leavers differ from stayers on the previous score by "
                   f"{led.value('dropout_smd', float(inp.dropout_smd))} SD (from "
                   f"{led.thr('max_dropout_smd')}); the verdicts rest on moments that assume "
                   "dropout is at random given the observed waves.")
    else:
        led.value("dropout_smd", float(inp.dropout_smd) if np.isfinite(inp.dropout_smd)
                  else None)
    if inp.categories < th["min_categories"] and inp.moments_kind.startswith("polychoric"):
        out.append(f"Ordinal measure with {led.value('categories', int(inp.categories))} "
                   f"categories (fewer than {led.thr('min_categories')}): the structures are "
                   "fitted to polychoric correlations, with the mean pairwise count as the "
                   "number of units.")
    elif inp.categories < th["min_categories"]:
        out.append(f"Ordinal measure with {led.value('categories', int(inp.categories))} "
                   f"categories (fewer than {led.thr('min_categories')}): correlations of the "
                   "scores are attenuated; polychoric correlations or an ordinal model are "
                   "safer.")
    else:
        led.value("categories", int(inp.categories))
    gaps = np.diff(inp.times)
    if len(gaps) > 1 and np.min(gaps) > 0:
        ratio = float(np.max(gaps) / np.min(gaps))
        text = led.value("spacing_ratio", ratio)
        if ratio > th["max_spacing_ratio"]:
            out.append(f"Unequal spacing: the longest gap between waves is {text} times the "
                       f"shortest (above {led.thr('max_spacing_ratio')}); carry-over is taken "
                       "per unit of time, which assumes a constant rate.")
    return out


def _choose_by_bic(ev: Evidence, evidenced: dict, verdict: dict, ev_text: dict,
                   led: Citations, th: Thresholds, power: list,
                   growth_excluded: bool = False) -> None:
    """Supported: of the families whose defining part is evidenced (a candidate nested in
    another candidate giving way to it), the one with the best BIC, unless a family it
    does not nest is ahead by more than ``bic_margin``. An unlikely family within the
    margin becomes plausible; a plausible one beyond ``bic_decisive`` unlikely."""
    if not ev.difference:
        return
    best = ev.best
    margin, decisive = th["bic_margin"], th["bic_decisive"]
    for fam in FAMILY_IDS:
        ff = ev.families[fam]
        if fam not in ev.difference:
            continue
        diff = led.value(f"bic_difference_{fam}", float(ev.difference[fam]), 1)
        weight = led.value(f"bic_weight_{fam}", float(ev.weight[fam]))
        where = ("the best BIC of all families" if fam == best else
                 f"BIC {diff} above the best family ({DISPLAY[best]})")
        ev_text[fam].append(f"Best specification by BIC: {ff.chosen.structure.label}, "
                            f"mean {ff.mean_shape}; {where}; BIC weight {weight}.")
    candidates = [f for f in FAMILY_IDS if evidenced.get(f) and f in ev.difference]
    # a candidate nested in another candidate gives way to it: the richer one's extra
    # part is evidenced by its likelihood-ratio test; BIC decides between the others
    candidates = [f for f in candidates if not any(
        g != f and covers(ev.chosen(g).structure, ev.chosen(f).structure)
        and not covers(ev.chosen(f).structure, ev.chosen(g).structure) for g in candidates)]
    chosen = min(candidates, key=lambda f: ev.difference[f]) if candidates else None
    for fam in FAMILY_IDS:
        if verdict.get(fam) == "supported" and fam != chosen:
            verdict[fam] = "plausible"
    if chosen is not None:
        # families clearly ahead by BIC that the chosen one does not nest: a simpler
        # family it nests is already rejected by the likelihood-ratio test of its part,
        # which at large N detects what BIC's ln N penalty still hides
        ahead = [f for f, d in ev.difference.items()
                 if ev.difference[chosen] - d > margin
                 and not covers(ev.chosen(chosen).structure, ev.chosen(f).structure)]
        # random slopes make correlations decay like carry-over: a carry-over family is
        # not supported while a growth family it does not nest is as good by BIC, the
        # growth test could not have seen growth of the estimated size, and the slopes'
        # share interval does not rule relevant growth out
        growth_power = next((r.power for r in power if r.test == "growth"), np.nan)
        close = [g for g in GROWTH if g in ev.difference and not growth_excluded
                 and chosen in ("autoregressive", "trait_autoregressive")
                 and ev.difference[g] - ev.difference[chosen] <= margin
                 and not covers(ev.chosen(chosen).structure, ev.chosen(g).structure)]
        if close and not growth_power >= th["min_power"]:
            verdict[chosen] = "plausible"
            ev_text[chosen].append(
                f"Not told apart from {DISPLAY[close[0]]}, whose BIC is within "
                f"{led.thr('bic_margin')}: the test of unit-specific growth has power "
                f"{led.value('power_growth', float(growth_power))} at these estimates "
                f"(below {led.thr('min_power')}), and "
                "random slopes make correlations decay like carry-over.")
        elif not ahead:
            verdict[chosen] = "supported"
        else:
            rival = min(ahead, key=lambda f: ev.difference[f])
            verdict[chosen] = "plausible"
            ev_text[chosen].append(
                f"Its defining part is evidenced, but {DISPLAY[rival]}, which it does not "
                f"nest, has a BIC lower by more than {led.thr('bic_margin')}: it is not rated "
                "supported.")
    for fam, diff in ev.difference.items():
        if diff <= margin and verdict.get(fam) == "unlikely" \
                and verdict.get("occasion_noise") != "supported":
            verdict[fam] = "plausible"
            ev_text[fam].append(f"Its BIC is within {led.thr('bic_margin')} of the best "
                                "family's, so it stays plausible.")
        elif diff > decisive and verdict.get(fam) == "plausible":
            verdict[fam] = "unlikely"
            ev_text[fam].append(f"Its BIC is more than {led.thr('bic_decisive')} above the "
                                "best family's: very strong evidence against it.")


def comparative_fit(fit: st.Fit, baseline: st.Fit | None, n: float, t: int) -> float:
    """Comparative fit index (Bentler 1990) against the independence model, from the
    Swain-corrected chi-squares."""
    if baseline is None or fit.chi2 is None or baseline.chi2 is None or fit.df <= 0:
        return np.nan
    model = max(fit.chi2 * st.swain_factor(n, t, fit.df) - fit.df, 0.0)
    base = max(baseline.chi2 * st.swain_factor(n, t, baseline.df) - baseline.df, model)
    return 1.0 - model / base if base > 0 else 1.0


def _independence(ev: Evidence) -> st.Fit | None:
    for spec, fit in ev.families["occasion_noise"].options:
        if spec.part("error").kind == "wave" and isinstance(fit, st.Fit):
            return fit
    return None


def _judge_fit(ev: Evidence, verdict: dict, ev_text: dict, general: list, led: Citations,
               th: Thresholds, inp: Inputs, own: dict) -> None:
    """Absolute fit as evidence: RMSEA with its interval, SRMR and CFI of each family's
    chosen specification; a caveat naming the worst reproduced wave pairs; a lowered
    verdict only when every family misfits grossly."""
    m, t = ev.moments, len(inp.times)
    baseline = _independence(ev)
    cfis = {}
    for fam in FAMILY_IDS:
        fit = ev.chosen(fam)
        if fit is None:
            continue
        cfis[fam] = comparative_fit(fit, baseline, m.n_units, t)
        if fit.rmsea is not None:
            led.estimate(f"rmsea_{fam}", fit.rmsea, *[np.nan if v is None else v
                                                       for v in fit.rmsea_ci])
        led.value(f"srmr_{fam}", float(fit.srmr) if fit.srmr is not None else None)
        led.value(f"cfi_{fam}", float(cfis[fam]) if np.isfinite(cfis[fam]) else None)
    labels = inp.wave_labels or tuple(f"{v:g}" for v in inp.times)
    leading = _leading(verdict, ev)
    for fam in FAMILY_IDS:
        fit = ev.chosen(fam)
        if fit is None or verdict.get(fam) not in ("supported", "plausible"):
            continue
        rm_text = (f"RMSEA {_f(fit.rmsea)} [90% CI {_f(fit.rmsea_ci[0])}, "
                   f"{_f(fit.rmsea_ci[1])}]" if fit.rmsea is not None else "RMSEA n/a")
        fit_text = (f"{rm_text}, SRMR {_f(fit.srmr)}, CFI {_f(cfis.get(fam, np.nan))}")
        ev_text[fam].append(f"Fit of its specification: {fit_text} (close up to "
                            f"{led.thr('max_rmsea')} RMSEA and {led.thr('max_srmr')} SRMR).")
        low = fit.rmsea_ci[0]
        misfit = (low is not None and low > th["max_rmsea"]) or \
            (fit.srmr is not None and fit.srmr > th["max_srmr"])
        if fam == leading and misfit:
            resid = st.correlation_residuals(m.sigma, fit.sigma)
            iu = np.triu_indices(t)
            order = np.argsort(-np.abs(resid[iu]), kind="stable")[:3]
            worst = [(labels[iu[0][k]], labels[iu[1][k]], round(float(resid[iu][k]), 2))
                     for k in order]
            led.stats[f"worst_residuals_{fam}"] = [
                {"waves": [a, b], "residual": r} for a, b, r in worst]
            pairs = ", ".join((f"the variance at {a}" if a == b else f"{a} with {b}")
                              + f" ({r:+.2f})" for a, b, r in worst)
            own.setdefault(fam, []).append(
                f"Its structure ({fit.structure.label}) does not reproduce the covariances "
                f"closely ({fit_text}); the wave pairs it reproduces worst (residual "
                f"correlation): {pairs}. Fit that model and inspect its residuals before "
                "relying on it.")
    # gross misfit: every family's chosen specification poor by the RMSEA's interval
    # (an absolute index) and by the CFI (an incremental one)
    gross = [fam for fam in cfis if np.isfinite(cfis[fam]) and cfis[fam] < th["min_cfi"]
             and ev.chosen(fam).rmsea_ci[0] is not None
             and ev.chosen(fam).rmsea_ci[0] > th["gross_rmsea"]]
    if cfis and len(gross) == len(cfis):
        best_cfi = max(cfis.values())
        _cap_at_plausible(verdict, general,
                          f"No family reproduces the covariances even roughly (the best "
                          f"comparative fit index is "
                          f"{led.value('best_cfi', float(best_cfi))}, below "
                          f"{led.thr('min_cfi')}, and every RMSEA interval lies above "
                          f"{led.thr('gross_rmsea')}): no family is rated above plausible; "
                          "a transformation of the measure (e.g. logarithms for scores that "
                          "fan out multiplicatively) or another kind of model may be needed.")


def _cap_at_plausible(verdict: dict, general: list, reason: str) -> None:
    """No family above plausible, with the reason as a caveat of every family."""
    general.append(reason)
    for fam in FAMILY_IDS:
        if verdict.get(fam) == "supported":
            verdict[fam] = "plausible"


# the test whose power decides each family's defining part
DEFINING_TEST = {"stable_trait": "trait", "autoregressive": "carry",
                 "trait_autoregressive": "trait", "linear_growth": "growth",
                 "quadratic_growth": "growth", "free_shape_growth": "growth",
                 "growth_autoregressive": "growth_carry"}
TEST_WORDS = {"dependence": "dependence between waves", "trait": "a stable trait",
              "carry": "carry-over", "growth": "unit-specific growth",
              "growth_carry": "carry-over in the deviations from growth"}


def _power_rows(ev: Evidence, th: Thresholds) -> list[PartPower]:
    """Power of each part test at this panel (Satorra and Saris 1985): noncentrality
    from the richer family's estimated covariance at the panel's response patterns."""
    alpha = th["alpha"]
    rows = []
    names = [name for name in ("dependence", "trait", "carry", "growth", "growth_carry")
             if ev.tests.get(name) is not None]

    def noncentrality(name):
        _, _, _, simple_fit, rich_fit = ev.tests[name]
        try:
            return st.noncentrality(simple_fit.structure, rich_fit, ev.moments) / \
                _test_scaling(ev, simple_fit, rich_fit)
        except (np.linalg.LinAlgError, FloatingPointError, ValueError):
            return None   # no power row for this test: its noncentrality could not be fitted

    with _one_thread():   # the tests' noncentralities, on both threads of the screen
        lams = share(noncentrality, names)
    for name, lam in zip(names, lams):
        _, df, p, simple_fit, rich_fit = ev.tests[name]
        boundary = (PART_TESTS.get(name) or GROWTH_WITHOUT_CARRY)[4]
        if lam is None or not np.isfinite(lam):
            continue
        power, _ = lr_power(lam, df, alpha, boundary)
        lam90 = noncentrality_for_power(0.9, df, alpha, boundary)
        # no effect at the estimates (the richer fit is the simpler one): no unit count
        n90 = (units_needed(ev.moments.n_units * lam90 / lam) if lam > 1e-6 and
               np.isfinite(lam90) and ev.moments.n_units * lam90 / lam < 1e9 else None)
        rows.append(PartPower(name, simple_fit.structure.name, rich_fit.structure.name,
                              int(df), round(float(lam), 3), round(float(power), 3), n90,
                              bool(p < alpha)))
    return rows


def units_needed(units: float) -> int:
    """A unit count for a planned power, rounded up to three significant figures: it
    scales the panel's N by a ratio of estimated noncentralities, so its later digits
    are noise (a small noncentrality is a difference of two fits, each found to 1e-7 in
    chi-square) and would change with the order of the sums."""
    whole = int(np.ceil(units))
    step = 10 ** max(len(str(whole)) - 3, 0)
    return -(-whole // step) * step


def lr_power(lam: float, df: int, alpha: float, boundary: bool = False
             ) -> tuple[float, float]:
    """(power, critical value) of the likelihood-ratio test at level ``alpha`` when the
    statistic is asymptotically noncentral chi-square(df, lam) (Satorra and Saris 1985).
    With a variance on its boundary under the null, the null distribution is the 50:50
    mixture of chi-square(df - 1) and chi-square(df) (Self and Liang 1987; Stram and Lee
    1994), whose upper alpha point is the critical value; with one df the statistic is
    max(0, Z)^2 with Z ~ N(sqrt(lam), 1)."""
    lam = max(float(lam), 0.0)
    critical = _mixture_critical(df, alpha) if boundary else float(special.chdtri(df, alpha))
    if boundary and df == 1:
        return float(dist.norm_sf(np.sqrt(critical) - np.sqrt(lam))), critical
    power = float(1.0 - special.chndtr(critical, df, lam))
    if boundary:   # the same mixture under the alternative, so the power at lam 0 is alpha
        power = 0.5 * (power + float(1.0 - special.chndtr(critical, df - 1, lam)))
    return power, critical


def _mixture_critical(df: int, alpha: float) -> float:
    """The upper alpha point of the 50:50 mixture of chi-square(df - 1) and
    chi-square(df)."""
    if df == 1:
        return float(special.chdtri(1, 2.0 * alpha))
    from scipy.optimize import brentq
    # chi-square(df - 1) lies below chi-square(df): the root is between their df's
    # upper 2 alpha and alpha points
    low, high = float(special.chdtri(df, 2 * alpha)), float(special.chdtri(df, alpha))
    return float(brentq(lambda x: st.chi2_mixture_sf(x, df) - alpha, low, high))


def noncentrality_for_power(power: float, df: int, alpha: float, boundary: bool = False
                            ) -> float:
    """The noncentrality at which ``lr_power`` reaches ``power``."""
    _, critical = lr_power(0.0, df, alpha, boundary)
    if boundary and df == 1:
        return float((np.sqrt(critical) + dist.norm_ppf(power)) ** 2)
    if boundary:
        from scipy.optimize import brentq
        high = float(special.chndtrinc(critical, df - 1, 1.0 - power))
        return float(brentq(lambda lam: lr_power(lam, df, alpha, True)[0] - power, 0.0,
                            max(high, 1e-6)))
    return float(special.chndtrinc(critical, df, 1.0 - power))


def _power_sentences(power: list, verdict: dict, ev_text: dict, led: Citations,
                     th: Thresholds) -> None:
    by_test = {row.test: row for row in power}
    for fam, test in DEFINING_TEST.items():
        row = by_test.get(test)
        if row is None or verdict.get(fam) != "plausible" or row.evidenced:
            continue
        if row.power < th["min_power"]:
            more = (f"; about {row.units_for_power_90} units would give 0.9"
                    if row.units_for_power_90 else "")
            ev_text[fam].append(
                f"The test of {TEST_WORDS[test]} has power "
                f"{led.value(f'power_{test}', float(row.power))} with these data at the "
                f"estimated parameters{more}: it stops at plausible for lack of power, which "
                "is weak evidence against it.")


# ------------------------------------------------------------ measurement, order

def _leading(verdict: dict, ev: Evidence | None) -> str | None:
    """The supported family, else the plausible family with the best BIC."""
    supported = [f for f in FAMILY_IDS if verdict.get(f) == "supported"]
    if supported:
        return supported[0]
    plausible = [f for f in FAMILY_IDS if verdict.get(f) == "plausible"
                 and ev is not None and f in ev.difference]
    return min(plausible, key=lambda f: ev.difference[f]) if plausible else None


def _measurement(inp, th, led, verdict, ev: Evidence | None) -> Measurement:
    if ev is None:
        return Measurement(None, None, None, None, "Too little data to judge measurement "
                           "error.", "none")
    fam = _leading(verdict, ev)
    fit = ev.chosen(fam) if fam is not None else None
    if fam is None or fit is None:
        return Measurement(None, None, None, None,
                           "No family leads, so no reliability is estimated from a structure "
                           "fit; judge measurement error after the candidate models are "
                           "fitted.", "none")
    if fam == "occasion_noise":
        return Measurement(None, None, None, None,
                           "With no dependence between waves, measurement error cannot be "
                           "told apart from occasion-specific variance; a second indicator "
                           "or a retest is needed to estimate reliability.", "none")
    standing = verdict[fam]
    est, lo, hi = _clip(fit.derived(_reliability(fit, inp.times)))
    method = (f"one minus the error variance over the wave's variance, averaged over "
              f"waves, under the {DISPLAY[fam]} structure ({fit.structure.label}; the family "
              f"is {standing})")
    if fam in ("stable_trait",) + GROWTH_SHAPES:
        led.estimate("reliability_lower_bound", est, lo, hi)
        verdict_m = "negligible" if est >= th["reliability_negligible"] else None
        return Measurement(_r(est), _r(lo), _r(hi), verdict_m,
                           f"Under {DISPLAY[fam]}, measurement error and occasion-specific "
                           f"variance are not separable: {_f(est)} is a lower bound on the "
                           "reliability. Fit the measure as latent with error only if a "
                           "second indicator or a known error variance is available.",
                           f"lower bound from the {DISPLAY[fam]} structure", method, True,
                           measurement_label(fam, True))
    led.estimate("reliability", est, lo, hi)
    if est >= th["reliability_negligible"]:
        v, advice = "negligible", "Measurement error is small; observed scores can be used."
    elif est >= th["reliability_substantial"]:
        v, advice = "moderate", ("Model the measure as latent with error (an error variance "
                                 "per wave, or equal across waves) rather than as observed "
                                 "scores.")
    else:
        v, advice = "substantial", ("Model the measure as latent with error: observed-score "
                                    "models will understate stability and carry-over.")
    return Measurement(_r(est), _r(lo), _r(hi), v, advice,
                       f"share of each wave's variance not due to error, averaged over waves, "
                       f"under {DISPLAY[fam]}", method, False, measurement_label(fam, False))


def _finish(inp, th, led, verdict, strength, ev_text, general, ev, flags, power=(),
            own=None) -> Judgement:
    own = own or {}
    families = []
    for fam in FAMILY_IDS:
        v = verdict.get(fam, "undetermined")
        base, width = SCORE_BANDS[v]
        s = float(np.clip(strength.get(fam, 0.5), 0.0, 1.0))
        score = round(base + width * s, 3)
        caveats = list(general) + own.get(fam, [])
        if fam in GROWTH_SHAPES and inp.slope_reliability is not None and v != "supported":
            caveats.append(f"The slope reliability of the per-unit fits "
                           f"({led.value('slope_reliability', float(inp.slope_reliability))})"
                           " is not by itself evidence of growth: carry-over alone makes "
                           "per-unit slopes differ.")
        evidence = tuple(dict.fromkeys(e for e in ev_text[fam] if e))
        chosen = ev.chosen(fam) if ev is not None else None
        if chosen is not None and chosen.weak_identification:
            caveats.append(f"Weakly identified ({chosen.structure.label}): "
                           f"{_weak_identification(chosen)['note']}, so its parameters are "
                           "not pinned down by these data; more waves would separate them.")
        diff = ev.difference.get(fam) if ev is not None else None
        weight = ev.weight.get(fam) if ev is not None else None
        families.append(FamilyVerdict(fam, v, score,
                                      chosen.structure.label if chosen else None,
                                      _r(diff, 1) if diff is not None else None,
                                      _r(weight) if weight is not None else None,
                                      evidence, tuple(caveats)))
    families.sort(key=lambda fv: (VERDICT_ORDER[fv.verdict], -fv.score))
    measurement = _measurement(inp, th, led, verdict, ev)
    # nothing was fitted (no usable covariance): no model can be recommended from it
    next_models = _next_models(families) if ev is not None else []
    labels = {k: STATISTIC_LABELS[k] for k in led.stats if k in STATISTIC_LABELS}
    for key in ("reliability", "reliability_lower_bound"):
        if key in led.stats and measurement.label:
            labels[key] = measurement.label
    basis = {"statistics": led.stats, "labels": labels, "names": dict(FAMILY_NAMES),
             "parts": flags,
             "specifications": _spec_table(ev, inp) if ev is not None else {},
             "thresholds": th.values(), "thresholds_origin": th.origin}
    return Judgement(tuple(families), measurement, tuple(next_models), basis, tuple(power))


def _spec_table(ev: Evidence, inp: Inputs) -> dict:
    """Every family's specifications: fit, BIC and whether chosen, or why skipped."""
    m, t = ev.moments, len(inp.times)
    baseline = _independence(ev)
    out = {}
    for fam, ff in ev.families.items():
        rows = []
        for spec, fit in ff.options:
            if isinstance(fit, st.Skipped):
                rows.append({"specification": spec.label, "skipped": fit.reason})
                continue
            rows.append({
                "specification": spec.label, "chosen": fit is ff.chosen,
                "parameters": {k: _r(v, 4) for k, v in fit.params.items()},
                "chi2": _r(fit.chi2, 2), "df": int(fit.df), "p_value": _r(fit.p_value, 4),
                "bic": _r(fit.bic, 2),
                "bic_vs_chosen": _r(_criterion(fit, m) - _criterion(ff.chosen, m), 2),
                "rmsea": _r(fit.rmsea), "rmsea_ci": [_r(v) for v in fit.rmsea_ci],
                "srmr": _r(fit.srmr), "cfi": _r(comparative_fit(fit, baseline, m.n_units, t)),
                **({"weak_identification": _weak_identification(fit)}
                   if fit.weak_identification else {})})
        out[fam] = {"mean_shape": ff.mean_shape,
                    "bic_difference": _r(ev.difference.get(fam), 2),
                    "bic_weight": _r(ev.weight.get(fam), 4), "specifications": rows}
    return out


def _weak_identification(fit: st.Fit) -> dict:
    flat = fit.weak_identification
    low, high = (_r(v, 4) for v in flat["rho"])
    gap = _r(flat["deviance_gap"], 4)
    return {"rho": [low, high], "deviance_gap": gap,
            "note": f"the likelihood is flat along the carry-over: rho {low:.2f} and "
                    f"{high:.2f} fit within {gap:.2f} in deviance"}


def _next_models(families) -> list[NextModel]:
    picked = [fv for fv in families if fv.verdict == "supported"]
    picked += [fv for fv in families if fv.verdict == "plausible"]
    if not picked:
        picked = [fv for fv in families if fv.verdict == "undetermined"]
    out = []
    for fv in picked[:4]:
        keys = KEY_EVIDENCE.get(fv.family, ())
        chosen = [e for e in fv.evidence if any(e.startswith(k) for k in keys)]
        chosen = chosen or list(fv.evidence[:1])
        why = f"{fv.verdict}: " + " ".join(chosen) if chosen else fv.verdict
        out.append(NextModel(len(out) + 1, fv.family, MODELS[fv.family], why))
    if out and all(m.family != "occasion_noise" for m in out):
        out.append(NextModel(len(out) + 1, "occasion_noise", MODELS["occasion_noise"],
                             "baseline: every candidate should beat a model without "
                             "dependence between waves"))
    return out
