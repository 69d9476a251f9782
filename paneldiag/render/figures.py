"""Figures for the appendix, drawn only from the report dictionary.

Each figure function takes a per-measure report (or the whole report for the cross-lag
figure) and returns a matplotlib Figure, or None when the data it needs are absent. The
one exception is the trajectory sample, which needs the panel itself and is drawn only
when asked for (individual trajectories are a disclosure risk).

Style: the Okabe-Ito palette (Okabe and Ito 2008, "Color Universal Design"), which stays
distinguishable with the common colour-vision deficiencies; every series also differs
by marker and line style, so the figures read in greyscale. Output is deterministic:
the Agg backend, a fixed SVG hash salt and no dates in the file metadata.
"""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from paneldiag import distributions as dist  # noqa: E402
from paneldiag.render.intake import time_unit  # noqa: E402,F401  (used here and by others)

OKABE_ITO = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
             "#CC79A7")
BLACK, ORANGE, SKY, GREEN, YELLOW, BLUE, VERMILLION, PURPLE = OKABE_ITO
SERIES = ((BLUE, "o", "-"), (VERMILLION, "s", "--"), (GREEN, "^", "-."), (PURPLE, "D", ":"),
          (ORANGE, "v", (0, (5, 1))), (SKY, "P", (0, (3, 1, 1, 1))), (BLACK, "X", "-"))
RC = {
    "svg.hashsalt": "paneldiag",
    "svg.fonttype": "path",
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "figure.dpi": 100,
}
PNG_DPI = 150


def _figure(width: float = 6.0, height: float = 3.4) -> tuple[Figure, object]:
    fig = Figure(figsize=(width, height), layout="constrained")
    return fig, fig.add_subplot()


def wave_axis(report: dict) -> str:
    return f"wave, placed at its time ({time_unit(report)}s)"


def _wave_times(report: dict) -> dict[str, float]:
    panel = report.get("panel", {})
    return dict(zip(panel.get("waves", []), panel.get("times", [])))


def _finite(*values) -> bool:
    return all(v is not None and np.isfinite(v) for v in values)


# ----------------------------------------------------------------------------- per measure

def retention_figure(report: dict) -> Figure | None:
    rows = (report.get("attrition") or {}).get("retention")
    times = _wave_times(report)
    if not rows or not times:
        return None
    fig, ax = _figure()
    x = [times.get(r["wave"], np.nan) for r in rows]
    for (color, marker, style), key, label in zip(
            SERIES, ("retained_share", "response_share"),
            ("retained (of the units that entered before the wave)", "responding (of all units)")):
        y = [100 * r[key] if r.get(key) is not None else np.nan for r in rows]
        if np.isfinite(y).any():
            ax.plot(x, y, color=color, marker=marker, linestyle=style, label=label)
    ax.set_xticks(x, [r["wave"] for r in rows])
    ax.set_ylim(0, 105)
    ax.set_xlabel(wave_axis(report))
    ax.set_ylabel("share of units (%)")
    ax.set_title("Retention and response by wave")
    ax.legend(loc="lower left", frameon=False)
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


def _pattern_rows(report: dict):
    """(pattern string, share, count) rows of the response-pattern table, if any."""
    patterns = (report.get("missingness") or {}).get("patterns")
    if isinstance(patterns, dict):
        patterns = patterns.get("rows") or patterns.get("patterns")
    if not isinstance(patterns, list) or not patterns:
        return None
    out = []
    for row in patterns:
        text = row.get("pattern")
        if not isinstance(text, str):
            continue
        out.append((text, row.get("share"), row.get("n")))
    return out or None


def _answered_runs(marks: list[str]) -> list[tuple[int, int]]:
    """(first, last) wave index of each run of consecutive answered waves."""
    runs, begin = [], None
    for j, mark in enumerate(marks + ["."]):
        seen = mark in "1xXoO+"
        if seen and begin is None:
            begin = j
        elif not seen and begin is not None:
            runs.append((begin, j - 1))
            begin = None
    return runs


def lane_width(share: float) -> float:
    """Line width (points) of a pattern's lane: its area grows with its share."""
    return 1.5 + 10.0 * float(np.sqrt(max(share, 0.0)))


def response_pattern_figure(report: dict, max_rows: int = 12) -> Figure | None:
    """The most frequent response patterns as lanes along the wave times: a line where
    waves are answered in a row, a gap where a wave is missed, a dot on every answered
    wave; the lane's thickness grows with its share of units, written at its end."""
    rows = _pattern_rows(report)
    waves = report.get("panel", {}).get("waves", [])
    if not rows or not waves:
        return None
    rows = [r for r in rows if r[1] is not None][:max_rows]
    if not rows:
        return None
    times = _wave_times(report)
    x = np.array([times.get(w, j) if times.get(w) is not None else j
                  for j, w in enumerate(waves)], dtype=float)
    fig, ax = _figure(6.4, 1.4 + 0.34 * (len(rows) + 1))
    stub = 0.15 * (float(np.min(np.diff(x))) if len(x) > 1 else 1.0)  # a lone wave's lane
    labels = []
    for i, (pattern, share, _) in enumerate(rows):
        marks = [c for c in pattern if c not in " |"][:len(waves)]
        for first, last in _answered_runs(marks):
            span = x[first:last + 1] if last > first else [x[first] - stub, x[first] + stub]
            ax.plot(span, [i] * len(span), color=BLUE, linewidth=lane_width(share),
                    solid_capstyle="round")
        seen = [j for j, mark in enumerate(marks) if mark in "1xXoO+"]
        ax.plot(x[seen], [i] * len(seen), linestyle="none", marker="o", markersize=3,
                color=BLACK)
        ax.text(x[-1] + 0.04 * (x[-1] - x[0] or 1), i, f"{100 * share:.1f}%",
                va="center", fontsize=7)
        labels.append(f"pattern {i + 1}")
    rest = ((report.get("missingness") or {}).get("patterns") or {}).get("remainder") or {}
    if _finite(rest.get("share"), rest.get("n_patterns")) and rest["share"] > 0:
        i = len(rows)
        ax.plot([x[0], x[-1]], [i, i], color="#bbbbbb", linestyle=(0, (2, 2)),
                linewidth=lane_width(rest["share"]))
        ax.text(x[-1] + 0.04 * (x[-1] - x[0] or 1), i, f"{100 * rest['share']:.1f}%",
                va="center", fontsize=7)
        labels.append(f"{rest['n_patterns']} others")
    ax.set_yticks(range(len(labels)), labels)
    ax.set_ylim(len(labels) - 0.4, -0.6)
    ax.set_xticks(x, waves, rotation=45 if len(waves) > 8 else 0)
    ax.set_xlim(x[0] - 0.03 * (x[-1] - x[0] or 1), x[-1] + 0.14 * (x[-1] - x[0] or 1))
    ax.set_xlabel(wave_axis(report) + "; line: answered in a row, gap: missed")
    ax.spines["left"].set_visible(False)
    ax.tick_params(axis="y", length=0)
    ax.set_title("Response patterns, most frequent first (share of units at the right)")
    return fig


def wave_means_figure(report: dict) -> Figure | None:
    """Wave means with a 95% t confidence interval (mean +- t_{n-1} sd / sqrt(n); Student
    1908, Biometrika 6:1-25) and a band of +- 1 SD, against the actual wave times (so an
    uneven gap shows)."""
    rows = report.get("wave_profile")
    times = _wave_times(report)
    if not rows or not times:
        return None
    keep = [r for r in rows if (r.get("n") is None or r["n"] > 1)   # None: withheld
            and _finite(r.get("mean"), r.get("sd"))]
    if not keep:
        return None
    x = np.array([times[r["wave"]] for r in keep], dtype=float)
    mean = np.array([r["mean"] for r in keep])
    sd = np.array([r["sd"] for r in keep])
    n = np.array([r["n"] for r in keep], dtype=float)
    half = dist.t_ppf(0.975, n - 1) * sd / np.sqrt(n)
    fig, ax = _figure()
    ax.fill_between(x, mean - sd, mean + sd, color=SKY, alpha=0.3, linewidth=0,
                    label="mean ± 1 SD")
    for edge in (mean - sd, mean + sd):
        ax.plot(x, edge, color=SKY, linestyle=":", linewidth=1.0)
    ax.errorbar(x, mean, yerr=half, color=BLUE, marker="o", linestyle="-", capsize=3,
                label="mean with 95% CI")
    ax.set_xticks(x, [r["wave"] for r in keep])
    ax.set_xlabel(wave_axis(report))
    ax.set_ylabel(f"{report.get('measure', 'measure')}")
    ax.set_title("Wave means")
    ax.legend(loc="best", frameon=False)
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


def _matrix(report: dict):
    corr = report.get("correlation")
    if isinstance(corr, dict) and isinstance(corr.get("methods"), dict):
        node = corr["methods"].get(corr.get("primary")) or next(iter(corr["methods"].values()))
        if isinstance(node, dict) and isinstance(node.get("matrix"), list):
            matrix = np.array([[np.nan if v is None else v for v in row]
                               for row in node["matrix"]], dtype=float)
            return matrix, corr.get("waves")
    if isinstance(corr, dict):
        for key in ("matrix", "r", "pearson", "values"):
            if isinstance(corr.get(key), list):
                return np.array(corr[key], dtype=float), corr.get("waves")
    if isinstance(corr, list) and corr and isinstance(corr[0], list):
        return np.array(corr, dtype=float), None
    return None, None


def correlation_figure(report: dict) -> Figure | None:
    matrix, waves = _matrix(report)
    waves = waves or report.get("panel", {}).get("waves")
    if matrix is None or matrix.ndim != 2 or not waves or len(waves) != matrix.shape[0]:
        return None
    size = min(6.0, 2.2 + 0.45 * len(waves))
    fig, ax = _figure(size + 0.9, size)
    image = ax.imshow(np.ma.masked_invalid(matrix), cmap="cividis", vmin=min(0.0,
                      np.nanmin(matrix)), vmax=1.0)
    if len(waves) <= 12:
        for i in range(len(waves)):
            for j in range(len(waves)):
                if np.isfinite(matrix[i, j]):
                    light = image.norm(matrix[i, j]) > 0.6
                    ax.text(j, i, f"{matrix[i, j]:.2f}", ha="center", va="center", fontsize=7,
                            color=BLACK if light else "white")
    ax.set_xticks(range(len(waves)), waves, rotation=45)
    ax.set_yticks(range(len(waves)), waves)
    ax.set_xlabel("wave")
    ax.set_ylabel("wave")
    ax.set_title("Correlations between waves")
    fig.colorbar(image, ax=ax, shrink=0.8, label="correlation")
    return fig


def decay_models(report: dict) -> dict[str, tuple[float, float, float]]:
    """(a, b, rho) of the fitted decay models r(d) = a + b rho^d, by model name."""
    models = (report.get("decay_fit") or {}).get("models") or {}
    out = {}
    for name in ("full", "flat", "pure_decay"):
        m = models.get(name)
        if isinstance(m, dict) and _finite(m.get("a"), m.get("b")):
            rho = m.get("rho")
            out[name] = (float(m["a"]), float(m["b"]), 0.0 if rho is None else float(rho))
    return out


def lag_rows(report: dict) -> list[dict]:
    """The lag-profile rows by time distance (or by lag when no time basis is given)."""
    rows = [r for r in (report.get("lag_profile") or []) if _finite(r.get("mean_r"))]
    timed = [r for r in rows if r.get("basis") == "time" and _finite(r.get("time_distance"))]
    if timed:  # unequally spaced waves: the rows by time distance
        return timed
    by_lag = [r for r in rows if r.get("basis") in (None, "lag")]
    return [dict(r, time_distance=r["time_distance"] if _finite(r.get("time_distance"))
                 else r.get("lag")) for r in by_lag
            if _finite(r.get("time_distance")) or _finite(r.get("lag"))]


def lag_decay_figure(report: dict) -> Figure | None:
    """Mean correlation by time distance with CIs, the fitted curve a + b rho^d, and the
    two reference fits the decay screen reports: flat (no decay: compound symmetry) and
    pure decay (no stable part: a simplex)."""
    rows = lag_rows(report)
    if not rows:
        return None
    by_lag = (report.get("decay_fit") or {}).get("distance") == "lag" and \
        all(_finite(r.get("lag")) for r in rows)  # the fit's d counts waves
    d = np.array([r["lag"] if by_lag else r["time_distance"] for r in rows], dtype=float)
    r = np.array([r["mean_r"] for r in rows])
    lo = np.array([np.nan if r_.get("ci_low") is None else r_["ci_low"] for r_ in rows])
    hi = np.array([np.nan if r_.get("ci_high") is None else r_["ci_high"] for r_ in rows])
    fig, ax = _figure()
    err = np.vstack([np.where(np.isfinite(lo), r - lo, 0), np.where(np.isfinite(hi), hi - r, 0)])
    ax.errorbar(d, r, yerr=err, color=BLACK, marker="o", linestyle="none", capsize=3,
                label="mean correlation, 95% CI", zorder=3)
    grid = np.linspace(0, d.max() * 1.05, 200)
    styles = {"full": (BLUE, "-", r"fitted: $a + b\,\rho^{d}$"),
              "flat": (VERMILLION, "--", "flat reference (no decay)"),
              "pure_decay": (GREEN, ":", "pure decay (no stable part)")}
    for name, (a, b, rho) in decay_models(report).items():
        color, style, label = styles[name]
        curve = a + b * (rho ** grid if rho else (grid == 0).astype(float))
        ax.plot(grid[1:], curve[1:], color=color, linestyle=style, label=label)
    ax.set_xlim(left=0)
    low = np.nanmin(lo) if np.isfinite(lo).any() else np.nanmin(r)
    ax.set_ylim(min(0.0, low) - 0.02, 1.0)
    ax.set_xlabel("lag (waves apart)" if by_lag else
                  f"time distance between waves ({time_unit(report)}s)")
    ax.set_ylabel("correlation")
    ax.set_title("Decay of correlation with distance between waves")
    ax.legend(loc="lower left", frameon=False)
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


def _consecutive(report: dict, method: str) -> dict[str, dict]:
    """Triplets of adjacent waves from the reliability section, by their middle wave."""
    waves = report.get("panel", {}).get("waves", [])
    position = {w: i for i, w in enumerate(waves)}
    out = {}
    for row in (report.get("reliability") or {}).get(method) or []:
        trip = row.get("waves") if isinstance(row, dict) else None
        if not trip or len(trip) != 3 or row.get("impossible"):
            continue
        idx = [position.get(w) for w in trip]
        if None not in idx and idx[1] == idx[0] + 1 and idx[2] == idx[1] + 1:
            out[trip[1]] = row
    return out


def reliability_by_wave(report: dict) -> dict[str, list[tuple[str, float, float]]]:
    """(wave, estimate, se) per method from the triplets of adjacent waves: Heise's
    estimate belongs to the middle wave of its triplet; Wiley and Wiley give one per
    wave of the triplet (the middle one is used, and the end waves take the first and
    last triplet's)."""
    out = {}
    heise = _consecutive(report, "heise")
    rows = [(w, r["reliability"], r.get("reliability_se")) for w, r in heise.items()
            if _finite(r.get("reliability"))]
    if rows:
        out["heise"] = rows
    wiley = _consecutive(report, "wiley_wiley")
    if wiley:
        waves = report["panel"]["waves"]
        trips = list(wiley.items())
        picks = [(trips[0][1], 0, waves[waves.index(trips[0][0]) - 1])]
        picks += [(r, 1, w) for w, r in trips]
        picks += [(trips[-1][1], 2, waves[waves.index(trips[-1][0]) + 1])]
        rows = []
        for row, k, wave in picks:
            est, se = row.get("reliability"), row.get("reliability_se")
            if isinstance(est, list) and _finite(est[k]):
                rows.append((wave, est[k], se[k] if isinstance(se, list) else None))
        rows = list({w: (w, e, s) for w, e, s in rows}.values())
        if rows:
            out["wiley_wiley"] = rows
    return out


def reliability_figure(report: dict) -> Figure | None:
    """Reliability by wave from triplets of adjacent waves, with +- 1.96 SE intervals."""
    methods = reliability_by_wave(report)
    times = _wave_times(report)
    if not methods or not times:
        return None
    fig, ax = _figure()
    names = {"heise": "Heise (1969), equal reliabilities", "wiley_wiley":
             "Wiley and Wiley (1970), equal error variances"}
    spacing = min(np.diff(sorted(times.values())), default=1.0)
    offsets = np.linspace(-0.06, 0.06, len(methods)) * spacing
    q = dist.norm_ppf(0.975)
    for (method, rows), (color, marker, style), off in zip(methods.items(), SERIES, offsets):
        x = np.array([times[w] for w, _, _ in rows]) + off
        y = np.array([e for _, e, _ in rows])
        se = np.array([np.nan if s is None else s for _, _, s in rows])
        err = np.where(np.isfinite(se), q * se, 0.0)
        ax.errorbar(x, y, yerr=err, color=color, marker=marker, linestyle=style, capsize=3,
                    label=names.get(method, method))
    ax.set_xticks(list(times.values()), list(times))
    ax.set_ylim(0, 1.05)
    ax.set_xlabel(wave_axis(report))
    ax.set_ylabel("reliability")
    ax.set_title("Reliability by wave (triplets of adjacent waves), 95% CIs")
    ax.legend(loc="lower left", frameon=False)
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


def slope_figure(report: dict) -> Figure | None:
    """The spread of per-unit slopes: the normal curve with the reported mean and SD of
    the estimated per-unit slopes, against the one with the estimated true-slope
    variance (after removing sampling error); their ratio is the slope reliability."""
    growth = report.get("growth") or {}
    traj, rel = growth.get("trajectories") or {}, growth.get("slope_reliability") or {}
    mean, sd = traj.get("mean_slope"), traj.get("sd_slope")
    if not _finite(mean, sd) or sd <= 0:
        return None
    fig, ax = _figure()
    grid = np.linspace(mean - 3.5 * sd, mean + 3.5 * sd, 400)
    ax.plot(grid, dist.norm_pdf(grid, mean, sd), color=BLUE, linestyle="-",
            label="estimated per-unit slopes (mean, SD)")
    true_var = rel.get("slope_variance")
    if _finite(true_var) and true_var > 0:
        centre = rel.get("pooled_slope") if _finite(rel.get("pooled_slope")) else mean
        ax.plot(grid, dist.norm_pdf(grid, centre, np.sqrt(true_var)), color=VERMILLION,
                linestyle="--", label="true slopes (sampling error removed)")
    lo, hi = traj.get("mean_slope_ci_low"), traj.get("mean_slope_ci_high")
    if _finite(lo, hi):
        ax.axvspan(lo, hi, color=GREEN, alpha=0.25, hatch="//", label="95% CI of the mean slope")
    ax.axvline(0, color="#999999", linewidth=0.6)
    ax.set_xlabel(f"slope ({report.get('measure', 'measure')} per {time_unit(report)})")
    ax.set_ylabel("density (normal curve)")
    ax.set_title("Spread of per-unit growth slopes")
    ax.legend(loc="upper left", frameon=False)
    return fig


def group_figure(report: dict) -> Figure | None:
    """Dot-and-whisker plot of each compared figure by group."""
    comparison = (report.get("groups") or {}).get("comparison") or []
    comparison = [c for c in comparison
                  if any(_finite(v.get("estimate")) for v in c.get("by_group", []))]
    if not comparison:
        return None
    fig = Figure(figsize=(6.4, 0.6 + 1.9 * len(comparison)), layout="constrained")
    axes = np.atleast_1d(fig.subplots(len(comparison), 1))
    for ax, comp in zip(axes, comparison):
        values = comp["by_group"]
        ys = np.arange(len(values))
        for y, v, (color, marker, _) in zip(ys, values, SERIES * 4):
            if not _finite(v.get("estimate")):
                continue
            lo, hi = v.get("ci_low"), v.get("ci_high")
            if _finite(lo, hi):
                ax.plot([lo, hi], [y, y], color=color, linewidth=1.4)
            ax.plot([v["estimate"]], [y], color=color, marker=marker, linestyle="none")
        ax.set_yticks(ys, [v["group"] for v in values])
        ax.invert_yaxis()
        ax.set_xlabel(comp["label"])
        ax.grid(axis="x", color="#dddddd", linewidth=0.6)
    fig.suptitle("Key figures by group, with 95% CIs", fontsize=10)
    return fig


def trajectory_figure(report: dict, values: np.ndarray, n_sample: int, seed: int) -> Figure | None:
    """A seeded random sample of ``n_sample`` units' observed trajectories."""
    times = _wave_times(report)
    if n_sample <= 0 or values.size == 0 or not times:
        return None
    seen = np.flatnonzero((~np.isnan(values)).sum(axis=1) >= 2)
    if len(seen) == 0:
        return None
    rng = np.random.default_rng(seed)
    pick = np.sort(rng.choice(seen, size=min(n_sample, len(seen)), replace=False))
    x = np.array(list(times.values()), dtype=float)
    fig, ax = _figure()
    for i, unit in enumerate(pick):
        y = values[unit]
        ok = ~np.isnan(y)
        color, marker, style = SERIES[i % len(SERIES)]
        ax.plot(x[ok], y[ok], color=color, marker=marker, linestyle=style, linewidth=0.9,
                markersize=3.5, alpha=0.85)
    ax.set_xticks(x, list(times))
    ax.set_xlabel(wave_axis(report))
    ax.set_ylabel(report.get("measure", "measure"))
    ax.set_title(f"Observed trajectories of {len(pick)} randomly drawn units")
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


def cross_lag_figure(pair: dict) -> Figure | None:
    rows = [r for r in pair.get("lags", []) if _finite(r["x_leads"]["r"]) or
            _finite(r["y_leads"]["r"])]
    if not rows:
        return None
    fig, ax = _figure()
    for key, label, (color, marker, style), off in (
            ("x_leads", f"{pair['x']} earlier, {pair['y']} later", SERIES[0], -0.06),
            ("y_leads", f"{pair['y']} earlier, {pair['x']} later", SERIES[1], 0.06)):
        pts = [(r["lag"] + off, r[key]) for r in rows if _finite(r[key]["r"])]
        x = np.array([p[0] for p in pts])
        y = np.array([p[1]["r"] for p in pts])
        lo = np.array([p[1]["ci_low"] if _finite(p[1]["ci_low"]) else p[1]["r"] for p in pts])
        hi = np.array([p[1]["ci_high"] if _finite(p[1]["ci_high"]) else p[1]["r"] for p in pts])
        ax.errorbar(x, y, yerr=np.vstack([y - lo, hi - y]), color=color, marker=marker,
                    linestyle=style, capsize=3, label=label)
    ax.axhline(0, color="#999999", linewidth=0.6)
    ax.set_xticks([r["lag"] for r in rows])
    ax.set_xlabel("lag (waves apart)")
    ax.set_ylabel("correlation")
    ax.set_title(f"Cross-lagged correlations: {pair['x']} and {pair['y']}")
    ax.legend(loc="best", frameon=False)
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    return fig


MEASURE_FIGURES = (
    ("retention", retention_figure,
     "Retention (of the units that entered before a wave, the share still responding "
     "there) and response (share of all units responding) by wave."),
    ("response_patterns", response_pattern_figure,
     "The most frequent response patterns as lanes along the wave times: a line where "
     "waves are answered in a row, a gap where one is missed; thicker lanes hold more "
     "units. Patterns held by fewer units than the minimum cell size are not shown."),
    ("wave_means", wave_means_figure,
     "Wave means with 95% confidence intervals and a band of one standard deviation, "
     "placed at the actual wave times."),
    ("correlation", correlation_figure, "Correlations between waves."),
    ("lag_decay", lag_decay_figure,
     "Mean correlation by time distance (95% CIs) with the fitted decay curve and two "
     "references: flat (no decay) and pure decay (no stable part)."),
    ("reliability", reliability_figure,
     "Reliability by wave from triplets of adjacent waves, with 95% CIs (1.96 jackknife "
     "SEs)."),
    ("slopes", slope_figure,
     "Spread of per-unit growth slopes: normal curves with the reported mean and SD of the "
     "estimated slopes and with the estimated true-slope variance."),
    ("groups", group_figure, "Key figures by group with 95% confidence intervals."),
)


def save(fig: Figure) -> tuple[bytes, bytes]:
    """(PNG bytes, SVG bytes), deterministic."""
    with plt.rc_context(RC):
        png, svg = io.BytesIO(), io.BytesIO()
        fig.savefig(png, format="png", dpi=PNG_DPI, metadata={"Software": None})
        fig.set_layout_engine("none")  # keep the layout just computed for the SVG
        fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": None})
    return png.getvalue(), svg.getvalue()


def render(draw, *args) -> tuple[bytes, bytes] | None:
    """Draw a figure under the house style and return its PNG and SVG bytes."""
    with plt.rc_context(RC):
        fig = draw(*args)
        if fig is None:
            return None
        return save(fig)
