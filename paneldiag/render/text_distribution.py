"""Terminal lines on the shape of each wave's scores: strong skew, heavy tails and an
outlying unit, with what each does to the verdicts."""

from __future__ import annotations

from paneldiag.render.text import heading, number, table


def distribution_lines(report: dict) -> list[str]:
    """The distribution caveats, each naming its waves (for the key figures)."""
    return [f"distribution caveat: {c}"
            for c in (report.get("distribution") or {}).get("caveats") or []]


def distribution_block(report: dict, color: bool) -> list[str]:
    """--details: skewness, excess kurtosis and the largest distance per wave."""
    check = report["distribution"]
    rows = [[w["wave"], number(w["skewness"], 2), number(w["excess_kurtosis"], 2),
             number(w["largest_z"], 2), number(w["grubbs_critical"], 2)]
            for w in check["waves"]]
    body = table(rows, ["wave", "skewness", "excess kurtosis", "largest |z|",
                        "outlier beyond |z|"])
    lines = [heading("Shape of the scores by wave", color)]
    lines += ["  " + line for line in body.splitlines()]
    return lines + ["  " + line for line in distribution_lines(report)]
