"""Terminal blocks for attrition (retention, unit types, selective dropout) and
missingness (response patterns, coverage, Little's test, declared codes).

Counts that the report suppresses (null) are shown as '<m' with m the minimum cell
size; nothing below it is ever printed.
"""

from __future__ import annotations

from paneldiag.labels import ENTRY_DESIGNS
from paneldiag.render.intake import SHOWN_WAVES
from paneldiag.render.text import heading, number, share

TOP_PATTERNS = 5


def _min_cell(report: dict) -> int:
    return int(report.get("input", {}).get("options", {}).get("min_cell", 5))


def _count(value, min_cell: int) -> str:
    return f"<{min_cell}" if value is None else f"{value:,}"


def _p(value) -> str:
    if value is None:
        return "p –"
    return "p < 0.001" if value < 0.001 else f"p = {value:.3f}"


def _pct(value) -> str:
    return "–" if value is None else f"{100 * value:.0f}%"


def entry_line(entry: dict, short: bool = False) -> str:
    """The entry design in a few words: its name, the first wave's share of the units,
    (unless ``short``) the waves that add blocks and, when it is not the whole panel,
    the follow-up."""
    text = ENTRY_DESIGNS.get(entry["design"], (entry["design"],))[0]
    facts = []
    if entry.get("first_wave_share") is not None:
        facts.append(f"{_pct(entry['first_wave_share'])} start at the first wave")
    if entry.get("entry_waves") and not short:
        facts.append("blocks of new units at " + ", ".join(entry["entry_waves"]))
    if entry["design"] == "cohort_sequential":
        facts.append(f"each unit due at {entry['follow_up_waves']} waves from its first")
    return text + (f" ({'; '.join(facts)})" if facts else "")


def attrition_block(report: dict, color: bool) -> list[str]:
    section, m = report["attrition"], _min_cell(report)
    rows = section["retention"]
    n_units = report.get("panel", {}).get("n_units")
    entry = section.get("entry")
    lines = [heading("Attrition", color)]
    if entry:
        lines.append(f"  entry: {entry_line(entry)}")
        if entry.get("retained_share") is not None:
            lines.append(f"  retained from each unit's first wave to the end of its follow-up: "
                         f"{share(entry['retained_share'])}")
    of_all = f" of all {n_units:,} units" if isinstance(n_units, int) else ""
    if len(rows) <= SHOWN_WAVES:   # waves across
        lines += ["  wave         " + " ".join(f"{r['wave']:>5}" for r in rows),
                  "  retained     " + " ".join(f"{_pct(r['retained_share']):>5}" for r in rows)
                  + "  of the units that entered before the wave",
                  "  responding   " + " ".join(f"{_pct(r['response_share']):>5}" for r in rows)
                  + " " + of_all]
    else:   # too many waves for a line: one line per wave
        lines.append(f"  {'wave':>12}  retained  responding   (retained: of the units that "
                     f"entered before the wave; responding:{of_all})")
        lines += [f"  {r['wave']:>12}  {_pct(r['retained_share']):>8}  "
                  f"{_pct(r['response_share']):>10}" for r in rows]
    why = ["no unit entered before the first wave"]
    if any(r["retained_share"] is None for r in rows[1:]) or \
            any(r["response_share"] is None for r in rows):
        why.append(f"withheld (it would give a count of fewer than {m} units)")
    lines.append("  –: " + "; ".join(why))
    types = section["unit_types"]
    shown = [f"{t['type'].replace('_', ' ')} {share(t['share'])}" for t in types
             if t["n"] is not None]
    hidden = [t["type"].replace("_", " ") for t in types if t["n"] is None]
    text = "  unit types: " + " · ".join(shown + [f"under {m} units or withheld: "
                                               + ", ".join(hidden)] * bool(hidden))
    if entry and entry["design"] == "cohort_sequential":
        text += " (against the whole panel: a cohort's planned end shows as dropout)"
    lines.append(text)
    selective = section["selective"]
    gs = [r for r in selective["by_wave"] if r["smd"] is not None]
    if gs:
        away = sum(1 for r in gs if r["ci_low"] > 0 or r["ci_high"] < 0)
        lines.append("  leavers vs stayers, Hedges' g on the measure at the wave left: "
                     + " ".join(f"{r['smd']:+.2f}" for r in gs)
                     + f" ({away} of {len(gs)} intervals exclude 0)")
    model = selective["model"]
    if model["fitted"]:
        interval = (f"[{model['ci_low']:.2f}, {model['ci_high']:.2f}], "
                    f"{_p(model['pvalue'])}" if model["ci_low"] is not None
                    else "(no interval: a replicate refit failed)")
        text = (f"  dropout model: odds ratio per SD {model['odds_ratio_per_sd']:.2f} "
                f"{interval} "
                f"({_count(model['n_person_periods'], m)} unit-waves at risk, "
                f"{_count(model['n_events'], m)} dropouts)")
        lines.append(text)
        for c in model["covariates"]:
            interval = (f"[{c['ci_low']:.2f}, {c['ci_high']:.2f}], {_p(c['pvalue'])}"
                        if c["ci_low"] is not None else "(no interval)")
            lines.append(f"    with {c['name']}: odds ratio per SD {c['odds_ratio_per_sd']:.2f} "
                         f"{interval}")
    else:
        lines.append(f"  dropout model: {model['note']}")
    return lines


def missingness_block(report: dict, color: bool) -> list[str]:
    section, m = report["missingness"], _min_cell(report)
    pat = section["patterns"]
    waves = report.get("panel", {}).get("waves", [])
    span = f", waves {waves[0]}…{waves[-1]}" if waves else ""
    lines = [heading("Missingness", color),
             f"  {pat['n_patterns']:,} response patterns ('o' observed, '.' missing{span}):"]
    rows = pat["rows"][:TOP_PATTERNS]
    for r in rows:
        n = "–" if r["n"] is None else f"{r['n']:,}"   # withheld by the disclosure audit
        lines.append(f"    {r['pattern']}  {n:>7}  {share(r['share']):>6}")
    rest = pat["remainder"]
    parts = [rest["n_units"]] + [r["n"] for r in pat["rows"][TOP_PATTERNS:]]
    rest_n = "–" if None in parts else f"{sum(parts):,}"
    rest_k = rest["n_patterns"] + len(pat["rows"][TOP_PATTERNS:])
    if rest_k:
        text = f"    {rest_k:,} other patterns  {rest_n} units"
        if rest["n_small_patterns"]:
            text += (f" ({rest['n_small_patterns']:,} patterns with under {m} units each, "
                     "not shown on their own)")
        lines.append(text)
    low = section["coverage"].get("lowest")
    if low:
        lines.append(f"  pairwise coverage: lowest {share(low['share'])} "
                     f"(waves {low['waves'][0]} and {low['waves'][1]})")
    mcar = section["little_mcar"]
    if mcar["statistic"] is not None:
        verdict = ("evidence against MCAR" if mcar["pvalue"] < 0.05
                   else "no evidence against MCAR (which does not show MCAR)")
        lines.append(f"  Little's MCAR test: chi-square {number(mcar['statistic'], 1)} on "
                     f"{mcar['df']:,} df, {_p(mcar['pvalue'])}, {mcar['n_patterns']:,} "
                     f"patterns: {verdict}")
    em = section["em"]
    if em.get("method", "em") != "em":
        lines.append("  ML moments under MAR not computed (too many waves x response patterns "
                     "for the cost limit): pairwise-complete moments")
    elif not em["converged"]:
        lines.append(f"  EM moments did not converge in {em['iterations']:,} iterations")
    for code in section["codes"]["rows"]:
        name = code["code"] + (f" {code['label']}" if code["label"] else "")
        lines.append(f"  code {name}: " + " ".join(_count(c, m) for c in code["counts"])
                     + " by wave")
    return lines
