"""Terminal block of the process-family verdicts: a compact table (family, verdict,
score, the key statistic), the measurement line and the next models to fit."""

from __future__ import annotations

from tabulate import tabulate

from paneldiag.labels import FAMILY_NAMES as DISPLAY, STATISTIC_LABELS
from paneldiag.render import bounds
from paneldiag.render.text import heading

# the statistics that sum up each family's case (keys of verdict_basis.statistics),
# with the range each lies in (None: unbounded)
SHARE, CORRELATION = (0.0, 1.0, "share"), (-1.0, 1.0, "correlation")
KEY_STATS = {
    "occasion_noise": [("adjacent_correlation", CORRELATION)],
    "stable_trait": [("trait_share", SHARE), ("stable_share", SHARE),
                     ("profile_decline", None)],
    "autoregressive": [("carry_rho", CORRELATION), ("stable_share", SHARE)],
    "trait_autoregressive": [("stable_share", SHARE), ("carry_rho", CORRELATION)],
    "linear_growth": [("slope_share", SHARE), ("mean_change_sd", None)],
    "quadratic_growth": [("slope_share", SHARE), ("mean_bend_sd", None)],
    "free_shape_growth": [("slope_share", SHARE), ("mean_remainder_sd", None)],
    "growth_autoregressive": [("slope_share", SHARE), ("growth_carry_share", SHARE)],
}


def _stat(value, bound) -> str | None:
    if isinstance(value, dict):
        est, lo, hi = value.get("estimate"), value.get("ci_low"), value.get("ci_high")
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        est, lo, hi = value, None, None
    else:
        return None
    if est is None:
        return None
    if bound is not None:
        low, high, kind = bound
        return bounds.text(est, lo, hi, kind, low, high)
    return f"{est:.2f}" + (f" [{lo:.2f}, {hi:.2f}]" if lo is not None and hi is not None
                           else "")


def _key(family: str, stats: dict, labels: dict) -> str:
    parts = []
    for key, bound in KEY_STATS.get(family, []):
        text = _stat(stats.get(key), bound)
        if text is not None:
            parts.append(f"{labels.get(key, STATISTIC_LABELS.get(key, key))} {text}")
        if len(parts) == 2:
            break
    return "; ".join(parts) or "–"


def _bic(f: dict) -> tuple[str, str]:
    diff, weight = f.get("bic_difference"), f.get("bic_weight")
    return ("–" if diff is None else f"{diff:+.1f}" if diff else "best",
            "–" if weight is None else f"{weight:.2f}")


def verdicts_block(report: dict, color: bool) -> list[str]:
    basis = report.get("verdict_basis", {})
    stats, labels = basis.get("statistics", {}), basis.get("labels", {})
    rows = [[DISPLAY.get(f["family"], f["family"]), f["verdict"], *_bic(f),
             _key(f["family"], stats, labels)] for f in report["families"]]
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
            label = m.get("label") or ("reliability, lower bound" if m.get("lower_bound")
                                       else "reliability")
            value = bounds.text(m["reliability"], m.get("ci_low"), m.get("ci_high"))
            error = f"{m['verdict']} measurement error" if m.get("verdict") else \
                "measurement error not separable"
            what = "" if m.get("lower_bound") else f" ({m.get('basis')})"
            lines.append(f"  measurement: {label} {value}, {error}{what}. {m['advice']}")
        else:
            lines.append(f"  measurement: {m['advice']}")
    reason = common_undetermined_reason(report["families"])
    if reason:   # the table shows no figures then
        lines.append(f"  no family can be judged: {reason[0].lower()}{reason[1:]}")
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


def common_undetermined_reason(families: list) -> str | None:
    """The one reason no family could be judged (too few units or waves, no pair of
    waves observed together), or None when some family was judged."""
    reasons = {f["evidence"][0] if f.get("evidence") else None for f in families}
    if families and all(f.get("verdict") == "undetermined" for f in families) \
            and len(reasons) == 1 and None not in reasons:
        return reasons.pop()
    return None


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
