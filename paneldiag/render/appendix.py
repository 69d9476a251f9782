"""The methods appendix: Markdown, self-contained HTML, LaTeX tables, figures, JSON.

``write_report(report, folder, ...)`` builds every file in a temporary folder beside
``folder`` and renames it into place, so the folder is either the previous complete
report or the new complete report, never half-written. The content is a function of
the report (and, for the optional trajectory sample, of the panel with a fixed seed):
the same input and options give byte-identical files.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import tempfile
from importlib import metadata


from paneldiag.disclosure import count_shown, share_shown
from paneldiag.disclosure_audit import disclosure_line
from paneldiag.errors import InputProblem
from paneldiag.labels import family_name
from paneldiag.render import bounds
from paneldiag.render import figures as figs
from paneldiag.render import intake
from paneldiag.render import prose
from paneldiag.render.document import (Code, FigureRef, Heading, ListBlock, Note, Paragraph,
                                       Table, to_html, to_markdown)
from paneldiag.render.json import report_json
from paneldiag.render.latex import to_latex

FILES = ("appendix.md", "appendix.html", "tables.tex", "report.json", "figures")
TITLE = "Methods appendix: panel screening"


def measure_reports(report: dict) -> dict[str, dict]:
    if "measures" in report:
        return report["measures"]
    return {report.get("measure", "measure"): report}


def slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", str(text)).strip("-").lower() or "x"


def measure_stems(report: dict) -> dict[str, str]:
    """A distinct file stem per measure (a number is added when two names slug alike)."""
    stems: dict[str, str] = {}
    for measure in measure_reports(report):
        stem, k = slug(measure), 2
        while stem in stems.values():
            stem, k = f"{slug(measure)}-{k}", k + 1
        stems[measure] = stem
    return stems


def _n(value, min_cell: int) -> str:
    """A count, or '< min_cell' when it is below the disclosure threshold."""
    if value is None:
        return "–"
    return f"< {min_cell}" if 0 < value < min_cell else f"{int(value):,}"


def _v(value, digits: int = 2) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _p(value) -> str:
    return "–" if value is None else ("< 0.001" if value < 0.001 else f"{value:.3f}")


def _share(share, n, min_cell: int) -> str:
    """A percentage, or '<' when the count it stands for is below the threshold."""
    if share is None or n is None:
        return "–"
    if not share_shown(share, n, min_cell):
        return f"< {100 * min_cell / n:.1f}"
    return f"{100 * share:.1f}"


BLANK_REASONS = {  # why a table cell shows '–', in the order the footnote gives them
    "withheld": "withheld by disclosure control (it would show, or give by subtraction, "
                "a count of fewer than {m} units)",
    "first_wave": "no unit entered before the first wave, so none is retained there",
    "mixed": "the band mixes lags or time distances",
    "not_estimable": "not estimable from these data (or not identified for that group)",
}


class Blanks:
    """The empty cells of one table: each '–' records why, and the footnote names the
    reasons that occur, and only those."""

    def __init__(self, min_cell: int):
        self.min_cell, self.used = min_cell, set()

    def __call__(self, reason: str) -> str:
        self.used.add(reason)
        return "–"

    def notes(self) -> tuple[str, ...]:
        reasons = [text.format(m=self.min_cell) for key, text in BLANK_REASONS.items()
                   if key in self.used]
        return ("'–': " + "; ".join(reasons) + ".",) if reasons else ()


def _ci(node: dict, key: str = "estimate", digits: int = 2, scale: float = 1.0) -> str:
    est = node.get(key)
    if est is None:
        return "–"
    lo, hi = node.get("ci_low"), node.get("ci_high")
    text = f"{scale * est:.{digits}f}"
    if lo is not None and hi is not None:
        text += f" [{scale * lo:.{digits}f}, {scale * hi:.{digits}f}]"
    return text


# ----------------------------------------------------------------------------- tables

def wave_table(report: dict, min_cell: int) -> Table | None:
    rows = report.get("wave_profile")
    if not rows:
        return None
    times = dict(zip(report["panel"]["waves"], report["panel"]["times"]))
    n_units, blank = report["panel"].get("n_units"), Blanks(min_cell)
    body = tuple((r["wave"], _number(times.get(r["wave"])), wave_count(r["n"], n_units,
                                                                       min_cell, blank),
                  _v(r["mean"]), _v(r["sd"]), _v(r["min"]), _v(r["max"]),
                  _share(r["floor_share"], r["n"], min_cell),
                  _share(r["ceiling_share"], r["n"], min_cell))
                 for r in rows)
    return Table(f"{slug(report.get('measure'))}-waves",
                 f"{report.get('measure')}: distribution by wave",
                 ("wave", f"time ({intake.time_unit(report)}s)", "n", "mean", "SD", "min",
                  "max", "% at floor", "% at ceiling"), body,
                 (f"Counts below {min_cell} are shown as '< {min_cell}' (disclosure control).",
                  *blank.notes()))


def wave_count(n, n_units, min_cell: int, blank: Blanks) -> str:
    """A wave's count of units, withheld when the units missing there (all units
    minus it) would be 1 to min_cell - 1."""
    if n is None or n < min_cell or count_shown(n, min_cell, n_units):
        return _n(n, min_cell)
    return blank("withheld")


def retention_table(report: dict, min_cell: int) -> Table | None:
    rows = (report.get("attrition") or {}).get("retention")
    if not rows:
        return None
    blank = Blanks(min_cell)

    def pct(row, key, first):
        if row.get(key) is not None:
            return f"{100 * row[key]:.1f}"
        return blank("first_wave" if first and key == "retained_share" else "withheld")

    body = tuple((r["wave"], _n(r["n_observed"], min_cell) if r.get("n_observed") is not None
                  else blank("withheld"),
                  pct(r, "retained_share", i == 0), pct(r, "response_share", i == 0))
                 for i, r in enumerate(rows))
    return Table(f"{slug(report.get('measure'))}-retention",
                 f"{report.get('measure')}: retention and response by wave",
                 ("wave", "n observed", "% retained", "% responding"), body,
                 ("% retained: of the units that entered (were first observed) before the "
                  "wave and are still due there, the share observed at it; % responding: "
                  "of all units.", *blank.notes()))


def lag_table(report: dict, min_cell: int) -> Table | None:
    rows = report.get("lag_profile")
    if not rows:
        return None
    basis = {"lag": "waves apart", "time": "time apart"}
    blank = Blanks(min_cell)

    def mean_r(r):
        if r.get("mean_r") is None:
            return blank("withheld" if r.get("n_pairs") is None else "not_estimable")
        return _ci({"estimate": r["mean_r"], "ci_low": r.get("ci_low"),
                    "ci_high": r.get("ci_high")})

    body = tuple((basis.get(r.get("basis"), "waves apart"),
                  blank("mixed") if r.get("lag") is None else str(r["lag"]),
                  blank("mixed") if r.get("time_distance") is None
                  else _number(r["time_distance"]), mean_r(r),
                  _n(r.get("wave_pairs"), 0), _n(r["n_pairs"], min_cell)
                  if r.get("n_pairs") is not None else blank("withheld")) for r in rows)
    return Table(f"{slug(report.get('measure'))}-lags",
                 f"{report.get('measure')}: mean correlation by lag and by time distance",
                 ("grouped by", "lag (waves)", f"time distance ({intake.time_unit(report)}s)",
                  "mean r [95% CI]", "wave pairs", "unit pairs"), body,
                 ("Fisher-z averages weighted by n - 3. Unit pairs count a unit once per "
                  "wave pair.", *blank.notes()), align="lrrrrr")


def families_table(report: dict) -> Table | None:
    fams = [f for f in report.get("families") or [] if isinstance(f, dict)]
    if not fams:
        return None
    lists = [list(map(str, f.get("caveats") or [])) for f in fams]
    common = [c for c in lists[0] if all(c in other for other in lists[1:])]
    body = tuple((family_name(f.get("family", "")),
                  str(f.get("verdict", "")).replace("_", " "),
                  "–" if f.get("bic_difference") is None else _v(f["bic_difference"], 1),
                  "–" if f.get("bic_weight") is None else _v(f["bic_weight"]),
                  str(f.get("specification") or "–"),
                  " ".join(c for c in own if c not in common) or "–")
                 for f, own in zip(fams, lists))
    notes = ["Verdicts summarise screening evidence; they do not select a model.",
             "BIC difference: the family's BIC (its best specification by BIC, and its mean "
             "structure) minus the best family's; BIC weight: exp(-difference / 2) over the "
             "families, an approximate posterior probability among these eight."]
    if common:
        notes.append("For every family: " + " ".join(common))
    return Table(f"{slug(report.get('measure'))}-families",
                 f"{report.get('measure')}: screening verdicts by process family",
                 ("family", "verdict", "BIC difference", "BIC weight", "specification",
                  "caveats"), body, tuple(notes), align="llrrpp")


def specifications_table(report: dict) -> Table | None:
    """Every specification tried for each family: its BIC against the family's chosen
    one and its RMSEA, or why it was skipped."""
    section = (report.get("verdict_basis") or {}).get("specifications") or {}
    body = []
    for family, entry in section.items():
        for row in entry.get("specifications") or []:
            name = family_name(family)
            if row.get("skipped"):
                body.append((name, row["specification"], "–", "–", f"skipped: {row['skipped']}"))
                continue
            body.append((name, row["specification"],
                         "chosen" if row.get("chosen") else _v(row.get("bic_vs_chosen"), 1),
                         "–" if row.get("rmsea") is None else _v(row["rmsea"], 3), ""))
    if not body:
        return None
    return Table(f"{slug(report.get('measure'))}-specifications",
                 f"{report.get('measure')}: the specifications each family was judged by",
                 ("family", "specification", "BIC vs chosen", "RMSEA", "note"), tuple(body),
                 ("Fitted by full-information maximum likelihood under missing at random; "
                  "the chosen specification has the lowest BIC in its family. A "
                  "specification is skipped when it has more parameters than distinct "
                  "covariances, is not identified at these waves, or its fit does not "
                  "reach a positive definite covariance.",), align="llrrl")


def power_table(report: dict) -> Table | None:
    """What this panel can tell apart: the power of each part test at its estimates."""
    rows = [r for r in report.get("power") or [] if isinstance(r, dict)]
    if not rows:
        return None
    body = tuple((f"{family_name(r['simpler'])} vs {family_name(r['richer'])}", str(r["df"]),
                  _v(r["power"]),
                  "–" if r.get("units_for_power_90") is None
                  else f"{r['units_for_power_90']:,}",
                  "yes" if r.get("evidenced") else "no") for r in rows)
    return Table(f"{slug(report.get('measure'))}-power",
                 f"{report.get('measure')}: what this panel can tell apart",
                 ("neighbouring families", "df", "power", "units for power 0.9",
                  "told apart here"), body,
                 ("Power of the likelihood-ratio test of the part that separates the two "
                  "families, at this panel's units, waves and response patterns and the "
                  "richer family's estimated parameters (Satorra and Saris 1985); units "
                  "for 0.9 scale the noncentrality with N. Power at estimated parameters "
                  "follows the test's own evidence: read it as what these data could "
                  "detect, not as the chance of a true effect.",), align="lrrrl")


def family_evidence(report: dict) -> ListBlock | None:
    """The evidence behind the families the screen supports or finds plausible."""
    items = []
    for fam in report.get("families") or []:
        if isinstance(fam, dict) and fam.get("verdict") in ("supported", "plausible"):
            evidence = " ".join(map(str, fam.get("evidence") or []))
            if evidence:
                items.append(f"{family_name(fam['family'])} ({fam['verdict']}): "
                             f"{evidence}")
    return ListBlock(tuple(items)) if items else None


def group_table(report: dict) -> Table | None:
    section = report.get("groups")
    if not isinstance(section, dict) or not section.get("comparison"):
        return None
    names = list(section.get("reports", {}))
    rows, blank = [], Blanks(int(section.get("min_cell") or 5))
    for comp in section["comparison"]:
        by = {v["group"]: v for v in comp["by_group"]}
        if comp["figure"] == "retention":
            cells = [_ci(by[g], digits=1, scale=100.0)
                     if g in by and by[g].get("estimate") is not None else
                     blank("withheld" if g in by else "not_estimable") for g in names]
        else:   # shares and correlations, flagged at their bounds
            low = -1.0 if comp["figure"] == "lag1_correlation" else 0.0
            cells = [(bounds.text(by[g].get("estimate"), by[g].get("ci_low"),
                                  by[g].get("ci_high"), low=low) or blank("not_estimable"))
                     if g in by else blank("not_estimable") for g in names]
        test = comp["test"]
        stat = blank("not_estimable") if test["statistic"] is None else \
            f"{test['statistic']:.2f} ({test['df']})"
        rows.append((comp["label"] + (" (%)" if comp["figure"] == "retention" else ""),
                     *cells, stat, _p(test["pvalue"]) if test["pvalue"] is not None
                     else blank("not_estimable")))
    notes = [section["note"], *blank.notes(),
             "Tests: mean r one wave apart, Cochran's Q on Fisher z with delete-a-group "
             "jackknife SEs; retention, Pearson chi-square of the groups x retained table; "
             "other figures, Cochran's Q with the SEs the diagnostics report. Cells show the "
             "estimate and its 95% CI."]
    return Table(f"{slug(report.get('measure'))}-groups",
                 f"{report.get('measure')}: key figures by {section['column']}",
                 ("figure", *names, "statistic (df)", "p"), tuple(rows), tuple(notes))


def cross_lag_table(pair: dict, min_cell: int) -> Table:
    body = []
    for r in pair["lags"]:
        body.append((str(r["lag"]), _v(r["time_distance"]), _ci(r["x_leads"], "r"),
                     _ci(r["y_leads"], "r"),
                     _ci({"estimate": r["z_difference"], "ci_low": r["z_difference_ci_low"],
                          "ci_high": r["z_difference_ci_high"]}, digits=3),
                     _n(min(r["x_leads"]["n_pairs"], r["y_leads"]["n_pairs"]), min_cell)))
    return Table(f"cross-lag-{slug(pair['x'])}-{slug(pair['y'])}",
                 f"Cross-lagged correlations of {pair['x']} and {pair['y']}",
                 ("lag", "time distance", f"{pair['x']} → {pair['y']} r [95% CI]",
                  f"{pair['y']} → {pair['x']} r [95% CI]", "z difference [95% CI]",
                  "unit pairs (fewer of the two)"), tuple(body),
                 ("An arrow reads 'earlier ... with later ...'. Fisher-z averages over wave "
                  "pairs, weighted by n - 3; CIs from the delete-a-group jackknife over "
                  "replicate groups.",))


# ----------------------------------------------------------------------------- reproducibility

OPTION_FLAGS = (  # options-record key -> command-line flag, in the order written
    ("id", "--id"), ("wave", "--wave"), ("values", "--value"), ("wide", "--wide"), ("items", "--items"),
    ("wave_labels", "--wave-labels"), ("wave_times", "--wave-times"),
    ("wave_order", "--wave-order"), ("date_format", "--date-format"),
    ("wave_bins", "--wave-bins"), ("wave_round", "--wave-round"), ("max_waves", "--max-waves"),
    ("weight", "--weight"), ("group", "--group"),
    ("covariates", "--covariate"), ("missing_codes", "--missing-codes"),
    ("duplicates", "--duplicates"), ("drop_bad_rows", "--drop-bad-rows"),
    ("format", "--format"), ("delimiter", "--delimiter"), ("min_cell", "--min-cell"),
    ("trajectory_sample", "--trajectory-sample"), ("trajectory_seed", "--trajectory-seed"),
    ("scale", "--scale"), ("rules", "--rules"),
)


def _number(v) -> str:
    return str(int(v)) if isinstance(v, float) and v.is_integer() else str(v)


def command_line(input_info: dict) -> str:
    """The screen command rebuilt from the options record (output paths left out)."""
    options = input_info.get("options", {})
    args = ["paneldiag", "screen", input_info.get("path", "-")]
    known = dict(OPTION_FLAGS)
    flags = list(OPTION_FLAGS) + [(k, "--" + k.replace("_", "-")) for k in options
                                  if k not in known and k != "layout"]
    for key, flag in flags:
        if key not in options:
            continue
        value = options[key]
        if key == "scale":  # recorded as auto / ordinal / continuous
            args += [f"--{value}"] if value in ("ordinal", "continuous") else []
        elif key in ("wide", "items"):
            args += [a for name, cols in value.items() for a in (flag, f"{name}={','.join(cols)}")]
        elif isinstance(value, bool):
            args += [flag] if value else []
        elif isinstance(value, list):
            if key in ("wave_labels", "wave_times"):
                args += [flag, ",".join(_number(v) for v in value)]
            else:
                args += [a for v in value for a in (flag, str(v))]
        else:
            args += [flag, _number(value)]
    return shlex.join(args)


def _versions() -> list[str]:
    out = []
    for name in ("numpy", "scipy", "pandas", "matplotlib"):
        try:
            out.append(f"{name} {metadata.version(name)}")
        except metadata.PackageNotFoundError:
            continue
    return out


def _input_name(info: dict) -> str:
    path = str(info.get("path", "-"))
    return "standard input" if path == "-" else os.path.basename(path)


def reproducibility(report: dict) -> list:
    info = report.get("input", {})
    options = info.get("options", {})
    rows = tuple((key, ", ".join(f"{k}={','.join(v)}" for k, v in value.items())
                  if isinstance(value, dict) else
                  ", ".join(map(_number, value)) if isinstance(value, list) else _number(value))
                 for key, value in options.items())
    facts = [f"paneldiag {report['tool']['version']} (JSON schema {report['schema_version']}); "
             + "; ".join(_versions()),
             f"Input file: {_input_name(info)} (format {info.get('format', 'unknown')}"
             + (f", {intake.table_read(info)}" if intake.table_read(info) else "") + ")",
             f"SHA-256 of the input: {info.get('sha256', 'unknown')}"]
    first = next(iter(measure_reports(report).values()))
    if first.get("panel"):
        grouped = intake.grouping(first.get("ledger") or {})
        facts.append(f"Waves: {intake.time_basis(first['panel'])}"
                     + (f"; grouped by {grouped}" if grouped else ""))
    return [Heading(2, "Reproducibility", "reproducibility"), ListBlock(tuple(facts)),
            Table("options", "Options of the screen", ("option", "value"), rows,
                  align="ll"),
            Paragraph("The command that reproduces this screen (output paths not shown):"),
            Code(command_line(info)),
            Paragraph("The same input and options give byte-identical Markdown, LaTeX and "
                      "JSON files; the figures are drawn with a fixed seed and no dates.")]


# ----------------------------------------------------------------------------- assembly

def _min_cell(report: dict) -> int:
    return int(report.get("input", {}).get("options", {}).get("min_cell", 5))


def cautions_note(report: dict) -> Note:
    measures = measure_reports(report)
    first = next(iter(measures.values()))
    items = list(first.get("cautions") or [])
    for name, one in measures.items():   # what the data leave undefined, and why
        items += [f"Not defined for {name}: {finding['note']}."
                  for finding in one.get("degenerate") or []]
    audit = disclosure_line(report)
    if audit:
        items.append(audit)
    items.append(f"In this appendix, no count below {_min_cell(report)} is shown: such counts, "
                 "and shares that would reveal them, appear as '<' the threshold, and "
                 "counts or shares that would give one by subtraction as '–' (each table's "
                 "note says why a cell is empty); groups with fewer units are not reported; "
                 "individual trajectories appear only when asked for.")
    if first.get("weighting"):
        items.append(first["weighting"]["note"])
    return Note("Read this first", tuple(dict.fromkeys(items)))


# The report sections behind each part of a measure's appendix, for its weighting note.
SECTION_KEYS = {
    "Sample": ("panel",), "Distribution by wave": ("wave_profile", "distribution"),
    "Attrition": ("attrition",), "Missing data": ("missingness",),
    "Dependence over time": ("correlation", "lag_profile", "markov", "stationarity",
                             "decay_fit"),
    "Reliability": ("reliability",), "Growth": ("growth",),
    "Process families": ("verdict_basis", "families", "measurement", "power"),
    "Groups": ("groups",),
}


def _weight_column(report: dict) -> str | None:
    return report.get("input", {}).get("options", {}).get("weight")


def weighting_sentence(report: dict, title: str) -> str | None:
    """Whether a part of the appendix is weighted (None for an unweighted screen)."""
    states = (report.get("weighting") or {}).get("sections") or {}
    weight = _weight_column(report)
    known = [states[k] for k in SECTION_KEYS.get(title, ()) if k in states]
    if not known or not weight:
        return None
    if all(known):
        return (f"Weighted by '{weight}': the shares, means, spreads, correlations and "
                "fits here use the weights; counts are counts of units.")
    return "Not weighted: counts of units and waves describe the panel as it is."


def build(report: dict, figures: dict[str, tuple[str, bytes]]) -> tuple[list, list[str]]:
    """The appendix blocks, and the prose paragraphs (for checks).

    ``figures`` maps a figure file stem to (caption, SVG bytes) for the figures drawn.
    """
    cite = prose.Citations()
    min_cell = _min_cell(report)
    info = report.get("input", {})
    blocks: list = [Heading(1, TITLE),
                    Paragraph(f"Screening of {_input_name(info)} with paneldiag "
                              f"{report['tool']['version']}."),
                    cautions_note(report)]
    paragraphs: list[str] = []

    def add_prose(texts: list[str]) -> None:
        for text in texts:
            blocks.append(Paragraph(text, prose=True))
            paragraphs.append(text)

    def add_figure(name: str) -> None:
        if name in figures:
            caption, svg = figures[name]
            blocks.append(FigureRef(name, caption, svg))

    reports = measure_reports(report)
    stems = measure_stems(report)
    for measure, rep in reports.items():
        stem = stems[measure]
        blocks.append(Heading(2, f"Measure: {measure}", f"measure-{stem}"))
        for title, writer in prose.MEASURE_PROSE:
            texts = writer(rep, cite)
            figure_names = {
                "Attrition": ["retention"],
                "Missing data": ["response_patterns"],
                "Distribution by wave": ["wave_means", "trajectories"],
                "Dependence over time": ["correlation", "lag_decay"],
                "Reliability": ["reliability"],
                "Growth": ["slopes"],
                "Groups": ["groups"],
            }.get(title, [])
            tables = {
                "Attrition": [retention_table(rep, min_cell)],
                "Distribution by wave": [wave_table(rep, min_cell)],
                "Dependence over time": [lag_table(rep, min_cell)],
                "Process families": [families_table(rep), power_table(rep),
                                     family_evidence(rep), specifications_table(rep)],
                "Groups": [group_table(rep)],
            }.get(title, [])
            drawn = [f"{stem}-{n}" for n in figure_names if f"{stem}-{n}" in figures]
            tables = [t for t in tables if t is not None]
            if not (texts or drawn or tables):
                continue
            blocks.append(Heading(3, title))
            weighting = weighting_sentence(rep, title)
            if weighting:
                blocks.append(Paragraph(weighting))
            add_prose(texts)
            blocks.extend(tables)
            for name in drawn:
                add_figure(name)
            if title == "Groups":
                for label in (rep.get("groups") or {}).get("reports") or {}:
                    texts = prose.group_summary(label, rep["groups"], cite)
                    if texts:
                        blocks.append(Heading(4, f"Group: {label}"))
                        add_prose(texts)
    pairs = report.get("cross_lag") or []
    if pairs:
        blocks.append(Heading(2, "Cross-lagged correlations between measures", "cross-lag"))
        for pair in pairs:
            blocks.append(Heading(3, f"{pair['x']} and {pair['y']}"))
            if pair.get("weighted"):
                blocks.append(Paragraph(f"Weighted by '{_weight_column(report)}': the "
                                        "correlations use the weights; counts are counts "
                                        "of units."))
            add_prose(prose.cross_lag(pair, cite))
            blocks.append(cross_lag_table(pair, min_cell))
            add_figure(f"cross-lag-{stems[pair['x']]}-{stems[pair['y']]}")
    methods = ("All confidence intervals are 95% intervals. Correlations are averaged on the "
               f"Fisher z scale {cite('fisher1921', 'hedges1985')}; their intervals come from "
               f"the delete-a-group jackknife over replicate groups of units "
               f"{cite('quenouille1956', 'kott2001')}. Figures use a palette that stays "
               f"distinguishable under colour-vision deficiencies {cite('okabe2008')} and "
               "differ by marker and line style as well.")
    blocks += [Heading(2, "Notes on methods", "methods"), Paragraph(methods)]
    blocks += [Heading(2, "References", "references"), ListBlock(tuple(cite.reference_list()))]
    blocks += reproducibility(report)
    return blocks, paragraphs


def draw_figures(report: dict, panel=None, trajectory_sample: int = 0,
                 trajectory_seed: int = 1) -> dict[str, tuple[str, bytes, bytes]]:
    """Every figure whose data are present: stem -> (caption, PNG bytes, SVG bytes)."""
    out = {}
    stems = measure_stems(report)
    for measure, rep in measure_reports(report).items():
        stem = stems[measure]
        for name, draw, caption in figs.MEASURE_FIGURES:
            drawn = figs.render(draw, rep)
            if drawn:
                out[f"{stem}-{name}"] = (caption, *drawn)
        if trajectory_sample and panel is not None and measure in panel.values:
            drawn = figs.render(figs.trajectory_figure, rep, panel.values[measure],
                                trajectory_sample, trajectory_seed)
            if drawn:
                out[f"{stem}-trajectories"] = (
                    f"Observed trajectories of a random sample of units (seed "
                    f"{trajectory_seed}); shown on request only, as individual data.", *drawn)
    for pair in report.get("cross_lag") or []:
        drawn = figs.render(figs.cross_lag_figure, pair)
        if drawn:
            out[f"cross-lag-{stems[pair['x']]}-{stems[pair['y']]}"] = (
                f"Cross-lagged correlations of {pair['x']} and {pair['y']} by lag, both "
                "directions, with 95% CIs.", *drawn)
    return out


def render_files(report: dict, panel=None, trajectory_sample: int = 0,
                 trajectory_seed: int = 1) -> dict[str, bytes]:
    """Every file of the report folder, by relative path."""
    drawn = draw_figures(report, panel, trajectory_sample, trajectory_seed)
    blocks, _ = build(report, {k: (cap, svg) for k, (cap, _png, svg) in drawn.items()})
    files = {"appendix.md": to_markdown(blocks).encode("utf-8"),
             "appendix.html": to_html(blocks, TITLE).encode("utf-8"),
             "tables.tex": to_latex(blocks, TITLE).encode("utf-8"),
             "report.json": report_json(report).encode("utf-8")}
    for stem, (_cap, png, svg) in sorted(drawn.items()):
        files[f"figures/{stem}.png"] = png
        files[f"figures/{stem}.svg"] = svg
    return files


def check_report_folder(folder: str, inputs: list[str]) -> None:
    """Refuse a folder that is or contains an input file, or holds files of other kinds."""
    target = os.path.realpath(folder)
    for path in inputs:
        if path == "-" or not os.path.exists(path):
            continue
        real = os.path.realpath(path)
        if real == target or real.startswith(target.rstrip(os.sep) + os.sep):
            raise InputProblem("the report folder is or contains the input file; choose "
                               "another folder", file=folder)
    if os.path.exists(folder):
        if not os.path.isdir(folder):
            raise InputProblem("the report path exists and is not a folder", file=folder)
        foreign = sorted(set(os.listdir(folder)) - set(FILES))
        if foreign:
            raise InputProblem(f"the report folder holds other files ({foreign[0]}, ...); "
                               "choose a new or empty folder", file=folder)
    parent = os.path.dirname(os.path.abspath(folder))
    if not os.path.isdir(parent):
        raise InputProblem("the folder that should hold the report does not exist",
                           file=folder)


def write_report(report: dict, folder: str, inputs: list[str], panel=None,
                 trajectory_sample: int = 0, trajectory_seed: int = 1) -> list[str]:
    """Write the report folder atomically; returns the relative paths written."""
    check_report_folder(folder, inputs)
    files = render_files(report, panel, trajectory_sample, trajectory_seed)
    parent = os.path.dirname(os.path.abspath(folder))
    name = os.path.basename(os.path.abspath(folder))
    build_dir = tempfile.mkdtemp(dir=parent, prefix=f".{name}-", suffix=".part")
    try:
        os.makedirs(os.path.join(build_dir, "figures"))
        for rel, payload in files.items():
            with open(os.path.join(build_dir, rel), "wb") as stream:
                stream.write(payload)
                stream.flush()
                os.fsync(stream.fileno())
        os.chmod(build_dir, 0o755)
        old = None
        if os.path.exists(folder):
            old = tempfile.mkdtemp(dir=parent, prefix=f".{name}-", suffix=".old")
            os.rmdir(old)
            os.replace(folder, old)
        try:
            os.replace(build_dir, folder)
        except OSError:
            if old:
                os.replace(old, folder)
            raise
        if old:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(build_dir, ignore_errors=True)
        raise
    return sorted(files)
