"""Survey weights (--weight): every estimate weighted, counts left as counts.

Sources of the checks:
- the replicated panel: a unit of integer weight c is the same as c copies of the unit
  (ids of copies made unique) -- a simulation whose truth is exact by construction: a
  weighted estimator that treats weights as frequencies must give the copies' estimate;
- statsmodels.stats.weightstats.DescrStatsW (reference library) for weighted means, SDs
  and correlations;
- statsmodels GLM(family=Binomial, freq_weights=...) (reference library) for the
  weighted dropout logit;
- all weights 1: the unweighted screen (must agree to 1e-10, rounding only).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import paneldiag
from conftest import json_leaves
from paneldiag.diagnostics.attrition import dropout_model
from paneldiag.diagnostics.missingness import em_moments
from paneldiag.panel import Panel
from paneldiag.rules.verdicts import inputs_from_patterns, moments_of
from paneldiag.rules.specs import family_specs
from paneldiag.summaries import Chunk, relative_weights, summarise
from paneldiag.summaries.contingency import PairwiseTables
from paneldiag.summaries.moments import WaveMoments
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries.patterns import PatternMoments
from paneldiag.summaries.trajectories import TrajectorySummary

N_UNITS, N_WAVES = 240, 5


def simulated(seed: int = 3, n: int = N_UNITS, t: int = N_WAVES) -> np.ndarray:
    """Stable trait + carry-over + noise, dropout more likely at low scores, and some
    skipped waves (a process with known structure; the checks compare estimators)."""
    rng = np.random.default_rng(seed)
    trait = rng.normal(0, 1, n)
    state = rng.normal(0, 1, n)
    values = np.empty((n, t))
    for w in range(t):  # a loop over waves
        state = 0.6 * state + rng.normal(0, 0.8, n)
        values[:, w] = 5 + 0.1 * w + trait + state + rng.normal(0, 0.5, n)
    gone = np.zeros(n, dtype=bool)
    for w in range(1, t):
        gone |= rng.random(n) < 0.08 + 0.05 * (values[:, w - 1] < 5)
        values[gone, w] = np.nan
    values[rng.random((n, t)) < 0.05] = np.nan
    values[:, 0] = np.where(np.isnan(values[:, 0]), 5.0 + trait, values[:, 0])
    return values


def mean_one_weights(n: int = N_UNITS) -> np.ndarray:
    """Integer weights 0, 1, 2 averaging exactly 1: rescaling leaves them as they are,
    so the weight sums equal the replicated panel's counts."""
    return np.resize([0.0, 2.0, 1.0, 1.0, 2.0, 0.0], n)


def integer_weights(n: int = N_UNITS) -> np.ndarray:
    return np.resize([1.0, 3.0, 2.0, 1.0, 2.0], n)


def replicated(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    return np.repeat(values, weights.astype(int), axis=0)


def panel_of(values, weights=None) -> Panel:
    return Panel(unit_ids=np.arange(len(values)),
                 wave_labels=tuple(str(2015 + w) for w in range(values.shape[1])),
                 wave_times=np.arange(float(values.shape[1])), values={"y": values},
                 weights=weights)


KINDS = [WaveMoments, PairwiseMoments, PatternMoments, TrajectorySummary, PairwiseTables]


def summaries_of(values, weights=None, chunk_units=1 << 18):
    return summarise(panel_of(values, weights), "y", KINDS, chunk_units=chunk_units)


# --------------------------------------------------------------- the summaries

@pytest.mark.parametrize("chunk", [7, 50])
def test_weighted_summaries_merge_exactly(chunk):
    """Summarised in chunks and merged equals one chunk (exact algebra; tolerance:
    rounding of the pairwise updates, relative 1e-10)."""
    values = simulated()
    values[:, 2] = np.round(values[:, 2])       # an integer wave for the tables
    weights = np.random.default_rng(1).uniform(0.2, 3.0, len(values))
    one, many = summaries_of(values, weights), summaries_of(values, weights, chunk)
    for kind, fields in ((WaveMoments, ("n", "w", "mean", "m2", "m3", "m4", "w_at_min")),
                         (PairwiseMoments, ("n", "w", "sum_x", "sum_xx", "sum_xy")),
                         (PatternMoments, ("n", "w", "mean", "m2", "replicate_n",
                                           "replicate_w")),
                         (TrajectorySummary, ("n", "w", "lin_mean", "lin_m2", "rss",
                                              "unit_mean", "within_ss"))):
        merged = many[kind]
        if kind is PairwiseMoments:   # sums around each summary's own shift
            merged = merged.reshift(one[kind].shift)
        for name in fields:
            np.testing.assert_allclose(getattr(merged, name), getattr(one[kind], name),
                                       rtol=1e-10, atol=1e-9, err_msg=f"{kind.__name__}.{name}")
    # unit counts stay counts
    assert one[PatternMoments].n.sum() == len(values)
    assert one[PatternMoments].w.sum() == pytest.approx(len(values), rel=1e-12)


def test_weighted_tables_equal_the_replicated_tables():
    """Weighted contingency tables of integer weights are the copies' counts (the
    replicated panel; exact)."""
    values = np.round(simulated())
    weights = mean_one_weights()
    mine = summaries_of(values, weights)[PairwiseTables]
    theirs = summaries_of(replicated(values, weights))[PairwiseTables]
    lo = min(mine.low, theirs.low)
    hi = max(mine.low + mine.n_levels, theirs.low + theirs.n_levels) - 1
    np.testing.assert_array_equal(mine._widened(lo, hi, mine.weighted).sum(axis=0),
                                  theirs._widened(lo, hi).sum(axis=0))


@pytest.mark.parametrize("make_weights", [integer_weights, mean_one_weights])
def test_integer_weights_equal_replicated_units(make_weights):
    """Point estimates with integer weights equal those of the replicated panel
    (source: the replicated panel; tolerance 1e-9 relative: summation order only)."""
    values, weights = simulated(), make_weights()
    mine, theirs = summaries_of(values, weights), summaries_of(replicated(values, weights))
    a, b = mine[WaveMoments], theirs[WaveMoments]
    np.testing.assert_allclose(a.mean, b.mean, rtol=1e-12)
    np.testing.assert_allclose(a.m2 / a.mass, b.m2 / b.n, rtol=1e-10)   # ML variances
    np.testing.assert_allclose(mine[PairwiseMoments].correlation(),
                               theirs[PairwiseMoments].correlation(), rtol=1e-10)
    em_w, em_r = em_moments(mine[PatternMoments]), em_moments(theirs[PatternMoments])
    np.testing.assert_allclose(em_w.means, em_r.means, rtol=1e-8)   # EM stops at 1e-8...
    np.testing.assert_allclose(em_w.covariance, em_r.covariance, rtol=1e-7, atol=1e-9)
    # ... from the same start over the same moments: equal up to its tolerance
    scale = mine[PatternMoments].mass.sum() / theirs[PatternMoments].n.sum()
    assert em_w.loglik == pytest.approx(scale * em_r.loglik, rel=1e-8)
    # the covariance structures behind the verdicts: the discrepancy (-2 log-likelihood
    # per unit of weight, against the saturated model) of every specification
    inputs = [inputs_from_patterns(s[PatternMoments], em, np.arange(5.0), 10 ** 6)
              for s, em in ((mine, em_w), (theirs, em_r))]
    fits = [moments_of(inp) for inp in inputs]
    for family, plan in family_specs(np.arange(5.0), None).items():
        for spec in plan[:2]:
            one, two = fits[0].fit(spec), fits[1].fit(spec)
            if hasattr(one, "discrepancy"):
                assert one.discrepancy == pytest.approx(two.discrepancy, rel=1e-5,
                                                        abs=1e-8), family   # optimiser
    assert inputs[0].retention == pytest.approx(inputs[1].retention, rel=1e-12)
    assert inputs[0].dropout_smd == pytest.approx(inputs[1].dropout_smd, rel=1e-8)


def test_dropout_model_equals_replicated_units():
    """The weighted discrete-time dropout logit gives the copies' coefficients (the
    replicated panel; Newton-Raphson converged to 1e-10, so 1e-7 relative). The
    weights average 1: the score is standardised with divisor sum(w) - 1, which is the
    copies' n - 1 only then (docs/design.md, "Weights")."""
    values, weights = simulated(), mean_one_weights()
    groups = np.arange(len(values)) % 20
    mine = dropout_model(values, list("abcde"), weights=relative_weights(weights),
                         replicate=groups)
    theirs = dropout_model(replicated(values, weights), list("abcde"))
    assert mine.fitted and theirs.fitted
    assert mine.odds_ratio_per_sd == pytest.approx(theirs.odds_ratio_per_sd, rel=1e-7)
    assert mine.n_units == (weights > 0).sum()   # units, not a weight sum
    assert mine.ci_low < mine.odds_ratio_per_sd < mine.ci_high   # jackknife interval


def test_dropout_model_matches_statsmodels_glm():
    """Weighted logit with one intercept per wave and the standardised score, against
    statsmodels GLM(Binomial, freq_weights) on the person-period rows (reference library;
    tolerance 1e-6 relative: both iterate to convergence)."""
    import statsmodels.api as sm
    values = simulated(seed=8)
    weights = relative_weights(np.random.default_rng(2).uniform(0.3, 2.5, len(values)))
    fit = dropout_model(values, list("abcde"), weights=weights,
                        replicate=np.arange(len(values)) % 20)
    seen = ~np.isnan(values)
    last = values.shape[1] - 1 - np.argmax(seen[:, ::-1], axis=1)
    rows, ys, zs, ws = [], [], [], []
    for s in range(values.shape[1] - 1):
        at = np.flatnonzero(seen[:, s])
        x, w = values[at, s], weights[at]
        mean = np.average(x, weights=w)
        sd = np.sqrt(np.dot(w, (x - mean) ** 2) / (w.sum() - 1))
        rows += [s] * len(at)
        ys.append(last[at] == s)
        zs.append((x - mean) / sd)
        ws.append(w)
    wave = pd.get_dummies(pd.Series(rows), dtype=float).to_numpy()
    design = np.column_stack([wave, np.concatenate(zs)])
    glm = sm.GLM(np.concatenate(ys).astype(float), design, family=sm.families.Binomial(),
                 freq_weights=np.concatenate(ws)).fit(tol=1e-12)
    assert fit.odds_ratio_per_sd == pytest.approx(np.exp(glm.params[-1]), rel=1e-6)


def test_weighted_correlation_matches_descrstatsw():
    """Pairwise weighted Pearson r on complete data against DescrStatsW.corrcoef, means
    and SDs against DescrStatsW (reference library; 1e-10: rounding only)."""
    from statsmodels.stats.weightstats import DescrStatsW
    rng = np.random.default_rng(4)
    values = rng.multivariate_normal([1, 2, 3], [[1, .5, .3], [.5, 1, .5], [.3, .5, 1]], 300)
    weights = relative_weights(rng.uniform(0.2, 4.0, 300))
    s = summaries_of(values, weights, chunk_units=64)
    ref = DescrStatsW(values, weights=weights, ddof=1)
    np.testing.assert_allclose(s[PairwiseMoments].correlation(), ref.corrcoef, rtol=1e-10)
    np.testing.assert_allclose(s[WaveMoments].mean, ref.mean, rtol=1e-12)
    np.testing.assert_allclose(s[PairwiseMoments].covariance(), ref.cov, rtol=1e-10)


# --------------------------------------------------------------- through the screen

def _frame(values, weights) -> pd.DataFrame:
    n, t = values.shape
    return pd.DataFrame({"household": np.repeat([f"H{i:04d}" for i in range(n)], t),
                         "year": np.tile(np.arange(2015, 2015 + t), n),
                         "trust": values.reshape(-1), "weight": np.repeat(weights, t)})


def _figures(report: dict) -> dict:
    """Point estimates the replication must reproduce (counts and intervals excluded:
    copies are units of their own, and their replicate groups differ)."""
    g = report["growth"]
    return {
        "mean": [r["mean"] for r in report["wave_profile"]],
        "sd": [r["sd"] for r in report["wave_profile"]],
        "retained": [r["retained_share"] for r in report["attrition"]["retention"]],
        "pearson": report["correlation"]["methods"]["pearson_pairwise"]["matrix"],
        "spearman": report["correlation"]["methods"]["spearman"]["matrix"],
        "em_means": report["missingness"]["em"]["means"],
        "em_cov": report["missingness"]["em"]["covariance"],
        "dropout_or": report["attrition"]["selective"]["model"]["odds_ratio_per_sd"],
        "heise": report["reliability"]["summary"]["estimate"],
        "mean_slope": g["trajectories"]["mean_slope"],
        "sd_slope": g["trajectories"]["sd_slope"],
        "slope_reliability": g["slope_reliability"]["estimate"],
        "icc": g["icc"]["estimate"],
    }


def _close(a, b, rel, path=""):
    if isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, rel, f"{path}[{i}]")
    elif a is None or b is None:
        assert a is None and b is None, path
    else:
        assert a == pytest.approx(b, rel=rel, abs=rel), path


def test_screen_with_integer_weights_equals_replicated_screen():
    """The whole screen (Python API) with weights 0/1/2 averaging 1 against the screen
    of the replicated panel (source: the replicated panel; 1e-7: EM and Newton stop at
    tolerances of 1e-8 to 1e-10)."""
    values, weights = simulated(seed=11), mean_one_weights()
    copies = replicated(values, weights)
    mine = paneldiag.screen(_frame(values, weights), id="household", wave="year",
                            value="trust", weight="weight").to_dict()
    theirs = paneldiag.screen(_frame(copies, np.ones(len(copies))), id="household",
                              wave="year", value="trust").to_dict()
    a, b = _figures(mine), _figures(theirs)
    for key in a:
        _close(a[key], b[key], 1e-7, key)
    assert mine["wave_profile"][0]["n"] == len(values)        # counts of units
    assert theirs["wave_profile"][0]["n"] == len(copies)
    assert mine["weighting"]["sections"]["panel"] is False
    assert mine["growth"]["weighted"] is True and "weighted" not in theirs["growth"]


def _numbers(node):
    """Every number in a report with its path (the weighting notes left out)."""
    return json_leaves(node, skip=("weighted", "weighting", "input", "cautions"))


def test_weights_of_one_give_the_unweighted_screen():
    """All weights 1: every figure of the report equals the unweighted one to 1e-10
    (source: the unweighted screen; rounding only), texts and counts exactly."""
    values = simulated(seed=5)
    frame = _frame(values, np.ones(len(values)))
    weighted = paneldiag.screen(frame, id="household", wave="year", value="trust",
                                weight="weight").to_dict()
    plain = paneldiag.screen(frame, id="household", wave="year", value="trust").to_dict()
    a, b = dict(_numbers(weighted)), dict(_numbers(plain))
    assert a.keys() == b.keys()
    for path, value in a.items():
        other = b[path]
        if isinstance(value, float) and isinstance(other, float):
            assert value == pytest.approx(other, rel=1e-10, abs=1e-10), path
        else:
            assert value == other, path


def test_weighted_dropout_model_on_grid_values_fits_cells_equal_to_the_rows(monkeypatch):
    """Scores written with two decimals: the weighted person-periods of one wave, value
    and replicate group are fitted as one cell carrying the summed weights. Checked
    against statsmodels GLM(Binomial) on the cells with the proportion of weighted
    events as the response and var_weights = the cell's weight sum: a cell is one
    observation of a proportion whose variance is p(1 - p) / trials, which is what
    var_weights says (freq_weights would say the cell is that many rows; the estimate
    is the same, but statsmodels would then count weight sums as observations); and
    against the row-by-row fit of the same panel (reference library; tolerances: both
    iterate to 1e-10 or tighter)."""
    import statsmodels.api as sm

    from paneldiag.diagnostics import attrition
    values = np.round(simulated(seed=9), 2)
    weights = relative_weights(np.random.default_rng(5).uniform(0.3, 2.5, len(values)))
    groups = np.arange(len(values)) % 20
    made = []
    grouped = attrition._grouped_person_periods
    monkeypatch.setattr(attrition, "_grouped_person_periods",
                        lambda *a: made.append(grouped(*a)) or made[-1])
    fit = dropout_model(values, list("abcde"), weights=weights, replicate=groups)
    xt, events, trials, bounds, _, n_pp, _ = made[0]
    assert fit.fitted and len(trials) < n_pp   # fewer cells than person-periods
    wave = np.repeat(np.arange(len(bounds) - 1), np.diff(bounds))
    design = np.column_stack([pd.get_dummies(pd.Series(wave), dtype=float).to_numpy(),
                              xt[0]])
    glm = sm.GLM(events / trials, design, family=sm.families.Binomial(),
                 var_weights=trials).fit(tol=1e-12)
    assert fit.odds_ratio_per_sd == pytest.approx(np.exp(glm.params[-1]), rel=1e-8)
    # the row-by-row fit: the same estimate and the same jackknife interval
    monkeypatch.setattr(attrition, "_grouped_person_periods", lambda *a: None)
    rows = dropout_model(values, list("abcde"), weights=weights, replicate=groups)
    assert rows.odds_ratio_per_sd == pytest.approx(fit.odds_ratio_per_sd, rel=1e-10)
    assert rows.ci_low == pytest.approx(fit.ci_low, rel=1e-10)
    assert rows.ci_high == pytest.approx(fit.ci_high, rel=1e-10)
    assert rows.pvalue == pytest.approx(fit.pvalue, rel=1e-8)   # a far tail: 1e-10 of
    # the statistic moves a small p-value by more
    assert (rows.n_person_periods, rows.n_events, rows.n_units, rows.waves_in_model) == \
        (fit.n_person_periods, fit.n_events, fit.n_units, fit.waves_in_model)
