"""Terminal blocks for the reliability and growth sections of a measure's report."""

from __future__ import annotations

import math

from paneldiag.render.intake import time_unit
from paneldiag.render import bounds
from paneldiag.render.text import heading, number, share, table


def _p(value) -> str:
    if value is None:
        return "p –"
    return "p < 0.001" if value < 0.001 else f"p = {value:.3f}"


def _interval(low, high, digits: int = 3) -> str:
    if low is None or high is None:
        return ""
    return f" [{number(low, digits)}, {number(high, digits)}]"


def render_reliability(report: dict, color: bool) -> list[str]:
    rel = report["reliability"]
    summary = rel["summary"]
    lines = [heading("Reliability (quasi-simplex)", color)]
    value = bounds.text(summary["estimate"], summary["ci_low"], summary["ci_high"], "heise",
                        digits=3) or "–"
    lines.append(f"  Heise test-retest reliability (median of {summary['n_triplets']} wave "
                 f"triplets) {value} · basis {rel['basis'].replace('_', ' ')}")
    other = rel.get("alternative_summary")
    if other:
        lines.append(f"  Heise test-retest reliability on {rel['alternative_basis'].replace('_', ' ')} "
                     "moments " + (bounds.text(other["estimate"], other["ci_low"],
                                               other["ci_high"], "heise", digits=3) or "–"))
    if summary["n_impossible"]:
        lines.append(f"  {summary['n_impossible']} triplet(s) give impossible values "
                     "(kept as computed; reasons in the JSON report)")
    if summary.get("quartile_low") is not None:
        lines.append(f"  spread over the triplets: quartiles {number(summary['quartile_low'])} "
                     f"to {number(summary['quartile_high'])}; listed one by one in the JSON "
                     f"report: {summary['listed']}")
    if summary.get("wiley_middle_median") is not None:
        lines.append("  Wiley-Wiley (one error variance), median middle-wave reliability: "
                     f"{number(summary['wiley_middle_median'])}")
    items = rel.get("internal_consistency")
    if items:
        rows = [[w["wave"], number(w["n"]), number(w["alpha"]),
                 _interval(w["alpha_ci_low"], w["alpha_ci_high"]).strip(), number(w["omega"]),
                 "Heywood" if w["heywood"] else ""] for w in items["waves"]]
        lines.append(f"  Internal consistency of {len(items['items'])} items "
                     f"({', '.join(items['items'])}):")
        body = table(rows, ["wave", "n", "alpha", "95% interval", "omega", ""])
        lines += ["    " + line for line in body.splitlines()]
    return lines


def render_growth(report: dict, color: bool) -> list[str]:
    g = report["growth"]
    fits, rel, auto = g["trajectories"], g["slope_reliability"], g["residual_autocorrelation"]
    lines = [heading("Growth", color)]
    lines.append(f"  per-unit lines for {number(fits['n_units'])} units "
                 f"(curvature for {number(fits['n_units_curvature'])}); mean slope "
                 f"{number(fits['mean_slope'])} per {time_unit(report)}"
                 f"{_interval(fits['mean_slope_ci_low'], fits['mean_slope_ci_high'])}, "
                 f"sd {number(fits['sd_slope'])}")
    value = ("not estimable (no unit has three waves)" if rel["estimate"] is None else
             bounds.text(rel["estimate"], rel["ci_low"], rel["ci_high"], "slope_reliability",
                         digits=3))
    lines.append(f"  slope reliability of per-unit lines {value}; slope variance test "
                 f"chi2 {number(rel['chi_square'], 1)} on {rel['df']:,} df, {_p(rel['pvalue'])}")
    parts = [f"{c['component']} {share(c['share_of_change'])} ({_p(c['pvalue'])})"
             for c in g["mean_shape"]["components"]]
    basis = "ML means under MAR" if g["mean_shape"].get("basis") == "em_missing_at_random" \
        else "available-case means"
    lines.append(f"  mean shape ({basis}), share of change: " + "; ".join(parts))
    if auto["pvalue"] is None and auto["lag1"] is not None:
        lines.append(f"  residual lag-1 autocorrelation after own lines {number(auto['lag1'])}, "
                     "not testable: no unit has four waves, and with three a line's "
                     "residuals fix it in advance")
    else:
        lines.append(f"  residual lag-1 autocorrelation after own lines {number(auto['lag1'])} "
                     f"(expected {number(auto['expected_under_independence'])} under "
                     f"independence; excess {number(auto['excess'])}, {_p(auto['pvalue'])})")
    trend = g["variance_trend"]
    if trend["log_variance_slope"] is not None:
        factor = math.exp(trend["log_variance_slope"])
        lines.append(f"  variance changes ×{factor:.3f} per {time_unit(report)} "
                     f"(last/first {number(trend['ratio_last_first'])}, {_p(trend['pvalue'])})")
    icc = g["icc"]
    lines.append("  share of variance between units, ICC(1) from one-way ANOVA "
                 + (bounds.text(icc["estimate"], icc["ci_low"], icc["ci_high"], "icc",
                                digits=3) or "–"))
    return lines
