"""Terminal block of the process-family verdicts: a compact table (family, verdict,
score, the key statistic), the measurement line and the next models to fit."""

from __future__ import annotations

from tabulate import tabulate

from paneldiag.render.text import heading

# the statistics that sum up each family's case, by key of verdict_basis.statistics
KEY_STATS = {
    "occasion_noise": [("adjacent r", "adjacent_correlation")],
    "stable_trait": [("trait share", "trait_share"), ("stable share", "stable_share"),
                     ("decline", "profile_decline")],
    "autoregressive": [("rho", "carry_rho"), ("stable share", "stable_share")],
    "trait_autoregressive": [("stable share", "stable_share"), ("rho", "carry_rho")],
    "linear_growth": [("slope share", "slope_share"), ("mean change", "mean_change_sd")],
    "quadratic_growth": [("slope share", "slope_share"), ("bend", "mean_bend_sd")],
    "free_shape_growth": [("slope share", "slope_share"),
                          ("remainder", "mean_remainder_sd")],
    "growth_autoregressive": [("slope share", "slope_share"),
                              ("carried share", "growth_carry_share")],
}


def _stat(value) -> str | None:
    if isinstance(value, dict):
        est = value.get("estimate")
        if est is None:
            return None
        lo, hi = value.get("ci_low"), value.get("ci_high")
        return f"{est:.2f}" + (f" [{lo:.2f}, {hi:.2f}]" if lo is not None and hi is not None
                               else "")
    if isinstance(value, (int, float)):
        return f"{value:.2f}"
    return None


def _key(family: str, stats: dict) -> str:
    parts = []
    for label, key in KEY_STATS.get(family, []):
        text = _stat(stats.get(key))
        if text is not None:
            parts.append(f"{label} {text}")
        if len(parts) == 2:
            break
    return "; ".join(parts) or "–"


def _bic(f: dict) -> tuple[str, str]:
    diff, weight = f.get("bic_difference"), f.get("bic_weight")
    return ("–" if diff is None else f"{diff:+.1f}" if diff else "best",
            "–" if weight is None else f"{weight:.2f}")


def verdicts_block(report: dict, color: bool) -> list[str]:
    from paneldiag.rules.verdicts import DISPLAY   # here: the rules load the model fitting
    stats = report.get("verdict_basis", {}).get("statistics", {})
    rows = [[DISPLAY.get(f["family"], f["family"]), f["verdict"], *_bic(f),
             _key(f["family"], stats)] for f in report["families"]]
    body = tabulate(rows, headers=["family", "verdict", "BIC vs best", "BIC weight",
                                   "key evidence"],
                    tablefmt="plain", disable_numparse=True, stralign="left")
    lines = [heading("Process families (screening evidence, not proof of a model)", color)]
    lines += ["  " + line for line in body.splitlines()]
    lead = next((f for f in report["families"] if f.get("specification")
                 and f["verdict"] in ("supported", "plausible")), None)
    if lead:
        lines.append(f"  {DISPLAY.get(lead['family'], lead['family'])} judged by: "
                     f"{lead['specification']}")
    m = report.get("measurement")
    if m:
        if m.get("reliability") is not None:
            ci = (f" [{m['ci_low']:.2f}, {m['ci_high']:.2f}]"
                  if m.get("ci_low") is not None and m.get("ci_high") is not None else "")
            label = "reliability, lower bound" if m.get("lower_bound") else "reliability"
            error = f"{m['verdict']} measurement error" if m.get("verdict") else \
                "measurement error not separable"
            lines.append(f"  measurement ({m.get('basis')}): {label} {m['reliability']:.2f}"
                         f"{ci}, {error}. {m['advice']}")
        else:
            lines.append(f"  measurement: {m['advice']}")
    lines += power_lines(report.get("power") or [], DISPLAY)
    caveats = []
    for f in report["families"]:
        for c in f.get("caveats", []):
            if c not in caveats:
                caveats.append(c)
    lines += [f"  caveat: {c}" for c in caveats]
    nxt = report.get("next_models") or []
    if nxt:
        lines.append("  next models to fit and compare:")
        lines += [f"    {m['rank']}. {m['model']}" for m in nxt]
    return lines


def power_lines(rows: list, display: dict) -> list[str]:
    """The neighbouring families this panel did not tell apart, each with the power
    (at these data's estimates) of the test between them."""
    out = []
    for r in rows:
        if r.get("evidenced"):
            continue
        units = r.get("units_for_power_90")
        more = f"; about {units:,} units for {r['target_power']:.1f}" if units else ""
        out.append(f"  not told apart: {display.get(r['simpler'], r['simpler'])} | "
                   f"{display.get(r['richer'], r['richer'])} (power {r['power']:.2f} at "
                   f"these estimates{more})")
    return out
