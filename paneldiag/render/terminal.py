"""The terminal summary: short sections of text and small tables."""

from __future__ import annotations

from typing import Callable

from paneldiag.render import intake
from paneldiag.disclosure import count_shown, share_shown
from paneldiag.disclosure_audit import disclosure_line
from paneldiag.render.text import heading, number, share, table
from paneldiag.render.text_attrition import attrition_block, missingness_block
from paneldiag.render.text_dependence import dependence_block
from paneldiag.render.text_distribution import distribution_block
from paneldiag.render.text_reliability import render_growth, render_reliability
from paneldiag.render.text_verdicts import verdicts_block


def _intake(report: dict, color: bool) -> list[str]:
    ledger, panel = report["ledger"], report["panel"]
    dropped = ", ".join(f"{reason.replace('_', ' ')} {count:,}"
                        for reason, count in ledger["dropped_by_reason"].items()) or "none"
    grouped = intake.grouping(ledger)
    table = intake.table_read(report.get("input") or {})
    return [heading(f"Intake · {report['measure']}", color),
            *([f"  read from {table}"] if table else []),
            f"  {panel['n_units']:,} units × {panel['n_waves']} waves; "
            f"{intake.time_basis(panel)}",
            f"  waves in order (time): {intake.wave_times(panel)}",
            *([f"  grouping: {grouped}"] if grouped else []),
            f"  rows read {ledger['rows_read']:,}; used {ledger['rows_used']:,}; "
            f"set aside {ledger['rows_dropped']:,} ({dropped})"]


def _wave_profile(report: dict, color: bool) -> list[str]:
    m = int(report.get("input", {}).get("options", {}).get("min_cell", 5))
    n_units = report.get("panel", {}).get("n_units")

    def count(n):   # the appendix's rule: no count that gives a small one by subtraction
        return number(n) if count_shown(n, m, n_units) else ("–" if n is None else
                                                             f"<{m}" if n < m else "withheld")

    def part(value, n):
        return share(value) if value is None or share_shown(value, n, m) else \
            f"<{100 * m / n:.1f}%"

    rows = [[r["wave"], count(r["n"]), number(r["mean"]), number(r["sd"]), number(r["min"]),
             number(r["max"]), number(r["skewness"], 2), part(r["floor_share"], r["n"]),
             part(r["ceiling_share"], r["n"]), number(r["distinct"])]
            for r in report["wave_profile"]]
    headers = ["wave", "n", "mean", "sd", "min", "max", "skew", "at floor", "at ceiling",
               "distinct"]
    body = table(rows, headers)
    return [heading("Wave profile", color)] + ["  " + line for line in body.splitlines()]


def degenerate_block(report: dict, color: bool = False) -> list[str]:
    """What the data leave undefined, and why: shown whenever there is any."""
    findings = report.get("degenerate") or []
    if not findings:
        return []
    return [heading("Not defined for these data", color)] + \
        [f"  · {finding['note'][0].upper()}{finding['note'][1:]}." for finding in findings]


SECTION_RENDERERS: list[tuple[str, Callable[[dict, bool], list[str]]]] = [
    ("degenerate", degenerate_block),
    ("families", verdicts_block),
    ("ledger", _intake),
    ("wave_profile", _wave_profile),
    ("distribution", distribution_block),
    ("attrition", attrition_block),
    ("missingness", missingness_block),
    ("correlation", dependence_block),
    ("reliability", render_reliability),
    ("growth", render_growth),
]


SUMMARY_KEYS = ("degenerate", "families")  # blocks of SECTION_RENDERERS shown without --details


def render_measure(report: dict, color: bool = False, details: bool = False) -> str:
    """One measure: the verdict block first, then key figures (or, with ``details``,
    every area's full block) and the by-group comparison."""
    from paneldiag.render.text_summary import groups_block, key_figures
    head = lambda title: heading(title, color)  # noqa: E731
    blocks = []
    for key, render in SECTION_RENDERERS:
        if key in report and (details or key in SUMMARY_KEYS):
            blocks.append("\n".join(render(report, color)))
    if not details:
        blocks.append("\n".join(key_figures(report, head)))
    blocks.append("\n".join(groups_block(report, head)))
    return "\n\n".join(b for b in blocks if b)


def render_terminal(report: dict, color: bool = False, details: bool = False) -> str:
    """The whole screen as text: one block per measure, the cross-lag screen, cautions."""
    from paneldiag.render.text_summary import cross_lag_block
    measures = report.get("measures", {report.get("measure"): report})
    table = intake.table_read(report["input"])
    header = (f"paneldiag {report['tool']['version']} · {report['input']['path']}"
              + (f" · {table}" if table else "")
              + f" · sha256 {report['input']['sha256'][:12]}…")
    weight = report["input"].get("options", {}).get("weight")
    if weight:
        header += (f"\nweighted by '{weight}' (rescaled to average 1): shares, means, SDs, "
                   "correlations, fits and verdicts use the weights; counts are counts of "
                   "units")
    several = len(measures) > 1
    parts = [header] + [(heading(f"═══ {name}", color) + "\n\n" if several else "")
                        + render_measure(r, color, details) for name, r in measures.items()]
    parts.append("\n".join(cross_lag_block(report, lambda t: heading(t, color))))
    first = next(iter(measures.values()))
    notes = [heading("Cautions", color)] + [f"  · {c}" for c in first.get("cautions", [])]
    audit = disclosure_line(report)
    if audit:
        notes.append(f"  · {audit}")
    if not details:
        notes.append("  (every area in full: --details; the methods appendix: --report DIR)")
    parts.append("\n".join(notes))
    return "\n\n".join(p for p in parts if p) + "\n"
