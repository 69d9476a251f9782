"""Figures of the appendix (paneldiag.render.figures), drawn from report dictionaries.

Sources of the checks: the report's JSON section each figure draws (a screen of the
demo panel: the drawn artists, read back, carry its numbers); the 95% t interval of a
wave mean against scipy.stats.t.interval and the normal curves against
scipy.stats.norm.pdf (reference library); the Okabe-Ito palette values as published
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


# ------------------------------------------------------- figures against a real report
# Each figure drawn from a screen of the demo panel is read back (line data, image
# array, text labels, error-bar ends) and compared with the numbers of the JSON section
# it draws: the figure shows what the report says. Tolerance 1e-9: the figures compute
# in doubles from the same JSON numbers (a share as a percentage, a curve on a grid).

@pytest.fixture(scope="module")
def demo_report(demo_screen):
    """The demo's full screen (conftest.demo_screen): weighted, by district."""
    return demo_screen[1]


def _nan(value):
    return np.nan if value is None else value


def _error_bars(container):
    """(x, y, lower ends, upper ends) of a matplotlib ErrorbarContainer."""
    x, y = container.lines[0].get_data()
    segments = container.lines[2][0].get_segments()
    return (np.asarray(x, float), np.asarray(y, float), np.array([s[0][1] for s in segments]),
            np.array([s[1][1] for s in segments]))


def test_retention_figure_draws_the_retention_table(demo_report):
    rep = demo_report["measures"]["trust"]
    rows = rep["attrition"]["retention"]
    ax = F.retention_figure(rep).axes[0]
    retained, responding = ax.get_lines()
    times = [rep["panel"]["times"][rep["panel"]["waves"].index(r["wave"])] for r in rows]
    for line, key in ((retained, "retained_share"), (responding, "response_share")):
        np.testing.assert_allclose(line.get_xdata(), times)
        np.testing.assert_allclose(line.get_ydata(), [100 * _nan(r[key]) for r in rows],
                                   rtol=1e-9)
    assert [t.get_text() for t in ax.get_xticklabels()] == [r["wave"] for r in rows]


def test_response_pattern_lanes_follow_the_pattern_shares(demo_report):
    """The lanes against the JSON pattern table: lane i is the i-th reported pattern;
    its segments run over the pattern's runs of answered waves at the waves' times, its
    dots sit on the answered waves, its width is lane_width of its share (so the lanes'
    order of thickness is the order of the shares), its label is the share in percent;
    the grey dashed lane is the remainder of small patterns."""
    rep = demo_report["measures"]["trust"]
    table = rep["missingness"]["patterns"]
    rows = [r for r in table["rows"] if r["share"] is not None][:12]
    times = np.array(rep["panel"]["times"])
    ax = F.response_pattern_figure(rep).axes[0]
    lines = ax.get_lines()
    lanes = [ln for ln in lines if ln.get_linestyle() == "-"]
    dots = [ln for ln in lines if ln.get_marker() == "o"]
    stub = 0.15 * np.min(np.diff(times))
    expected = []
    for i, row in enumerate(rows):
        answered = np.array([c == "o" for c in row["pattern"]])
        edges = np.flatnonzero(np.diff(np.concatenate([[0], answered.astype(int), [0]])))
        for first, stop in zip(edges[::2], edges[1::2]):
            span = times[first:stop] if stop - first > 1 else \
                [times[first] - stub, times[first] + stub]
            expected.append((i, tuple(np.round(span, 6)), row["share"]))
        assert dots[i].get_ydata().tolist() == [i] * answered.sum()
        np.testing.assert_allclose(dots[i].get_xdata(), times[answered])
    drawn = [(int(ln.get_ydata()[0]), tuple(np.round(ln.get_xdata(), 6)), ln.get_linewidth())
             for ln in lanes]
    assert [(i, span) for i, span, _ in drawn] == [(i, span) for i, span, _ in expected]
    for (_, _, width), (_, _, share) in zip(drawn, expected):
        assert ((width - 1.5) / 10) ** 2 == pytest.approx(share, rel=1e-9)
    shares = [r["share"] for r in rows]
    widths = [next(w for i, _, w in drawn if i == k) for k in range(len(rows))]
    assert np.argsort(widths, kind="stable").tolist() == \
        np.argsort(shares, kind="stable").tolist()
    rest = table["remainder"]
    grey = [ln for ln in lines if ln.get_color() == "#bbbbbb"]
    assert len(grey) == 1 and ((grey[0].get_linewidth() - 1.5) / 10) ** 2 == \
        pytest.approx(rest["share"], rel=1e-9)
    assert [t.get_text() for t in ax.texts] == \
        [f"{100 * s:.1f}%" for s in shares + [rest["share"]]]
    assert [t.get_text() for t in ax.get_yticklabels()][-1] == f"{rest['n_patterns']} others"


def test_wave_means_figure_draws_the_wave_profile(demo_report):
    rep = demo_report["measures"]["trust"]
    rows = rep["wave_profile"]
    ax = F.wave_means_figure(rep).axes[0]
    x, y, low, high = _error_bars(ax.containers[0])
    np.testing.assert_allclose(x, rep["panel"]["times"])
    np.testing.assert_allclose(y, [r["mean"] for r in rows], rtol=1e-9)
    for row, lo, hi in zip(rows, low, high):
        ref = stats.t.interval(0.95, row["n"] - 1, loc=row["mean"],
                               scale=row["sd"] / np.sqrt(row["n"]))  # scipy reference
        assert (lo, hi) == pytest.approx(ref, rel=1e-9)
    band = [ln for ln in ax.get_lines() if ln.get_linestyle() == ":"]
    np.testing.assert_allclose(band[0].get_ydata(), [r["mean"] - r["sd"] for r in rows])
    np.testing.assert_allclose(band[1].get_ydata(), [r["mean"] + r["sd"] for r in rows])


def test_correlation_figure_draws_the_primary_matrix(demo_report):
    rep = demo_report["measures"]["trust"]
    corr = rep["correlation"]
    matrix = np.array(corr["methods"][corr["primary"]]["matrix"], dtype=float)
    ax = F.correlation_figure(rep).axes[0]
    # source: the report's JSON matrix; the image holds it unchanged
    np.testing.assert_allclose(ax.images[0].get_array(), matrix, rtol=1e-12)
    assert [t.get_text() for t in ax.texts] == [f"{v:.2f}" for v in matrix.ravel()]
    assert [t.get_text() for t in ax.get_yticklabels()] == corr["waves"]


def test_lag_decay_figure_draws_the_lag_profile_and_the_fits(demo_report):
    rep = demo_report["measures"]["trust"]
    fit = rep["decay_fit"]
    assert fit["distance"] == "time"   # the demo skips 2020: rows by time distance
    rows = [r for r in rep["lag_profile"] if r["basis"] == "time"]
    ax = F.lag_decay_figure(rep).axes[0]
    x, y, low, high = _error_bars(ax.containers[0])
    np.testing.assert_allclose(x, [r["time_distance"] for r in rows])
    np.testing.assert_allclose(y, [r["mean_r"] for r in rows], rtol=1e-12)
    np.testing.assert_allclose(low, [r["ci_low"] for r in rows], rtol=1e-9)
    np.testing.assert_allclose(high, [r["ci_high"] for r in rows], rtol=1e-9)
    curves = [ln for ln in ax.get_lines() if not ln.get_label().startswith("_")]
    assert len(curves) == 3
    for line, name in zip(curves, ("full", "flat", "pure_decay")):
        model = fit["models"][name]
        d = line.get_xdata()
        rho = model["rho"] if model["rho"] is not None else 0.0
        np.testing.assert_allclose(line.get_ydata(), model["a"] + model["b"] * rho ** d,
                                   rtol=1e-9)


def test_reliability_figure_draws_the_adjacent_triplets(demo_report):
    rep = demo_report["measures"]["trust"]
    waves, times = rep["panel"]["waves"], rep["panel"]["times"]
    heise = [r for r in rep["reliability"]["heise"]
             if [waves.index(w) for w in r["waves"]] == list(range(
                 waves.index(r["waves"][0]), waves.index(r["waves"][0]) + 3))]
    ax = F.reliability_figure(rep).axes[0]
    x, y, low, high = _error_bars(ax.containers[0])
    assert len(x) == len(heise) > 0
    spacing = np.min(np.diff(times))
    np.testing.assert_allclose(x, [times[waves.index(r["waves"][1])] - 0.06 * spacing
                                   for r in heise])
    np.testing.assert_allclose(y, [r["reliability"] for r in heise], rtol=1e-12)
    # 95% interval: 1.96 SE, the normal quantile from scipy.stats.norm.ppf
    half = stats.norm.ppf(0.975) * np.array([r["reliability_se"] for r in heise])
    np.testing.assert_allclose(high - y, half, rtol=1e-9)
    np.testing.assert_allclose(y - low, half, rtol=1e-9)


def test_slope_figure_draws_the_slope_spread(demo_report):
    rep = demo_report["measures"]["trust"]
    traj, rel = rep["growth"]["trajectories"], rep["growth"]["slope_reliability"]
    ax = F.slope_figure(rep).axes[0]
    estimated, true = [ln for ln in ax.get_lines() if not ln.get_label().startswith("_")]
    grid = estimated.get_xdata()
    # normal curves of the reported moments (scipy.stats.norm.pdf reference)
    np.testing.assert_allclose(estimated.get_ydata(),
                               stats.norm.pdf(grid, traj["mean_slope"], traj["sd_slope"]),
                               rtol=1e-9)
    np.testing.assert_allclose(true.get_ydata(),
                               stats.norm.pdf(grid, rel["pooled_slope"],
                                              np.sqrt(rel["slope_variance"])), rtol=1e-9)
    span = ax.patches[0]   # the mean slope's interval, an axvspan rectangle
    assert (span.get_x(), span.get_x() + span.get_width()) == pytest.approx(
        (traj["mean_slope_ci_low"], traj["mean_slope_ci_high"]), rel=1e-9)


def test_group_figure_draws_each_group_estimate(demo_report):
    rep = demo_report["measures"]["trust"]
    comparison = [c for c in rep["groups"]["comparison"]
                  if any(v["estimate"] is not None for v in c["by_group"])]
    fig = F.group_figure(rep)
    assert len(fig.axes) == len(comparison)
    for ax, comp in zip(fig.axes, comparison):
        shown = [v for v in comp["by_group"] if v["estimate"] is not None]
        lines = ax.get_lines()
        points = [ln for ln in lines if ln.get_linestyle() == "None"]
        whiskers = [ln for ln in lines if ln.get_linestyle() != "None"]
        # source: the JSON comparison rows, drawn unchanged (dots and 95% whiskers)
        np.testing.assert_allclose([p.get_xdata()[0] for p in points],
                                   [v["estimate"] for v in shown], rtol=1e-12)
        np.testing.assert_allclose([w.get_xdata() for w in whiskers],
                                   [[v["ci_low"], v["ci_high"]] for v in shown
                                    if v["ci_low"] is not None], rtol=1e-12)
        assert [t.get_text() for t in ax.get_yticklabels()] == \
            [v["group"] for v in comp["by_group"]]
        assert ax.get_xlabel() == comp["label"]


def test_cross_lag_figure_draws_both_directions(demo_report):
    pair = demo_report["cross_lag"][0]
    ax = F.cross_lag_figure(pair).axes[0]
    for container, key, offset in zip(ax.containers, ("x_leads", "y_leads"), (-0.06, 0.06)):
        rows = [r for r in pair["lags"] if r[key]["r"] is not None]
        x, y, low, high = _error_bars(container)
        # source: the JSON cross-lag rows; the two directions sit 0.06 either side
        np.testing.assert_allclose(x, [r["lag"] + offset for r in rows])
        np.testing.assert_allclose(y, [r[key]["r"] for r in rows], rtol=1e-12)
        np.testing.assert_allclose(low, [_nan(r[key]["ci_low"]) for r in rows], rtol=1e-9)
        np.testing.assert_allclose(high, [_nan(r[key]["ci_high"]) for r in rows], rtol=1e-9)
