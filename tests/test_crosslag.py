"""Cross-lagged and lagged correlations averaged by lag (paneldiag.diagnostics.crosslag).

Sources of the checks:
- pandas.Series.corr (pairwise-complete Pearson correlation) on shifted wave columns,
  averaged by hand on the Fisher z scale with weights n - 3 (Fisher 1921; Hedges and
  Olkin 1985): the reference values;
- the delete-a-group jackknife recomputed by dropping each replicate group's units and
  redoing the pandas computation (Kott 2001, J. Official Statistics);
- a simulation with known truth: Y at t+1 loads on X at t, X does not depend on Y.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli
from paneldiag.diagnostics.crosslag import cross_lag, lag_correlations, stacked_moments
from paneldiag.panel import Panel
from paneldiag.summaries import replicate_groups
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries import summarise

TIMES = np.array([0.0, 1.0, 2.0, 4.0, 5.0])


def _panel(n=900, seed=7, effect=0.5, missing=0.12):
    """X: independent standard-normal occasions; Y_{t+1} = effect * X_t + noise."""
    rng = np.random.default_rng(seed)
    t = len(TIMES)
    x = rng.normal(0, 1, (n, t))
    y = np.empty((n, t))
    y[:, 0] = rng.normal(0, 1, n)
    y[:, 1:] = effect * x[:, :-1] + rng.normal(0, 1, (n, t - 1))
    x[rng.random((n, t)) < missing] = np.nan
    y[rng.random((n, t)) < missing] = np.nan
    ids = np.array([f"U{i:04d}" for i in range(n)])
    return Panel(unit_ids=ids, wave_labels=tuple(f"W{i + 1}" for i in range(t)),
                 wave_times=TIMES, values={"x": x, "y": y})


def _pandas_average(a: pd.DataFrame, b: pd.DataFrame, lag: int) -> tuple[float, int]:
    """Fisher-z average of corr(a_s, b_{s+lag}) over s, weights n - 3 (by hand)."""
    zs, ws, total = [], [], 0
    for s in range(a.shape[1] - lag):
        left, right = a.iloc[:, s], b.iloc[:, s + lag]
        n = int((left.notna() & right.notna()).sum())
        zs.append(np.arctanh(left.corr(right)))
        ws.append(n - 3)
        total += n
    return float(np.tanh(np.dot(ws, zs) / np.sum(ws))), total


@pytest.fixture(scope="module")
def setup():
    panel = _panel()
    moments = stacked_moments(panel, "x", "y")
    return panel, cross_lag(moments, panel.wave_times, "x", "y")


def test_cross_lag_matches_pandas_shifted_columns(setup):
    panel, result = setup
    x, y = pd.DataFrame(panel.values["x"]), pd.DataFrame(panel.values["y"])
    for row in result.lags:
        r_xy, n_xy = _pandas_average(x, y, row.lag)
        r_yx, n_yx = _pandas_average(y, x, row.lag)
        assert row.x_leads.r == pytest.approx(r_xy, abs=1e-12)
        assert row.y_leads.r == pytest.approx(r_yx, abs=1e-12)
        assert row.x_leads.n_pairs == n_xy and row.y_leads.n_pairs == n_yx
        assert row.time_distance == pytest.approx(np.mean(TIMES[row.lag:] - TIMES[:-row.lag]))
    r_sync, _ = _pandas_average(x, y, 0)
    assert result.synchronous.r == pytest.approx(r_sync, abs=1e-12)


def test_jackknife_matches_dropping_each_group_by_hand(setup):
    panel, result = setup
    groups = replicate_groups(panel.unit_ids)
    x, y = pd.DataFrame(panel.values["x"]), pd.DataFrame(panel.values["y"])
    reps = []
    for g in range(groups.max() + 1):
        keep = groups != g
        reps.append(np.arctanh(_pandas_average(x[keep], y[keep], 1)[0]))
    reps = np.array(reps)
    k = len(reps)
    se = np.sqrt((k - 1) / k * ((reps - reps.mean()) ** 2).sum())  # Kott (2001), eq. 2.1
    assert result.lags[0].x_leads.z_se == pytest.approx(se, rel=1e-9)


def test_known_truth_direction(setup):
    """Simulated truth: corr(X_t, Y_{t+1}) = 0.5 / sqrt(0.5^2 + 1); corr(Y_t, X_{t+1}) = 0."""
    _, result = setup
    truth = 0.5 / np.sqrt(0.25 + 1.0)
    lag1 = result.lags[0]
    assert lag1.x_leads.ci_low < truth < lag1.x_leads.ci_high
    assert lag1.y_leads.ci_low < 0.05 and lag1.y_leads.ci_high > -0.05
    assert lag1.z_difference_ci_low > 0  # X leads Y, and the screen sees it


def test_autocorrelation_equals_cross_lag_of_a_measure_with_itself():
    panel = _panel(n=400, seed=3)
    own = summarise(panel, "x", [PairwiseMoments])[PairwiseMoments]
    auto = lag_correlations(own, panel.wave_times, 1)
    x = pd.DataFrame(panel.values["x"])
    assert auto.r == pytest.approx(_pandas_average(x, x, 1)[0], abs=1e-12)


def test_small_counts_are_not_reported():
    panel = _panel(n=6, seed=1, missing=0.0)
    result = cross_lag(stacked_moments(panel, "x", "y"), panel.wave_times, "x", "y",
                       min_cell=50)
    assert all(row.x_leads.r is None or np.isnan(row.x_leads.r) for row in result.lags)
    assert all(row.x_leads.n_pairs == 0 for row in result.lags)


def test_cli_multi_measure_report_has_cross_lag(tmp_path):
    panel = _panel(n=300, seed=11)
    rows = []
    for i, uid in enumerate(panel.unit_ids):
        for t, label in enumerate(panel.wave_labels):
            rows.append((uid, int(TIMES[t]), panel.values["x"][i, t], panel.values["y"][i, t]))
    frame = pd.DataFrame(rows, columns=["unit", "year", "x", "y"])
    path = tmp_path / "two.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "r.json"
    done = run_cli("screen", path, "--id", "unit", "--wave", "year", "--value", "x",
                   "--value", "y", "--json", out, "--quiet")
    assert done.returncode == 0, done.stderr
    report = json.loads(out.read_text())
    pair = report["cross_lag"][0]
    assert (pair["x"], pair["y"]) == ("x", "y")
    wide_x = frame.pivot(index="unit", columns="year", values="x")
    wide_y = frame.pivot(index="unit", columns="year", values="y")
    r, _ = _pandas_average(wide_x, wide_y, 1)  # reference: pandas on the file itself
    assert pair["lags"][0]["x_leads"]["r"] == pytest.approx(r, abs=1e-10)
