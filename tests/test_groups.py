"""By-group screens and the tests of equality across groups (paneldiag.diagnostics.groups).

Sources of the checks:
- statsmodels.stats.meta_analysis.combine_effects(...).test_homogeneity(): Cochran's Q
  (Cochran 1954), the reference for ``homogeneity_test`` and ``fisher_z_equality``;
- the Pearson chi-square computed directly as sum (O - E)^2 / E (Pearson 1900);
- pandas.Series.corr on the group's own rows, averaged on the Fisher z scale by hand;
- simulations with known truth: groups with different carry-over, and groups that
  share one process.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.meta_analysis import combine_effects

from conftest import run_cli
from paneldiag.diagnostics.groups import (fisher_z_equality, homogeneity_test,
                                          proportions_equality, wilson_interval)
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, build_panel
from paneldiag.pipeline import ScreenOptions, screen
from paneldiag.simulate import carry_over

YEARS = (2001, 2002, 2003, 2005, 2006)


def test_homogeneity_matches_statsmodels():
    est = np.array([0.42, 0.55, 0.31, 0.47])
    se = np.array([0.05, 0.07, 0.06, 0.04])
    ours = homogeneity_test(est, se)
    ref = combine_effects(est, se ** 2).test_homogeneity()
    assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-12)
    assert ours.df == int(ref.df) == 3
    assert ours.pvalue == pytest.approx(float(ref.pvalue), rel=1e-12)


def test_fisher_z_equality_matches_direct_formula_and_statsmodels():
    r, n = np.array([0.60, 0.45, 0.52]), np.array([120, 95, 210])
    z, w = np.arctanh(r), n - 3.0
    zbar = np.dot(w, z) / w.sum()
    direct = float(np.dot(w, (z - zbar) ** 2))  # Hedges and Olkin (1985), ch. 11
    ours = fisher_z_equality(r, n)
    assert ours.statistic == pytest.approx(direct, rel=1e-12)
    ref = combine_effects(z, 1.0 / w).test_homogeneity()
    assert ours.pvalue == pytest.approx(float(ref.pvalue), rel=1e-12)
    assert ours.pvalue == pytest.approx(stats.chi2.sf(direct, 2), rel=1e-12)


def test_proportions_equality_matches_pearson_by_hand():
    kept, base = np.array([54, 40, 71]), np.array([100, 90, 110])
    table = np.vstack([kept, base - kept]).astype(float)
    expected = table.sum(axis=1, keepdims=True) * table.sum(axis=0) / table.sum()
    direct = float(((table - expected) ** 2 / expected).sum())  # Pearson (1900)
    ours = proportions_equality(kept, base)
    assert ours.statistic == pytest.approx(direct, rel=1e-12)
    assert ours.df == 2
    assert ours.pvalue == pytest.approx(stats.chi2.sf(direct, 2), rel=1e-12)


def _frame(rhos: dict[str, float], sizes: dict[str, int], seed: int = 5) -> pd.DataFrame:
    """Long data: each group's score is a carry-over process with its own rho."""
    rng = np.random.default_rng(seed)
    times = np.array(YEARS, dtype=float)
    parts, start = [], 0
    for group, rho in rhos.items():
        n = sizes[group]
        y = 10 + carry_over(n, times, rho, 1.0, rng) + rng.normal(0, 0.3, (n, len(times)))
        y[rng.random(y.shape) < 0.1] = np.nan
        unit = np.repeat(np.arange(start, start + n), len(times))
        parts.append(pd.DataFrame({"unit": [f"P{u:05d}" for u in unit],
                                   "year": np.tile(YEARS, n), "site": group,
                                   "score": y.ravel()}))
        start += n
    frame = pd.concat(parts, ignore_index=True)
    return frame[frame["score"].notna()]


def _screen(tmp_path, frame, min_cell=5):
    path = tmp_path / "groups.csv"
    frame.to_csv(path, index=False)
    spec = LayoutSpec(id="unit", wave="year", values=("score",), group="site")
    raw = read_table(str(path), None, columns=spec.columns())
    panel, ledgers = build_panel(raw, spec)
    info = {"path": str(path), "sha256": raw.sha256, "format": raw.format, "options": {}}
    return screen(panel, ledgers, info, ScreenOptions(min_cell=min_cell, group_column="site"))


def _pandas_lag1(frame: pd.DataFrame) -> float:
    wide = frame.pivot(index="unit", columns="year", values="score")
    zs, ws = [], []
    for a, b in zip(wide.columns[:-1], wide.columns[1:]):
        n = int((wide[a].notna() & wide[b].notna()).sum())
        zs.append(np.arctanh(wide[a].corr(wide[b])))
        ws.append(n - 3)
    return float(np.tanh(np.dot(ws, zs) / np.sum(ws)))


@pytest.fixture(scope="module")
def differing(tmp_path_factory):
    frame = _frame({"North": 0.3, "South": 0.85, "Mid": 0.6, "Tiny": 0.5},
                   {"North": 250, "South": 250, "Mid": 30, "Tiny": 3})
    return frame, _screen(tmp_path_factory.mktemp("g"), frame)


def test_small_groups_are_not_reported(differing):
    _, report = differing
    groups = report["groups"]
    # disclosure control (common practice): Tiny (3 units) is below the cell size; Mid
    # (30) goes too, or Tiny's count would follow from the panel's total minus the
    # shown groups'
    assert groups["n_groups"] == 4 and groups["n_suppressed"] == 2
    assert sorted(groups["reports"]) == ["North", "South"]
    assert "Tiny" not in json.dumps(groups) and "Mid" not in json.dumps(groups)
    assert "not reported" in groups["note"]


def test_group_lag1_matches_pandas_on_the_group_rows(differing):
    frame, report = differing
    lag1 = next(c for c in report["groups"]["comparison"] if c["figure"] == "lag1_correlation")
    for value in lag1["by_group"]:
        expect = _pandas_lag1(frame[frame["site"] == value["group"]])
        assert value["estimate"] == pytest.approx(expect, abs=1e-12)


def test_group_reports_reuse_the_measure_screen(differing, tmp_path):
    frame, report = differing
    north = frame[frame["site"] == "North"]
    alone = _screen(tmp_path, north)
    assert report["groups"]["reports"]["North"]["wave_profile"] == alone["wave_profile"]


def test_known_difference_in_carry_over_is_detected(differing):
    _, report = differing
    lag1 = next(c for c in report["groups"]["comparison"] if c["figure"] == "lag1_correlation")
    assert lag1["test"]["pvalue"] < 1e-6  # simulated rho 0.3 against 0.85


def test_equal_processes_are_not_flagged(tmp_path):
    frame = _frame({"East": 0.6, "West": 0.6}, {"East": 250, "West": 250}, seed=8)
    report = _screen(tmp_path, frame)
    lag1 = next(c for c in report["groups"]["comparison"] if c["figure"] == "lag1_correlation")
    assert lag1["test"]["pvalue"] > 0.01  # one simulated process for both groups
    retention = next(c for c in report["groups"]["comparison"] if c["figure"] == "retention")
    assert retention["test"]["df"] == 1


def test_cli_group_option_writes_groups(tmp_path):
    frame = _frame({"A": 0.4, "B": 0.7}, {"A": 120, "B": 120})
    path = tmp_path / "g.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "r.json"
    done = run_cli("screen", path, "--id", "unit", "--wave", "year", "--value", "score",
                   "--group", "site", "--json", out, "--quiet")
    assert done.returncode == 0, done.stderr
    groups = json.loads(out.read_text())["groups"]
    assert groups["column"] == "site"
    assert sorted(groups["reports"]) == ["A", "B"]


def test_wilson_interval_matches_statsmodels():
    from statsmodels.stats.proportion import proportion_confint
    for kept, base in ((54, 100), (3, 40), (40, 40)):
        ref = proportion_confint(kept, base, alpha=0.05, method="wilson")
        assert wilson_interval(kept, base) == pytest.approx(ref, rel=1e-10)


def test_secondary_suppression_stops_differencing():
    """A hidden group of 3 units would follow by subtraction from the panel's total;
    the next smallest group is hidden too (common practice in disclosure control)."""
    from paneldiag.diagnostics.groups import reportable_groups
    groups = np.array(["A"] * 3 + ["B"] * 8 + ["C"] * 20)
    values = np.ones((31, 3))
    assert reportable_groups(groups, values, ["A", "B", "C"], 5) == ["C"]
    values[11:, 1] = np.nan  # C silent at wave 2: hidden A+B answer there 11 times
    assert reportable_groups(groups, values, ["A", "B", "C"], 5) == ["C"]
    groups = np.array(["A"] * 6 + ["B"] * 8 + ["C"] * 20)
    assert reportable_groups(groups, np.ones((34, 3)), ["A", "B", "C"], 5) == ["A", "B", "C"]
