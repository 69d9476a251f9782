"""Missingness: pattern summary, EM moments under MAR, Little's MCAR test, coverage,
response patterns and declared codes."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from paneldiag.diagnostics.missingness import em_moments, little_mcar_test
from paneldiag.summaries import Chunk
from paneldiag.summaries.patterns import PatternMoments


def _chunk(x, rng=None, k=4):
    rng = rng or np.random.default_rng(0)
    return Chunk(values=x, weights=None, replicate=rng.integers(0, k, len(x)),
                 times=np.arange(x.shape[1], dtype=float), n_replicates=k)


def _summary(x, pieces=1):
    parts = np.array_split(np.arange(len(x)), pieces)
    out = None
    for idx in parts:
        part = PatternMoments.from_chunk(_chunk(x[idx]))
        out = part if out is None else out.merge(part)
    return out


def _with_gaps(rng, n=400, t=4, share=0.25):
    cov = 0.6 ** np.abs(np.subtract.outer(np.arange(t), np.arange(t)))
    x = rng.multivariate_normal(np.arange(t, dtype=float), cov, n)
    x[rng.random(x.shape) < share] = np.nan
    return x


# ------------------------------------------------------------------ the summary

def test_chunks_merge_to_the_one_chunk_summary():
    # simulation with known truth: the same units summarised in 1 or 5 chunks
    x = _with_gaps(np.random.default_rng(1), n=1000, t=5)
    one, five = _summary(x), _summary(x, pieces=5)
    assert np.array_equal(one.observed, five.observed)
    assert np.array_equal(one.n, five.n)
    assert np.allclose(one.mean, five.mean, atol=1e-12)
    assert np.allclose(one.m2, five.m2, atol=1e-9)
    assert np.array_equal(one.replicate_n.sum(axis=1), one.n)


def test_pattern_sums_equal_plain_per_pattern_moments():
    # reference: numpy mean and np.cov(bias=True) * n within each pattern, by brute force
    x = _with_gaps(np.random.default_rng(2), n=300, t=4)
    summary = _summary(x, pieces=3)
    seen = ~np.isnan(x)
    for p in range(summary.n_patterns):
        rows = np.all(seen == summary.observed[p], axis=1)
        cols = summary.observed[p]
        assert summary.n[p] == rows.sum()
        block = x[np.ix_(rows, cols)]
        assert np.allclose(summary.mean[p, cols], block.mean(axis=0))
        if rows.sum() > 1 and cols.any():
            expected = np.cov(block.T, bias=True).reshape(cols.sum(), cols.sum()) * rows.sum()
            assert np.allclose(summary.m2[p][np.ix_(cols, cols)], expected)


def test_many_waves_use_byte_keys():
    # more than 62 waves switches the pattern key to packed bytes; same grouping
    rng = np.random.default_rng(3)
    x = rng.normal(size=(200, 70))
    x[rng.random(x.shape) < 0.02] = np.nan
    summary = _summary(x, pieces=2)
    assert summary.n.sum() == 200
    assert len({tuple(r) for r in ~np.isnan(x)}) == summary.n_patterns


# ------------------------------------------------------------------------- EM

def test_em_on_complete_data_is_the_sample_moments():
    # reference: numpy mean and np.cov(bias=True) (ML divisor N) on complete data
    rng = np.random.default_rng(4)
    x = rng.multivariate_normal([1.0, 2.0, 3.0, 4.0], np.eye(4) + 0.5, 500)
    em = em_moments(_summary(x, pieces=2))
    assert em.converged
    assert np.allclose(em.means, x.mean(axis=0), atol=1e-12)
    assert np.allclose(em.covariance, np.cov(x.T, bias=True), atol=1e-12)


def _direct_ml(x):
    """Observed-data likelihood maximised with scipy.optimize (independent route):
    scipy.stats.multivariate_normal on the observed waves, group by group of units
    with the same pattern (found with numpy, not with paneldiag)."""
    t = x.shape[1]
    seen = ~np.isnan(x)
    tril = np.tril_indices(t)
    groups = [(obs, x[np.all(seen == obs, axis=1)][:, obs])
              for obs in np.unique(seen, axis=0) if obs.any()]

    def unpack(theta):
        mu = theta[:t]
        chol = np.zeros((t, t))
        chol[tril] = theta[t:]
        return mu, chol @ chol.T

    def negative(theta):
        mu, sigma = unpack(theta)
        return -sum(np.sum(stats.multivariate_normal.logpdf(rows, mu[obs],
                                                            sigma[np.ix_(obs, obs)]))
                    for obs, rows in groups)

    start = np.r_[np.nanmean(x, axis=0), np.eye(t)[tril]]
    fit = optimize.minimize(negative, start, method="BFGS", options={"gtol": 1e-7})
    return unpack(fit.x), -fit.fun


@pytest.fixture(scope="module")
def small_gappy():
    """80 units, 3 waves, 30% of cells missing; every unit has an observed wave."""
    x = _with_gaps(np.random.default_rng(5), n=80, t=3, share=0.3)
    x[np.isnan(x).all(axis=1), 0] = 0.0
    return x, _direct_ml(x)


def test_em_agrees_with_direct_maximisation_of_the_observed_likelihood(small_gappy):
    # reference: scipy.optimize.minimize (BFGS) of the observed-data log-likelihood
    x, ((mu, sigma), loglik) = small_gappy
    em = em_moments(_summary(x), tol=1e-11, max_iter=20000)
    assert em.converged
    assert np.allclose(em.means, mu, atol=1e-4)
    assert np.allclose(em.covariance, sigma, atol=1e-4)
    assert em.loglik == pytest.approx(loglik, abs=1e-6)


def test_em_recovers_the_truth_under_mar_dropout():
    # simulation with known truth: dropout after wave t depends on the value at t (MAR),
    # so complete-case means are biased and EM means are not
    from paneldiag.simulate import dropout_after
    rng = np.random.default_rng(6)
    t = 4
    cov = 0.5 + 0.5 * np.eye(t)
    x = rng.multivariate_normal(np.zeros(t), cov, 20000)
    gone = dropout_after(x, rng, base_rate=0.2, log_odds_per_sd=-1.0)
    x[gone] = np.nan
    em = em_moments(_summary(x, pieces=3))
    assert em.converged
    assert np.nanmean(x[:, -1]) > 0.1          # complete cases are biased upwards
    assert np.allclose(em.means, 0.0, atol=0.05)
    assert np.allclose(em.covariance, cov, atol=0.06)


def test_em_leaves_out_a_wave_nobody_answered():
    rng = np.random.default_rng(7)
    x = _with_gaps(rng, n=200, t=3)
    x[:, 1] = np.nan
    em = em_moments(_summary(x))
    assert np.isnan(em.means[1]) and np.isnan(em.covariance[1]).all()
    assert np.isfinite(em.means[[0, 2]]).all()


# -------------------------------------------------------------- Little's test

def _little_by_hand(x, mu, sigma):
    """Little (1988, JASA, eq. 2) computed unit by unit with pandas groups of the
    missingness pattern, independently of paneldiag's pattern summary."""
    frame = pd.DataFrame(x)
    key = frame.notna().apply(lambda r: "".join("1" if v else "0" for v in r), axis=1)
    d2, pj, used = 0.0, 0, 0
    for pattern, rows in frame.groupby(key):
        obs = np.array([c == "1" for c in pattern])
        if not obs.any():
            continue
        diff = rows.to_numpy()[:, obs].mean(axis=0) - mu[obs]
        d2 += len(rows) * diff @ np.linalg.solve(sigma[np.ix_(obs, obs)], diff)
        pj += obs.sum()
        used += 1
    df = pj - x.shape[1]
    return d2, df, stats.chi2.sf(d2, df), used


def test_little_statistic_matches_a_unit_by_unit_computation_at_direct_ml(small_gappy):
    # reference: the statistic by hand (pandas groups) at ML estimates found by
    # scipy.optimize (not by paneldiag's EM)
    x, ((mu, sigma), _) = small_gappy
    summary = _summary(x, pieces=2)
    result = little_mcar_test(summary, em_moments(summary, tol=1e-11, max_iter=20000))
    d2, df, p, used = _little_by_hand(x, mu, sigma)
    assert result.df == df and result.n_patterns == used
    assert result.statistic == pytest.approx(d2, rel=1e-4)
    assert result.pvalue == pytest.approx(p, rel=1e-3)


def _mcar_pvalues(n_reps, n, seed):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n_reps):  # a loop over simulation replicates
        x = _with_gaps(rng, n=n, t=3, share=0.2)
        out.append(little_mcar_test(_summary(x)).pvalue)
    return np.array(out)


def test_little_pvalues_are_uniform_under_mcar():
    # simulation with known truth: values missing completely at random (20% per cell);
    # Kolmogorov-Smirnov test of the p-values against U(0, 1), 200 replicates
    p = _mcar_pvalues(200, n=300, seed=9)
    assert stats.kstest(p, "uniform").pvalue > 0.01
    assert 0.02 <= np.mean(p < 0.05) <= 0.09


@pytest.mark.slow
def test_little_pvalues_are_uniform_under_mcar_full_grid():
    # the same with 1,000 replicates and smaller panels (asymptotics under strain)
    for n in (100, 400):
        p = _mcar_pvalues(1000, n=n, seed=10 + n)
        assert stats.kstest(p, "uniform").pvalue > 0.001
        assert 0.03 <= np.mean(p < 0.05) <= 0.07


def _dropout_detection(n_reps, seed, log_odds=-0.5):
    from paneldiag.simulate import dropout_after
    rng = np.random.default_rng(seed)
    t = 4
    cov = 0.5 + 0.5 * np.eye(t)
    hits = 0
    for _ in range(n_reps):  # a loop over simulation replicates
        x = rng.multivariate_normal(np.zeros(t), cov, 1000)
        x[dropout_after(x, rng, base_rate=0.15, log_odds_per_sd=log_odds)] = np.nan
        hits += little_mcar_test(_summary(x)).pvalue < 0.05
    return hits / n_reps


def test_little_detects_dropout_driven_by_the_previous_score():
    # simulation with known truth: dropout after wave t with log-odds -0.5 per SD of
    # the score at t (paneldiag.simulate.dropout_after), N = 1,000, 30 replicates
    assert _dropout_detection(30, seed=11) >= 0.8


@pytest.mark.slow
def test_little_detects_dropout_full_grid():
    assert _dropout_detection(300, seed=12) >= 0.9
    assert _dropout_detection(300, seed=13, log_odds=-0.25) >= 0.5


# ------------------------------------------------- patterns, coverage and codes

def _no_small_count_by_subtraction(att, mis, waves, min_cell):
    """Disclosure audit on the JSON alone: for every total the report shows, the
    units of that total not accounted for by listed patterns (or shown dropout
    waves) are none or at least ``min_cell`` (common practice: secondary suppression)."""
    t = len(waves)
    known = {r["pattern"]: r["n"] for r in mis["patterns"]["rows"]}
    for i, r in enumerate(next(u for u in att["unit_types"]
                               if u["type"] == "monotone_dropout").get("last_wave", [])):
        if r["n"] is not None:
            known["o" * (i + 1) + "." * (t - i - 1)] = r["n"]

    def check(total, member):
        if total is None:
            return
        rest = total - sum(n for p, n in known.items() if member(p))
        assert rest == 0 or rest >= min_cell, (total, rest)

    check(mis["patterns"]["n_units"], lambda p: True)
    cov = mis["coverage"]["n"]
    for a in range(t):
        check(att["retention"][a]["n_observed"], lambda p: p[a] == "o")
        for b in range(t):
            if a != b and cov[a][b] is not None:
                check(cov[a][b], lambda p: p[a] == "o" and p[b] == "o")
                if cov[a][a] is not None:
                    check(cov[a][a] - cov[a][b], lambda p: p[a] == "o" and p[b] == ".")
    kinds = {"complete": lambda p: "." not in p,
             "never_observed": lambda p: "o" not in p}
    for u in att["unit_types"]:
        if u["type"] in kinds:
            check(u["n"], kinds[u["type"]])


def _hand_made(counts):
    rows = [[1.0 if c == "o" else np.nan for c in p] for p, n in counts.items()
            for _ in range(n)]
    return _summary(np.array(rows))


@pytest.mark.parametrize("counts", [
    {"ooo": 40, "oo.": 12, "o..": 6, "o.o": 4, ".oo": 2, "..o": 1},
    {"ooo": 40, "oo.": 12, "o..": 6, "o.o": 3},
    {"oooo": 30, "ooo.": 20, "oo..": 9, "o...": 8, "o.oo": 7, ".ooo": 6, "oo.o": 2},
])
def test_response_patterns_never_reveal_a_small_count(counts):
    # disclosure rule (common practice: minimum cell size 5) on hand-made counts:
    # nothing below 5 is listed, nor recoverable by subtraction from a shown total
    from paneldiag.diagnostics.attrition import retention, unit_types
    from paneldiag.diagnostics.missingness import coverage, response_patterns
    summary = _hand_made(counts)
    waves = [str(i) for i in range(len(next(iter(counts))))]
    table = response_patterns(summary, min_cell=5, top=10).to_dict()
    assert all(r["n"] >= 5 for r in table["rows"])
    assert set(r["pattern"] for r in table["rows"]) <= {p for p, n in counts.items()}
    assert all(counts[r["pattern"]] == r["n"] for r in table["rows"])
    rem = table["remainder"]["n_units"]
    assert rem == 0 or rem >= 5
    att = {"retention": retention(summary, waves, 5).to_dict(),
           "unit_types": unit_types(summary, waves, 5).to_dict()}
    mis = {"patterns": table, "coverage": coverage(summary, waves, 5).to_dict()}
    _no_small_count_by_subtraction(att, mis, waves, 5)


def test_small_pattern_pulls_in_the_patterns_that_would_reveal_it():
    # disclosure control by secondary suppression (common practice). "o.o" (3 units): wave 3 has 43 respondents, so listing "ooo" (40) would reveal
    # it; the 3 + 6 units seen at wave 1 but not 2 make "o.." follow
    from paneldiag.diagnostics.missingness import response_patterns
    table = response_patterns(_hand_made({"ooo": 40, "oo.": 12, "o..": 6, "o.o": 3}),
                              min_cell=5).to_dict()
    assert [r["pattern"] for r in table["rows"]] == ["oo."]
    assert table["remainder"]["n_units"] == 49 and table["remainder"]["n_small_units"] is None


def test_declared_codes_suppress_small_cells_and_keep_labels():
    from paneldiag.diagnostics.missingness import declared_codes
    codes = {"-9": np.array([12, 3, 0]), "-8": np.array([5, 7, 4])}
    result = declared_codes(codes, {"-9": "refused"}, ["a", "b", "c"], min_cell=5).to_dict()
    # cells under 5 withheld (common practice: minimum cell size), labels kept
    assert result["rows"] == [{"code": "-9", "label": "refused", "counts": [12, None, None]},
                              {"code": "-8", "label": None, "counts": [5, 7, None]}]


def test_demo_report_shows_no_count_below_min_cell(tmp_path):
    # disclosure (common practice: minimum cell size 12 here): every count in the
    # attrition and missingness blocks, JSON and terminal
    from conftest import run_cli
    data = tmp_path / "t.csv"
    assert run_cli("demo", data).returncode == 0
    out = tmp_path / "t.json"
    done = run_cli("screen", data, "--id", "household", "--wave", "year", "--value", "trust",
                   "--missing-codes", "-9,-8", "--min-cell", "12", "--json", out, "--details")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    counts = []
    att, mis = report["attrition"], report["missingness"]
    counts += [r["n_observed"] for r in att["retention"]]
    counts += [t["n"] for t in att["unit_types"]]
    counts += [r["n"] for t in att["unit_types"] for r in t.get("last_wave", [])]
    counts += [r[k] for r in att["selective"]["by_wave"] for k in ("n_continuing", "n_dropping")]
    counts += [r["n"] for r in mis["patterns"]["rows"]]
    counts += [mis["patterns"]["remainder"]["n_units"] or 12,
               mis["patterns"]["remainder"]["n_small_units"]]
    counts += [c for row in mis["coverage"]["n"] for c in row]
    counts += [c for row in mis["codes"]["rows"] for c in row["counts"]]
    # the dependence section's pair counts are coverage counts too
    pair_tables = [m["n_pairs"] for m in report["correlation"]["methods"].values()]
    counts += [c for table in pair_tables for row in table for c in row]
    counts += [r["n_pairs"] for r in report["lag_profile"]]
    assert all(c is None or c >= 12 for c in counts)
    assert any(c is None for c in counts)   # the demo does have small cells
    # nor can one be had by subtraction from a shown total
    _no_small_count_by_subtraction(att, mis, report["panel"]["waves"], 12)
    for cov in [mis["coverage"]["n"]] + pair_tables:
        for s, row in enumerate(cov):
            for t, cell in enumerate(row):
                if cell is not None and cov[s][s] is not None:
                    assert cov[s][s] - cell == 0 or cov[s][s] - cell >= 12
    # a lag row's sum is shown only when each of its wave pairs is
    first = pair_tables[0]
    for row in report["lag_profile"]:
        if row["n_pairs"] is not None and row["basis"] == "lag":
            k = row["lag"]
            assert all(first[s][s + k] is not None for s in range(len(first) - k))
    # the terminal never prints a pattern the JSON withholds
    text = done.stdout.decode()
    shown = {r["pattern"] for r in mis["patterns"]["rows"]}
    listed = [line.split()[0] for line in text.splitlines()
              if line.startswith("    ") and set(line.split()[0]) <= {"o", "."}]
    assert listed and set(listed) <= shown


def test_code_labels_from_a_labelled_file_reach_the_report(tmp_path):
    # a .sav file (written with pyreadstat) declaring value labels for -9 and -8
    pyreadstat = pytest.importorskip("pyreadstat")
    from conftest import run_cli
    from paneldiag.demo import tenant_panel
    frame = tenant_panel(300)[["household", "year", "satisfaction"]]
    path = tmp_path / "tenants.sav"
    pyreadstat.write_sav(frame, path, variable_value_labels={
        "satisfaction": {-9: "refused", -8: "don't know"}})
    out = tmp_path / "t.json"
    done = run_cli("screen", path, "--id", "household", "--wave", "year", "--value",
                   "satisfaction", "--missing-codes", "-9,-8", "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    rows = {r["code"]: r for r in json.loads(out.read_text())["missingness"]["codes"]["rows"]}
    assert rows["-9"]["label"] == "refused" and rows["-8"]["label"] == "don't know"
    wide = frame.pivot(index="household", columns="year", values="satisfaction")
    expected = [(n if n >= 5 else None) for n in (wide == -9).sum().tolist()]
    assert rows["-9"]["counts"] == expected   # pandas count of -9 per year, 5+ only


@pytest.mark.parametrize("case", ["constant", "collinear", "fewer_units_than_waves",
                                  "all_missing"])
def test_degenerate_panels_report_no_convergence_instead_of_failing(case):
    rng = np.random.default_rng(14)
    x = rng.normal(size=(40, 3))
    if case == "constant":
        x[:] = 1.0
    elif case == "collinear":
        x[:, 2] = 2 * x[:, 0] + 1
        x[rng.random(x.shape) < 0.2] = np.nan
    elif case == "fewer_units_than_waves":
        x = x[:2]
    else:
        x[:] = np.nan
    summary = _summary(x)
    em = em_moments(summary)
    assert not em.converged and em.iterations < 50
    little = little_mcar_test(summary, em)
    assert np.isnan(little.statistic) and np.isnan(little.pvalue)


def test_little_statistic_matches_mcartest_at_the_same_plug_in_estimates():
    # reference: mcartest.MCARTest.little_mcar_test (PyPI), which plugs in the
    # available-case means and pairwise covariances rather than the ML estimates;
    # given the same plug-in moments the two statistics must agree exactly
    mcartest = pytest.importorskip("mcartest.mcar_stats_tests")
    from paneldiag.diagnostics.missingness import EMResult
    x = _with_gaps(np.random.default_rng(3), n=300, t=4, share=0.25)
    frame = pd.DataFrame(x)
    ref = mcartest.MCARTest.little_mcar_test(frame, return_stats=True)
    plug_in = EMResult(True, 1, frame.mean().to_numpy(), frame.cov().to_numpy(), np.nan, 300)
    ours = little_mcar_test(_summary(x), plug_in)
    assert ours.statistic == pytest.approx(ref["statistic"], rel=1e-10)
    assert ours.df == ref["df"] and ours.pvalue == pytest.approx(ref["pvalue"], rel=1e-8)


def test_units_never_observed_are_not_given_away(tmp_path):
    """Disclosure control (common practice): 3 of 60 units have no observed value, so
    any count of the units with an observed value (57) would give them away against
    the panel's 60; the EM block, the verdicts and the growth screen withhold it."""
    from conftest import run_cli
    rng = np.random.default_rng(8)
    lines = ["id,wave,y"]
    for unit in range(60):
        for wave in range(1, 5):
            value = "" if unit < 3 else f"{rng.normal() + 0.3 * wave:.3f}"
            lines.append(f"{unit},{wave},{value}")
    data = tmp_path / "p.csv"
    data.write_text("\n".join(lines) + "\n")
    out = tmp_path / "p.json"
    done = run_cli("screen", data, "--id", "id", "--wave", "wave", "--value", "y",
                   "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    text = out.read_text()
    report = json.loads(text)
    assert report["panel"]["n_units"] == 60
    assert report["missingness"]["em"]["n_units"] is None
    assert report["verdict_basis"]["statistics"]["n_units"] is None
    assert report["attrition"]["selective"]["model"]["n_units"] is None   # at risk: 57
    growth = report["growth"]
    assert growth["trajectories"]["n_units"] is None and \
        growth["slope_reliability"]["n_units"] is None     # 57 as well
    caveats = " ".join(c for f in report["families"] for c in f["caveats"])
    assert "Small sample: fewer units" in caveats and "57" not in caveats
    # with a cell size of 3 the same counts are shown
    out3 = tmp_path / "p3.json"
    assert run_cli("screen", data, "--id", "id", "--wave", "wave", "--value", "y",
                   "--json", out3, "-q", "--min-cell", "3").returncode == 0
    report3 = json.loads(out3.read_text())
    assert report3["missingness"]["em"]["n_units"] == 57
    assert report3["verdict_basis"]["statistics"]["n_units"] == 57


def test_pairwise_moments_from_patterns_match_pandas():
    """Source: pandas DataFrame.cov (pairwise-complete, n - 1 divisor) and mean."""
    from paneldiag.summaries import summarise
    from paneldiag.summaries.patterns import PatternMoments
    from paneldiag.validation import panel_of
    rng = np.random.default_rng(11)
    x = rng.normal(size=(400, 6)) @ rng.normal(size=(6, 6))
    x[rng.random(x.shape) < 0.25] = np.nan
    patterns = summarise(panel_of(x), "score", [PatternMoments])[PatternMoments]
    means, cov = patterns.pairwise_moments()
    frame = pd.DataFrame(x)
    observed = ~np.isnan(x)
    pair_n = observed.T.astype(float) @ observed
    np.testing.assert_allclose(means, frame.mean(), rtol=1e-12)
    np.testing.assert_allclose(cov * pair_n / (pair_n - 1), frame.cov().to_numpy(), rtol=1e-10)


def test_beyond_the_cost_limit_the_moments_are_pairwise(monkeypatch):
    """Simulation with known truth (a stable trait with MCAR gaps): with the cost limit
    of likelihood fits set below this panel's, EM and Little's test are not run, the
    verdicts are fitted to the pairwise-complete moments in two stages and say so."""
    import paneldiag.summaries.patterns as patterns_module
    from paneldiag.diagnostics.missingness import PAIRWISE_FALLBACK
    from paneldiag.pipeline import ScreenOptions, screen_measure
    from paneldiag.io.ledger import Ledger
    from paneldiag.validation import panel_of
    rng = np.random.default_rng(5)
    x = rng.normal(size=(600, 1)) + rng.normal(size=(600, 6))
    x[rng.random(x.shape) < 0.2] = np.nan
    monkeypatch.setattr(patterns_module, "ML_COST_LIMIT", 10.0)
    report = screen_measure(panel_of(x), "score", Ledger(rows_read=0, rows_used=0), {},
                            ScreenOptions(by_group=False))
    assert report["missingness"]["em"]["method"] == PAIRWISE_FALLBACK
    assert report["missingness"]["little_mcar"]["statistic"] is None
    assert report["verdict_basis"]["statistics"]["likelihood"] == "pairwise-complete"
    stable = next(f for f in report["families"] if f["family"] == "stable_trait")
    assert stable["verdict"] == "supported"
