"""Figures of the appendix (paneldiag.render.figures), drawn from report dictionaries.

Sources of the checks: the 95% t interval of a wave mean against
scipy.stats.t.interval (reference library); the Okabe-Ito palette values as published
by Okabe and Ito (2008, "Color Universal Design"; from memory); everything else is a
property of the drawing itself (absent data give no figure, series differ by marker or
line style, output bytes repeat).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from paneldiag.render import figures as F

WAVES = ["2015", "2016", "2017", "2019"]
TIMES = [2015.0, 2016.0, 2017.0, 2019.0]


def _report() -> dict:
    """A small per-measure report with the keys the figures read."""
    matrix = np.full((4, 4), 0.5) + np.eye(4) * 0.5
    profile = [{"wave": w, "n": int(n), "mean": float(m), "sd": float(s)}
               for w, n, m, s in zip(WAVES, [120, 110, 95, 80], [3.1, 3.2, 3.3, 3.5],
                                     [1.1, 1.0, 1.2, 1.1])]
    return {
        "measure": "trust",
        "panel": {"waves": WAVES, "times": TIMES, "n_units": 130, "n_waves": 4},
        "wave_profile": profile,
        "attrition": {"retention": [
            {"wave": w, "n_observed": n, "retained_share": r, "response_share": q}
            for w, n, r, q in zip(WAVES, [120, 110, 95, 80], [1.0, 0.9, 0.8, 0.66],
                                  [0.92, 0.85, 0.73, 0.62])]},
        "missingness": {"patterns": {"rows": [
            {"pattern": "oooo", "n": 60, "share": 0.46},
            {"pattern": "ooo.", "n": 30, "share": 0.23},
            {"pattern": "o.oo", "n": 12, "share": 0.09}]}},
        "correlation": {"waves": WAVES, "primary": "pearson_pairwise",
                        "methods": {"pearson_pairwise": {"matrix": matrix.tolist()}}},
        "lag_profile": [{"basis": "time", "lag": None, "time_distance": float(d),
                         "mean_r": float(0.3 + 0.4 * 0.6 ** d), "ci_low": None,
                         "ci_high": None} for d in (1, 2, 3, 4)],
        "decay_fit": {"identified": True, "models": {
            "full": {"a": 0.3, "b": 0.4, "rho": 0.6}, "flat": {"a": 0.45, "b": 0.0,
                                                              "rho": None},
            "pure_decay": {"a": 0.0, "b": 0.7, "rho": 0.85}}},
        "reliability": {
            "heise": [{"waves": ["2015", "2016", "2017"], "reliability": 0.8,
                       "reliability_se": 0.03},
                      {"waves": ["2016", "2017", "2019"], "reliability": 0.78,
                       "reliability_se": 0.04},
                      {"waves": ["2015", "2017", "2019"], "reliability": 0.5,
                       "reliability_se": 0.04}],
            "wiley_wiley": [{"waves": ["2015", "2016", "2017"],
                             "reliability": [0.8, 0.81, 0.79],
                             "reliability_se": [0.03, 0.03, 0.03]}]},
        "growth": {"trajectories": {"mean_slope": 0.05, "sd_slope": 0.4,
                                    "mean_slope_ci_low": 0.01, "mean_slope_ci_high": 0.09},
                   "slope_reliability": {"slope_variance": 0.05, "pooled_slope": 0.05}},
        "groups": {"comparison": [{"figure": "lag1_correlation", "label": "lag-1 r",
                                   "by_group": [{"group": "A", "estimate": 0.6,
                                                 "ci_low": 0.5, "ci_high": 0.7},
                                                {"group": "B", "estimate": 0.4,
                                                 "ci_low": 0.3, "ci_high": 0.5}]}]},
    }


ALL = [draw for _, draw, _ in F.MEASURE_FIGURES]


@pytest.mark.parametrize("draw", ALL, ids=[name for name, _, _ in F.MEASURE_FIGURES])
def test_each_figure_draws_from_its_key_and_is_absent_without_it(draw):
    report = _report()
    assert F.render(draw, report) is not None
    assert F.render(draw, {"measure": "trust", "panel": report["panel"]}) is None


def test_output_is_deterministic_and_undated():
    report = _report()
    first = F.render(F.lag_decay_figure, report)
    second = F.render(F.lag_decay_figure, report)
    assert first == second
    png, svg = first
    assert png.startswith(b"\x89PNG") and b"<svg" in svg
    assert b"<dc:date>" not in svg
    assert b"Software" not in png  # no program stamp that changes between versions


def test_series_differ_by_more_than_colour():
    fig = F.lag_decay_figure(_report())
    ax = fig.axes[0]
    styles = {(line.get_linestyle(), line.get_marker()) for line in ax.get_lines()
              if line.get_label() and not line.get_label().startswith("_")}
    assert len(styles) >= 3  # fitted curve, flat and pure-decay references
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("flat" in t for t in labels) and any("pure decay" in t for t in labels)
    assert "distance" in ax.get_xlabel() and "year" in ax.get_xlabel()


def test_palette_is_okabe_ito():
    # Okabe and Ito (2008), the eight colours of the Color Universal Design set (from memory)
    assert F.OKABE_ITO == ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442",
                           "#0072B2", "#D55E00", "#CC79A7")
    used = {color for color, _, _ in F.SERIES}
    assert used <= set(F.OKABE_ITO)


def test_wave_means_sit_at_actual_times_with_t_intervals():
    report = _report()
    fig = F.wave_means_figure(report)
    ax = fig.axes[0]
    container = ax.containers[0]  # the error bar container
    x, y = container.lines[0].get_data()
    assert list(x) == TIMES  # the skipped 2018 shows as a wider gap
    segments = container.lines[2][0].get_segments()
    for row, seg in zip(report["wave_profile"], segments):
        lo, hi = stats.t.interval(0.95, row["n"] - 1, loc=row["mean"],
                                  scale=row["sd"] / np.sqrt(row["n"]))  # scipy reference
        assert seg[0][1] == pytest.approx(lo) and seg[1][1] == pytest.approx(hi)
    assert "year" in ax.get_xlabel()


def test_reliability_by_wave_uses_adjacent_triplets():
    rows = F.reliability_by_wave(_report())
    assert [w for w, _, _ in rows["heise"]] == ["2016", "2017"]  # middle waves only
    assert [w for w, _, _ in rows["wiley_wiley"]] == ["2015", "2016", "2017"]


def test_response_patterns_draw_the_reported_patterns():
    """The lanes follow the JSON section: a line over each run of answered waves at
    the waves' times, a dot on each answered wave, thicker for a larger share, and the
    share written at the lane's end (a property of the drawing)."""
    report = _report()
    fig = F.response_pattern_figure(report)
    ax = fig.axes[0]
    lanes = [line for line in ax.get_lines() if line.get_linestyle() == "-"]
    runs = [(int(line.get_ydata()[0]), tuple(np.round(line.get_xdata(), 2)))
            for line in lanes]
    # "oooo", "ooo.", "o.oo": the third pattern breaks at the missed 2016 wave; a lone
    # answered wave gets a stub of 0.15 of the shortest spacing either side
    assert runs == [(0, (2015.0, 2016.0, 2017.0, 2019.0)), (1, (2015.0, 2016.0, 2017.0)),
                    (2, (2014.85, 2015.15)), (2, (2017.0, 2019.0))]
    dots = [line for line in ax.get_lines() if line.get_marker() == "o"]
    assert [len(line.get_xdata()) for line in dots] == [4, 3, 3]
    widths = [lanes[0].get_linewidth(), lanes[1].get_linewidth(), lanes[2].get_linewidth()]
    assert widths[0] > widths[1] > widths[2]
    texts = [t.get_text() for t in ax.texts]
    assert texts == [f"{100 * r['share']:.1f}%"
                     for r in report["missingness"]["patterns"]["rows"]]


def test_trajectory_sample_is_seeded_and_needs_two_observations():
    report = _report()
    rng = np.random.default_rng(0)
    values = rng.normal(size=(50, 4))
    values[:10, 1:] = np.nan  # one observation only: never drawn
    a = F.render(F.trajectory_figure, report, values, 5, 7)
    b = F.render(F.trajectory_figure, report, values, 5, 7)
    c = F.render(F.trajectory_figure, report, values, 5, 8)
    assert a == b and a != c
    fig = F.trajectory_figure(report, values, 40, 7)
    drawn = {tuple(np.round(line.get_ydata(), 9)) for line in fig.axes[0].get_lines()}
    assert len(drawn) == 40
    assert all(len(y) >= 2 for y in drawn)
    assert F.trajectory_figure(report, values, 0, 7) is None


def test_lag_rows_for_equal_and_unequal_spacing():
    equal = {"lag_profile": [{"basis": "lag", "lag": 1, "time_distance": 2.0, "mean_r": 0.5},
                             {"basis": "lag", "lag": 2, "time_distance": 4.0, "mean_r": 0.4}]}
    assert [r["time_distance"] for r in F.lag_rows(equal)] == [2.0, 4.0]
    unequal = {"lag_profile": equal["lag_profile"] + [
        {"basis": "time", "lag": None, "time_distance": 3.0, "mean_r": 0.45}]}
    assert [r["time_distance"] for r in F.lag_rows(unequal)] == [3.0]
