"""Process-family verdicts: which families the data plausibly support, and why.

The verdicts read the ML moments of the waves under MAR (``missingness.em``, or the
same computed here from the response-pattern summary), fit the covariance structure
of each family (``paneldiag.rules.structures``), test the parts that separate the
families, and turn the tests and effect sizes into a verdict per family with the
thresholds of ``thresholds.toml``:

- dependence: the mean correlation of adjacent waves against ``min_correlation``;
- unit-specific growth (non-stationarity): trait + carry-over against growth + carry-
  over (a likelihood-ratio test of the slope variance and its covariance) and the
  slopes' share of the last wave's variance;
- a stable trait: carry-over against trait + carry-over (the flat part a of the lag
  profile r(k) = a + b rho^k), with error variances free so memory beyond one lag is
  judged after allowing for measurement error;
- carry-over: trait against trait + carry-over (the decaying part b rho^k); with rho
  below ``min_rho`` the decaying part is not identified and the profile counts as flat;
- carry-over in the deviations from growth: growth against growth + carry-over;
- the mean's shape: straight-line change, quadratic bend and the remainder after the
  quadratic (orthogonal polynomial contrasts).

A richer family is supported only when its extra part is evidenced (test below
``alpha`` and effect above its threshold); otherwise the simpler family is preferred
and the richer one is at most plausible. Every evidence sentence quotes numbers that
are stored in the ``verdict_basis`` section of the report.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from paneldiag import distributions as dist
from paneldiag.results import Result
from paneldiag.rules import structures as st
from paneldiag.rules.thresholds import Thresholds, default_thresholds

FAMILY_IDS = ("occasion_noise", "stable_trait", "autoregressive", "trait_autoregressive",
              "linear_growth", "quadratic_growth", "free_shape_growth",
              "growth_autoregressive")
DISPLAY = {
    "occasion_noise": "occasion noise", "stable_trait": "stable trait",
    "autoregressive": "carry-over", "trait_autoregressive": "trait + carry-over",
    "linear_growth": "linear growth", "quadratic_growth": "quadratic growth",
    "free_shape_growth": "free-shape growth", "growth_autoregressive": "growth + carry-over",
}
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
VERDICT_ORDER = {"supported": 0, "plausible": 1, "undetermined": 2, "unlikely": 3}
SCORE_BANDS = {"supported": (0.8, 0.2), "plausible": (0.45, 0.3),
               "undetermined": (0.3, 0.0), "unlikely": (0.0, 0.25)}


@dataclass(frozen=True)
class FamilyVerdict(Result):
    family: str
    verdict: str
    score: float
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


@dataclass(frozen=True)
class NextModel(Result):
    rank: int
    family: str
    model: str
    why: str


@dataclass(frozen=True)
class Judgement:
    """Everything the rules produced for one measure."""

    families: tuple[FamilyVerdict, ...]
    measurement: Measurement
    next_models: tuple[NextModel, ...]
    basis: dict


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


def inputs_from_patterns(patterns, em, times, categories: int) -> Inputs:
    """Moments from the EM result; retention and selective dropout from the patterns."""
    obs = patterns.observed
    n = patterns.n
    t = obs.shape[1]
    pair_n = (obs.T * n) @ obs.astype(float)
    first = obs[:, 0]
    base = float(n[first].sum())
    retention = float(n[first & obs[:, -1]].sum()) / base if base > 0 else np.nan
    # the previous score of units that leave after wave s vs units seen again later
    last = np.where(obs.any(axis=1), t - 1 - np.argmax(obs[:, ::-1], axis=1), -1)
    smds, weights = [], []
    sd = np.sqrt(np.diag(em.covariance))
    for s in range(t - 1):  # a loop over waves
        here = obs[:, s]
        leave = here & (last == s)
        stay = here & (last > s)
        n_leave, n_stay = n[leave].sum(), n[stay].sum()
        if n_leave >= 5 and n_stay >= 5 and sd[s] > 0:
            m_leave = (n[leave] * patterns.mean[leave, s]).sum() / n_leave
            m_stay = (n[stay] * patterns.mean[stay, s]).sum() / n_stay
            smds.append((m_leave - m_stay) / sd[s])
            weights.append(n_leave)
    smd = float(np.average(smds, weights=weights)) if smds else np.nan
    return Inputs(mu=np.asarray(em.means, float), sigma=np.asarray(em.covariance, float),
                  pair_n=pair_n, times=np.asarray(times, float), n_units=int(em.n_units),
                  retention=retention, dropout_smd=smd, categories=categories)


# -------------------------------------------------------------------- the fits

@dataclass
class Evidence:
    fits: dict = field(default_factory=dict)
    tests: dict = field(default_factory=dict)
    n_eff: float = np.nan
    shape: st.MeanShape | None = None
    basis_name: str = "time"


def structure_plan(times: np.ndarray, mean_basis: np.ndarray | None = None
                   ) -> dict[str, st.Structure]:
    """The covariance structures the verdicts fit (besides occasion noise), by key: the
    growth structures on the scaled wave times ('growth:time', 'growth_ar:time') and,
    given ``mean_basis`` (the shape of the mean), on it too ('growth:mean', ...)."""
    tb = st.time_basis(times)
    plan = {"stable_trait": st.Structure("stable_trait", trait=True),
            "autoregressive": st.Structure("autoregressive", carry=True),
            "trait_autoregressive": st.Structure("trait_autoregressive", trait=True,
                                                 carry=True),
            "growth:time": st.Structure("growth", basis=tb),
            "growth_ar:time": st.Structure("growth_ar", basis=tb, carry=True)}
    if mean_basis is not None:
        plan["growth:mean"] = st.Structure("growth", basis=mean_basis)
        plan["growth_ar:mean"] = st.Structure("growth_ar", basis=mean_basis, carry=True)
    return plan


def _fit_all(inp: Inputs, alpha: float) -> Evidence:
    t = len(inp.times)
    ev = Evidence()
    iu = np.triu_indices(t, 1)
    ev.n_eff = float(np.mean(inp.pair_n[iu])) if t > 1 else float(inp.n_units)
    s, times, n = inp.sigma, inp.times, ev.n_eff
    n_moments = t * (t + 1) // 2
    ev.fits["occasion_noise"] = st.fit_noise(s, n)
    if t >= 3:
        ev.shape = st.mean_shape(inp.mu, s, inp.pair_n, times)
    # the shape of the mean as a growth basis, when the mean departs from any quadratic
    mb = st.mean_basis(inp.mu, times)
    departs = ev.shape is not None and t >= 4 and np.isfinite(ev.shape.remainder_p) and \
        ev.shape.remainder_p < alpha
    for key, structure in structure_plan(times, mb if departs else None).items():
        if len(structure.names(t)) <= n_moments:
            ev.fits[key] = st.fit_structure(structure, s, times, n)
    # the growth basis that reproduces the covariances better (without carry-over)
    if "growth:mean" in ev.fits and \
            ev.fits["growth:mean"].discrepancy < ev.fits["growth:time"].discrepancy:
        ev.basis_name = "mean"
    for key in ("growth", "growth_ar"):
        if f"{key}:{ev.basis_name}" in ev.fits:
            ev.fits[key] = ev.fits[f"{key}:{ev.basis_name}"]
    f = ev.fits

    def lr(simple, rich, df, boundary=False):
        if simple in f and rich in f:
            return st.likelihood_ratio(f[simple], f[rich], n, df, boundary)
        return None

    for name, (simple, rich, df, boundary) in PART_TESTS.items():
        ev.tests[name] = lr(simple, rich, df, boundary)
    if "growth_ar" not in f:
        ev.tests["growth"] = lr(*GROWTH_WITHOUT_CARRY)
    return ev


# The tests that add a part to a family: (simpler structure, richer structure, df,
# whether the added variance sits on its boundary under the simpler one).
PART_TESTS = {
    "trait": ("autoregressive", "trait_autoregressive", 1, True),
    "carry": ("stable_trait", "trait_autoregressive", 2, False),
    "growth": ("trait_autoregressive", "growth_ar", 2, False),
    "growth_carry": ("growth", "growth_ar", 2, False),
    "dependence": ("occasion_noise", "stable_trait", 1, True),
}
# the growth test when growth + carry-over cannot be fitted (too few moments)
GROWTH_WITHOUT_CARRY = ("stable_trait", "growth", 2, False)


def _one_thread():
    """Small-matrix work runs many times faster on one BLAS thread than on several
    competing ones; limit the pool while fitting (a no-op without threadpoolctl)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover
        import contextlib
        return contextlib.nullcontext()
    return threadpool_limits(limits=1)


# share functions of the fitted parameters (for the delta method)
def _stable_share(p):
    a, b = p["trait_var"], p["carry_var"]
    return a / (a + b) if a + b > 0 else np.nan


def _slope_share_fn(fit: st.Fit, times: np.ndarray):
    lam_last = float(fit.structure.basis[-1])

    def fn(p):
        sigma = st.implied(fit.structure, list(p.values()), times)
        return p["slope_var"] * lam_last ** 2 / sigma[-1, -1]
    return fn


def _dev_carry_share_fn(n_waves: int):
    def fn(p):
        e = p["error_var"]
        return p["carry_var"] / (p["carry_var"] + e)
    return fn


def _reliability_fn(fit: st.Fit, times: np.ndarray):
    def fn(p):
        sigma = st.implied(fit.structure, list(p.values()), times)
        e = p["error_var"]
        return float(np.mean(1.0 - e / np.diag(sigma)))
    return fn


def _clip(triple, low=0.0, high=1.0):
    """An estimate and its interval kept inside the natural range of a share."""
    return tuple(float(np.clip(v, low, high)) if np.isfinite(v) else v for v in triple)


def _phi(z):
    return float(dist.norm_cdf(z)) if np.isfinite(z) else 0.5


def _margin(est, lo, hi, threshold):
    """How clearly an estimate clears a threshold, in [0, 1] (0.5 = on it)."""
    se = (hi - lo) / (2 * st.Z95) if np.isfinite(lo) and np.isfinite(hi) else np.nan
    if not np.isfinite(est):
        return 0.5
    if not np.isfinite(se) or se <= 0:
        return 1.0 if est >= threshold else 0.0
    return _phi((est - threshold) / se)


# --------------------------------------------------------------------- the rules

def judge(inp: Inputs, thresholds: Thresholds | None = None) -> Judgement:
    """The verdicts, measurement judgement and next models from the panel's moments."""
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

    with _one_thread():
        ev = _fit_all(inp, alpha)
    f, tests, shape = ev.fits, ev.tests, ev.shape
    led.value("n_effective", float(ev.n_eff), 1)

    # ------------------------------------------------ caveats about identification
    general += _identification_caveats(inp, led, th, t)

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
    def part_test(key, label):
        res = tests.get(key)
        if res is None:
            return None, None
        stat, p = res
        df = {"trait": 1, "carry": 2, "growth": 2, "growth_carry": 2, "dependence": 1}[key]
        return p, led.test(f"{key}_test", stat, df, p)

    p_growth, growth_test_text = part_test("growth", "growth")
    p_trait, trait_test_text = part_test("trait", "trait")
    p_carry, carry_test_text = part_test("carry", "carry")
    p_gcarry, gcarry_test_text = part_test("growth_carry", "growth carry")

    # growth: slopes' share of the last wave's variance
    G = False
    slope_sentence = None
    slope = (np.nan, np.nan, np.nan)
    gfit = f.get("growth_ar") or f.get("growth")
    if gfit is not None:
        slope = _clip(gfit.derived(_slope_share_fn(gfit, inp.times)))
        slope_text = led.estimate("slope_share", *slope)
        basis_words = ("the shape of the mean" if ev.basis_name == "mean"
                       else "the wave times")
        led.value("growth_basis", ev.basis_name)
        if p_growth is not None:
            slope_sentence = (f"Unit-specific growth (loadings from {basis_words}): share of "
                              f"the last wave's variance from unit slopes {slope_text} "
                              f"(counts from {led.thr('min_slope_share')}); test against "
                              f"a stationary trait + carry-over structure: {growth_test_text} "
                              f"(threshold {led.thr('alpha')}).")
            G = p_growth < alpha and slope[0] >= th["min_slope_share"]
    growth_undetermined = p_growth is None

    # stable trait and carry-over (stationary structure)
    ta = f.get("trait_autoregressive")
    S = A = False
    share = rho = (np.nan, np.nan, np.nan)
    flat = False
    trait_sentence = carry_sentence = None
    if ta is not None:
        share = _clip(ta.derived(_stable_share))
        rho = _clip(ta.derived(lambda p: p["rho"]))
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
            trait_sentence = (f"Stable share a/(a+b) of the lag profile r(k) = a + b rho^k, "
                              f"error variance free: {share_text} (counts from "
                              f"{led.thr('min_stable_share')}); test of the stable part: "
                              f"{trait_test_text} (threshold {led.thr('alpha')}).")
            S = p_trait < alpha and share[0] >= th["min_stable_share"]
        elif "stable_trait" in f and tests.get("dependence") is not None:
            tfit = f["stable_trait"]
            icc = _clip(tfit.derived(lambda p: p["trait_var"] / (
                p["trait_var"] + p["error_var"])))
            share = icc
            icc_text = led.estimate("trait_share", *icc)
            _, dep_test_text = part_test("dependence", "dependence")
            trait_sentence = (f"No decaying part evidenced, so the dependence is flat: the "
                              f"stable trait's share of each wave's variance is {icc_text} "
                              f"(counts from {led.thr('min_stable_share')}); test against "
                              f"occasion noise: {dep_test_text} (threshold {led.thr('alpha')}).")
            span = float(inp.times[-1] - inp.times[0])
            decline = ta.derived(lambda p: p["carry_var"] * (p["rho"] - p["rho"] ** span)
                                 / (p["trait_var"] + p["carry_var"] * p["rho"]))
            decline_text = led.estimate("profile_decline", *decline)
            trait_sentence += (f" Decline of the lag profile from the shortest to the longest "
                               f"distance, as a share of r at the shortest: {decline_text} "
                               f"(flat when its upper limit is below {led.thr('max_flat_decline')}).")
            if np.isfinite(decline[2]):
                flat_shown = decline[2] < th["max_flat_decline"]
            else:  # the decaying part sits on its boundary: judge the point estimate
                flat_shown = np.isfinite(decline[0]) and decline[0] < th["max_flat_decline"] / 2
            S = (tests["dependence"][1] < alpha and dep_clear and flat_shown
                 and icc[0] >= th["min_stable_share"])

    # carry-over in the deviations from growth
    AG = False
    gcarry_sentence = None
    ga = f.get("growth_ar")
    grho = dshare = (np.nan, np.nan, np.nan)
    if ga is not None and p_gcarry is not None:
        grho = _clip(ga.derived(lambda p: p["rho"]))
        dshare = _clip(ga.derived(_dev_carry_share_fn(t)))
        grho_text = led.estimate("growth_carry_rho", *grho)
        dshare_text = led.estimate("growth_carry_share", *dshare)
        gcarry_sentence = (f"Carry-over in the deviations from growth: rho {grho_text}, "
                           f"carried-over share of the deviations {dshare_text} (counts from "
                           f"{led.thr('min_carry_share')}); test against growth with "
                           f"independent deviations: {gcarry_test_text} (threshold "
                           f"{led.thr('alpha')}).")
        AG = (p_gcarry < alpha and grho[0] >= th["min_rho"]
              and dshare[0] >= th["min_carry_share"])

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

    # ------------------------------------------------ verdicts
    def fit_ok(key):
        fit = f.get(key)
        if fit is None or fit.rmsea is None:
            return True, None
        ok = fit.rmsea <= th["max_rmsea"]
        text = led.value(f"rmsea_{key}", float(fit.rmsea))
        return ok, (f"Root mean square error of approximation of its structure {text} "
                    f"(acceptable up to {led.thr('max_rmsea')}).")

    stationary_fams = ("stable_trait", "autoregressive", "trait_autoregressive")
    growth_fams = ("linear_growth", "quadratic_growth", "free_shape_growth")
    few_waves = t < th["min_waves_separate"]

    # occasion noise
    ev_text["occasion_noise"].append(dep_sentence)
    if dep_absent:  # no dependence to speak of: nothing else can be evidenced
        verdict["occasion_noise"] = "supported"
        G = False
    elif G:
        verdict["occasion_noise"] = "unlikely"
    elif dep_clear:
        verdict["occasion_noise"] = "unlikely"
    else:
        verdict["occasion_noise"] = "plausible"
    strength["occasion_noise"] = 1 - _margin(r1, r1_lo, r1_hi, min_r)

    if verdict["occasion_noise"] == "supported":
        for fam in stationary_fams + growth_fams + ("growth_autoregressive",):
            verdict[fam] = "unlikely"
            ev_text[fam].append(dep_sentence)
            strength[fam] = _margin(r1, r1_lo, r1_hi, min_r)
    elif G:
        for fam in stationary_fams:
            verdict[fam] = "unlikely"
            ev_text[fam].append(slope_sentence)
            strength[fam] = 1 - _margin(slope[0], slope[1], slope[2], th["min_slope_share"])
        target = {"free": "free_shape_growth", "quadratic": "quadratic_growth"}.get(
            shape_kind, "linear_growth")
        for fam in growth_fams + ("growth_autoregressive",):
            ev_text[fam].append(slope_sentence)
        for fam in growth_fams:
            ev_text[fam] += shape_sentences
        if gcarry_sentence:
            ev_text["growth_autoregressive"].append(gcarry_sentence)
            for fam in growth_fams:
                ev_text[fam].append(gcarry_sentence)
        if AG:
            verdict["growth_autoregressive"] = "supported"
            strength["growth_autoregressive"] = _margin(*dshare, th["min_carry_share"])
            for fam in growth_fams:
                verdict[fam] = "plausible" if fam == target else "unlikely"
        else:
            if growth_undetermined or p_gcarry is None:
                verdict["growth_autoregressive"] = "undetermined"
            else:
                verdict["growth_autoregressive"] = (
                    "plausible" if np.isfinite(dshare[2]) and dshare[2] >= th["min_carry_share"]
                    else "unlikely")
            strength["growth_autoregressive"] = _margin(*dshare, th["min_carry_share"])
            for fam in growth_fams:
                verdict[fam] = _shape_verdict(fam, target, shape, th, t)
        for fam in growth_fams:
            strength[fam] = _margin(*slope, th["min_slope_share"])
    else:
        # stationary branch: which of trait / carry-over / both
        for fam in stationary_fams:
            ev_text[fam].append(dep_sentence)
            if slope_sentence:
                ev_text[fam].append(slope_sentence)
        for fam in ("stable_trait", "trait_autoregressive"):
            if trait_sentence:
                ev_text[fam].append(trait_sentence)
        for fam in ("autoregressive", "trait_autoregressive"):
            if carry_sentence:
                ev_text[fam].append(carry_sentence)
        if few_waves or ta is None or p_trait is None or p_carry is None:
            for fam in stationary_fams:
                verdict[fam] = "undetermined" if not dep_absent else "unlikely"
        elif not dep_clear and not (S or A):
            for fam in stationary_fams:
                verdict[fam] = "plausible" if not dep_absent else "unlikely"
        else:
            share_hi = share[2] if np.isfinite(share[2]) else 1.0
            share_lo = share[1] if np.isfinite(share[1]) else 0.0
            if S and A:
                verdict.update(trait_autoregressive="supported", stable_trait="unlikely",
                               autoregressive="unlikely")
            elif S:
                verdict["stable_trait"] = "supported"
                verdict["autoregressive"] = "unlikely"
                verdict["trait_autoregressive"] = (
                    "plausible" if (1 - share_lo) >= th["min_carry_share"] and not flat
                    else "unlikely")
            elif A:
                verdict["autoregressive"] = "supported"
                verdict["stable_trait"] = "unlikely"
                verdict["trait_autoregressive"] = (
                    "plausible" if share_hi >= th["min_stable_share"] else "unlikely")
            else:
                for fam in stationary_fams:
                    verdict[fam] = "plausible"
        strength["stable_trait"] = _margin(*share, th["min_stable_share"])
        strength["autoregressive"] = (_margin(1 - share[0], 1 - share[2], 1 - share[1],
                                              th["min_carry_share"]) if not flat else 0.0)
        strength["trait_autoregressive"] = min(strength["stable_trait"],
                                               strength["autoregressive"])
        # growth families: at most plausible (no unit-specific growth evidenced)
        target = {"free": "free_shape_growth", "quadratic": "quadratic_growth",
                  "linear": "linear_growth"}.get(shape_kind)
        for fam in growth_fams:
            if slope_sentence:
                ev_text[fam].append(slope_sentence)
            ev_text[fam] += shape_sentences
            if fam == target:
                verdict[fam] = "plausible"
            elif (fam == "linear_growth" and target is None and p_growth is not None
                  and p_growth < alpha and not dep_absent):
                verdict[fam] = "plausible"
            elif growth_undetermined:
                verdict[fam] = "undetermined"
            else:
                verdict[fam] = "unlikely"
            strength[fam] = _margin(*slope, th["min_slope_share"])
        if slope_sentence:
            ev_text["growth_autoregressive"].append(slope_sentence)
        if carry_sentence:
            ev_text["growth_autoregressive"].append(carry_sentence)
        any_growth = any(verdict[g] == "plausible" for g in growth_fams)
        verdict["growth_autoregressive"] = (
            "plausible" if any_growth and (A or verdict["trait_autoregressive"] == "plausible")
            else "undetermined" if growth_undetermined else "unlikely")
        strength["growth_autoregressive"] = min(strength["linear_growth"],
                                                strength["autoregressive"])

    # few waves and much error: richer neighbours hide behind the supported family
    rich = [f[k] for k in ("autoregressive", "trait_autoregressive", "growth_ar") if k in f]
    if rich and t <= th["min_waves_separate"] + 1:
        # the largest error share any carry-over structure finds (the quasi-simplex's)
        share = max(fit.params["error_var"] / float(np.mean(np.diag(fit.sigma)))
                    for fit in rich)
        if np.isfinite(share) and 1 - share < th["reliability_substantial"]:
            general.append(
                f"Only {led.value('n_waves', int(t))} waves with much measurement error "
                f"(about {led.value('error_free_share', float(1 - share))} of the variance "
                f"free of error, below {led.thr('reliability_substantial')}): a stable part "
                "or carry-over added to the supported family is hard to detect, so read a "
                "supported carry-over or growth family as 'this or its richer neighbour'.")
    # with a singular covariance of the waves (fewer effective units than waves) no
    # structure can be tested against the data: nothing is more than plausible
    if f["occasion_noise"].chi2 is None:
        general.append(f"The covariance of the waves is singular (about "
                       f"{led.value('n_effective', float(ev.n_eff), 1)} units with data for "
                       f"{led.value('n_waves', int(t))} waves): no family can be tested "
                       "against it, so none is rated above plausible.")
        for fam in FAMILY_IDS:
            if verdict.get(fam) == "supported":
                verdict[fam] = "plausible"
    # a supported family must also reproduce the covariances acceptably
    cov_key = {"linear_growth": "growth", "quadratic_growth": "growth",
               "free_shape_growth": "growth", "growth_autoregressive": "growth_ar"}
    for fam in FAMILY_IDS:
        if verdict.get(fam) == "supported":
            ok, text = fit_ok(cov_key.get(fam, fam))
            if text:
                ev_text[fam].append(text)
            if not ok:
                verdict[fam] = "plausible"
                ev_text[fam].append("No family here reproduces the covariances closely: the "
                                    "verdict is lowered from supported to plausible.")
    return _finish(inp, th, led, verdict, strength, ev_text, general, ev,
                   dict(G=G, S=S, A=A, AG=AG, shape=shape_kind, flat=flat))


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
        out.append(f"Heavy dropout: {led.value('retention', float(inp.retention))} of the "
                   f"first wave is seen at the last (below {led.thr('min_retention')}); the "
                   "later waves weigh little.")
    else:
        led.value("retention", float(inp.retention))
    if np.isfinite(inp.dropout_smd) and abs(inp.dropout_smd) >= th["max_dropout_smd"]:
        out.append(f"Selective dropout: leavers differ from stayers on the previous score by "
                   f"{led.value('dropout_smd', float(inp.dropout_smd))} SD (from "
                   f"{led.thr('max_dropout_smd')}); the verdicts rest on moments that assume "
                   "dropout is at random given the observed waves.")
    else:
        led.value("dropout_smd", float(inp.dropout_smd) if np.isfinite(inp.dropout_smd)
                  else None)
    if inp.categories < th["min_categories"]:
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


# ------------------------------------------------------------ measurement, order

def _measurement(inp, th, led, verdict, ev: Evidence | None) -> Measurement:
    if ev is None:
        return Measurement(None, None, None, None, "Too little data to judge measurement "
                           "error.", "none")
    source = None
    for fam, key in (("trait_autoregressive", "trait_autoregressive"),
                     ("autoregressive", "autoregressive"),
                     ("growth_autoregressive", "growth_ar")):
        if verdict.get(fam) == "supported" and key in ev.fits:
            source = (fam, ev.fits[key])
            break
    if source is None:
        if verdict.get("occasion_noise") == "supported":
            return Measurement(None, None, None, None,
                               "With no dependence between waves, measurement error cannot be "
                               "told apart from occasion-specific variance; a second indicator "
                               "or a retest is needed to estimate reliability.", "none")
        lower_fit = None
        for fam, key in (("stable_trait", "stable_trait"), ("linear_growth", "growth"),
                         ("quadratic_growth", "growth"), ("free_shape_growth", "growth")):
            if verdict.get(fam) == "supported" and key in ev.fits:
                lower_fit = (fam, ev.fits[key])
        if lower_fit is None:
            return Measurement(None, None, None, None,
                               "No family is supported, so reliability is not estimated; "
                               "judge measurement error after the candidate models are "
                               "fitted.", "none")
        fam, fit = lower_fit
        est, lo, hi = _clip(fit.derived(_reliability_fn(fit, inp.times)))
        led.estimate("reliability_lower_bound", est, lo, hi)
        verdict_m = "negligible" if est >= th["reliability_negligible"] else None
        return Measurement(_r(est), _r(lo), _r(hi), verdict_m,
                           f"Under {DISPLAY[fam]}, measurement error and occasion-specific "
                           f"variance are not separable: {_f(est)} is a lower bound on the "
                           "reliability. Fit the measure as latent with error only if a "
                           "second indicator or a known error variance is available.",
                           f"lower bound from the {DISPLAY[fam]} structure")
    fam, fit = source
    est, lo, hi = _clip(fit.derived(_reliability_fn(fit, inp.times)))
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
                       f"under {DISPLAY[fam]}")


def _finish(inp, th, led, verdict, strength, ev_text, general, ev, flags) -> Judgement:
    families = []
    for fam in FAMILY_IDS:
        v = verdict.get(fam, "undetermined")
        base, width = SCORE_BANDS[v]
        s = float(np.clip(strength.get(fam, 0.5), 0.0, 1.0))
        score = round(base + width * s, 3)
        caveats = list(general)
        if fam in ("linear_growth", "quadratic_growth", "free_shape_growth") and \
                inp.slope_reliability is not None and v != "supported":
            caveats.append(f"The slope reliability of the per-unit fits "
                           f"({led.value('slope_reliability', float(inp.slope_reliability))})"
                           " is not by itself evidence of growth: carry-over alone makes "
                           "per-unit slopes differ.")
        evidence = tuple(dict.fromkeys(e for e in ev_text[fam] if e))
        families.append(FamilyVerdict(fam, v, score, evidence, tuple(caveats)))
    families.sort(key=lambda fv: (VERDICT_ORDER[fv.verdict], -fv.score))
    measurement = _measurement(inp, th, led, verdict, ev)
    next_models = _next_models(families)
    basis = {"statistics": led.stats, "parts": flags,
             "fits": _fit_table(ev) if ev is not None else {},
             "thresholds": th.values(), "thresholds_origin": th.origin}
    return Judgement(tuple(families), measurement, tuple(next_models), basis)


def _fit_table(ev: Evidence) -> dict:
    out = {}
    for key in ("occasion_noise", "stable_trait", "autoregressive", "trait_autoregressive",
                "growth", "growth_ar"):
        fit = ev.fits.get(key)
        if fit is None:
            continue
        out[key] = {"chi2": _r(fit.chi2, 1), "df": int(fit.df), "rmsea": _r(fit.rmsea),
                    "parameters": {k: _r(v, 4) for k, v in fit.params.items()}}
    return out


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
