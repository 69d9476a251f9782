"""The concise terminal summary: key figures of each area on a few lines, the by-group
comparison and the cross-lag screen. Each area's full block stays in its own module
and is shown with --details."""

from __future__ import annotations

from paneldiag.render import bounds
from paneldiag.render.figures import lag_rows, time_unit
from paneldiag.render.intake import distance, wave_span
from paneldiag.render.text_attrition import entry_line
from paneldiag.render.text_dependence import SHAPES
from paneldiag.render.text_distribution import distribution_lines


def _ok(*values) -> bool:
    return all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)


def _est(node, digits: int = 2, key: str = "estimate") -> str | None:
    if not isinstance(node, dict) or not _ok(node.get(key)):
        return None
    text = f"{node[key]:.{digits}f}"
    if _ok(node.get("ci_low"), node.get("ci_high")):
        text += f" [{node['ci_low']:.{digits}f}, {node['ci_high']:.{digits}f}]"
    return text


def _p(p) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def key_figures(report: dict, heading) -> list[str]:
    """A few lines with the figures a reader looks at first, each only when present."""
    lines = []
    panel, ledger = report.get("panel") or {}, report.get("ledger") or {}
    if panel:
        text = f"{panel['n_units']:,} units × {panel['n_waves']} waves ({wave_span(panel)})"
        if _ok(ledger.get("rows_read"), ledger.get("rows_used")):
            text += f"; rows used {ledger['rows_used']:,} of {ledger['rows_read']:,}"
        lines.append(text)
    parts = []
    entry = (report.get("attrition") or {}).get("entry") or {}
    if entry.get("design"):
        text = entry_line(entry, short=True)
        if _ok(entry.get("retained_share")):
            text += (f"; retained from entry to the end of follow-up "
                     f"{100 * entry['retained_share']:.1f}%")
        parts.append(text)
    model = ((report.get("attrition") or {}).get("selective") or {}).get("model") or {}
    if model.get("fitted") and _ok(model.get("pvalue")):
        parts.append(f"dropout odds ratio per SD {_est(model, key='odds_ratio_per_sd')}, "
                     f"{_p(model['pvalue'])}")
    mcar = (report.get("missingness") or {}).get("little_mcar") or {}
    if _ok(mcar.get("pvalue")):
        parts.append(f"Little's MCAR {_p(mcar['pvalue'])}")
    if parts:
        lines.append(" · ".join(parts))
    parts = []
    rows = lag_rows(report)
    if rows:
        d = rows[0]["time_distance"]
        r = bounds.text(rows[0]["mean_r"], rows[0].get("ci_low"), rows[0].get("ci_high"),
                        "correlation", -1.0, 1.0)
        parts.append(f"lag-profile mean r at distance {distance(d, report.get('panel'))}: {r}")
    fit = report.get("decay_fit") or {}
    if fit.get("shape"):
        # the shape only: the verdict table gives the structure fit's shares
        parts.append(f"lag profile {SHAPES.get(fit['shape'], fit['shape'])}")
    if parts:
        lines.append(" · ".join(parts))
    parts = []
    rel = (report.get("reliability") or {}).get("summary")
    if _est(rel):
        parts.append(heise_figure(report, rel))
    growth = report.get("growth") or {}
    traj = growth.get("trajectories") or {}
    if _ok(traj.get("mean_slope")):
        node = {"estimate": traj["mean_slope"], "ci_low": traj.get("mean_slope_ci_low"),
                "ci_high": traj.get("mean_slope_ci_high")}
        parts.append(f"mean slope of per-unit lines {_est(node, 3)} per {time_unit(report)}")
    for key, label, kind in (("slope_reliability", "slope reliability of per-unit lines",
                              "slope_reliability"), ("icc", "ICC(1) from one-way ANOVA", "icc")):
        node = growth.get(key) or {}
        text = bounds.text(node.get("estimate"), node.get("ci_low"), node.get("ci_high"), kind)
        if text:
            parts.append(f"{label} {text}")
    if parts:
        lines.append(" · ".join(parts))
    lines += distribution_lines(report)
    if not lines:
        return []
    return [heading(f"Key figures · {report.get('measure')}")] + ["  " + line for line in lines]


def groups_block(report: dict, heading) -> list[str]:
    section = report.get("groups")
    if not isinstance(section, dict):
        return []
    title = (f"By {section['column']} · {section['n_reported']} of {section['n_groups']} "
             "groups reported")
    lines = [heading(title)]
    for comp in section.get("comparison") or []:
        values = [v for v in comp["by_group"] if _ok(v.get("estimate"))]
        test = comp.get("test") or {}
        if not values:
            continue
        scale, unit = (100.0, "%") if comp["figure"] == "retention" else (1.0, "")
        low = min(v["estimate"] for v in values) * scale
        high = max(v["estimate"] for v in values) * scale
        digits = 1 if unit else 2
        text = f"  {comp['label']} by group: {low:.{digits}f}{unit} to {high:.{digits}f}{unit}"
        if _ok(test.get("statistic"), test.get("pvalue")):
            text += (f"; equal across groups: {test['method']} {test['statistic']:.2f} on "
                     f"{test['df']} df, {_p(test['pvalue'])}")
        lines.append(text)
    lines.append(f"  {section['note']}")
    return lines


def cross_lag_block(report: dict, heading) -> list[str]:
    pairs = report.get("cross_lag") or []
    if not pairs:
        return []
    lines = [heading("Cross-lagged correlations, one wave apart (descriptive, not causal)")]
    for pair in pairs:
        lag1 = next((r for r in pair["lags"] if r["lag"] == 1), None)
        if not lag1:
            continue
        xl, yl = _est(lag1["x_leads"], key="r"), _est(lag1["y_leads"], key="r")
        if not (xl and yl):
            continue
        lines.append(f"  {pair['x']} → {pair['y']} {xl} · {pair['y']} → {pair['x']} {yl}")
    return lines if len(lines) > 1 else []


GROWTH_FAMILIES = ("linear_growth", "quadratic_growth", "free_shape_growth",
                   "growth_autoregressive")


def heise_unreadable(report: dict, rel: dict) -> str | None:
    """Why the Heise median is not read as a reliability (its formula assumes a lag-1
    simplex, which growth and impossible triplets break), or None."""
    leading = next((f["family"] for f in report.get("families") or []
                    if f.get("verdict") in ("supported", "plausible")), None)
    if leading in GROWTH_FAMILIES:
        return "a growth family leads"
    if rel.get("n_triplets") and 2 * (rel.get("n_impossible") or 0) > rel["n_triplets"]:
        return "most triplets impossible"
    return None


def heise_figure(report: dict, rel: dict) -> str:
    """The Heise median under its own name, flagged when it is impossible, or why it is
    not read as a reliability."""
    if bounds.status(rel["estimate"], None, None) == "impossible":
        return ("Heise test-retest reliability (median of triplets) "
                + bounds.text(rel["estimate"], kind="heise"))
    why = heise_unreadable(report, rel)
    if why:
        return f"Heise test-retest figure not interpretable ({why})"
    return ("Heise test-retest reliability (median of triplets) "
            + bounds.text(rel["estimate"], rel.get("ci_low"), rel.get("ci_high"), "heise"))
