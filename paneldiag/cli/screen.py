"""paneldiag screen DATA: audit a panel and judge the process families it can support.

Long data (a row per unit and wave):
    paneldiag screen panel.csv --id person --wave year --value score [--value other ...]
    (--id twice, e.g. --id site --id person: the unit is the pair, shown as site/person;
    date waves in their written forms, --date-format when day and month could swap;
    continuous times such as age grouped with --wave-bins or --wave-round)
Wide data (a row per unit, a column per wave, columns in wave order):
    paneldiag screen panel.csv --id person --wide score=s1,s2,s3 [--wave-labels 2019,2020,2022]
A scale measured by several items at each wave (long data only):
    paneldiag screen panel.csv --id person --wave year --items calm=c1,c2,c3,c4
    (the measure 'calm' is the mean of its items; internal consistency is reported per wave)
DATA may be '-' for standard input. The terminal gets a summary; --json PATH gets the
full report (see docs/json-report.md).
"""

from __future__ import annotations

import sys

import click

from paneldiag.cli import Progress, use_color
from paneldiag.errors import InputProblem
from paneldiag.io.output import refuse_input_overwrite, write_atomic
from paneldiag.io.readers import FORMATS, read_table
from paneldiag.io.validate import LayoutSpec, MissingCodes, build_panel
from paneldiag.io.waves import MAX_WAVES, WaveGrouping


def _wide_option(items: tuple[str, ...]) -> tuple[tuple[str, tuple[str, ...]], ...]:
    measures = []
    for item in items:
        name, _, columns = item.rpartition("=")
        cols = tuple(c.strip() for c in columns.split(",") if c.strip())
        if len(cols) < 2:
            raise InputProblem(f"--wide '{item}' needs at least two columns, comma-separated")
        measures.append((name.strip() or "value", cols))
    return tuple(measures)


def _items_option(items: tuple[str, ...]) -> tuple[tuple[str, tuple[str, ...]], ...]:
    scales = []
    for item in items:
        name, sep, columns = item.partition("=")
        cols = tuple(c.strip() for c in columns.split(",") if c.strip())
        if not sep or not name.strip() or len(cols) < 2:
            raise InputProblem(f"--items '{item}' needs NAME=COL1,COL2,... with at least two "
                               "item columns")
        scales.append((name.strip(), cols))
    return tuple(scales)


def _list_option(text: str | None, name: str, numeric: bool = False):
    if text is None:
        return None
    items = [t.strip() for t in text.split(",") if t.strip()]
    if not numeric:
        return tuple(items)
    try:
        return tuple(float(t) for t in items)
    except ValueError:
        raise InputProblem(f"{name} must be comma-separated numbers, got '{text}'") from None


@click.command("screen")
@click.argument("data", type=str)
@click.option("--id", "id_columns", metavar="COL", multiple=True,
              help="Column with the unit id; repeat when the id is made of several columns "
                   "(e.g. --id site --id person: ids unique only within a site).")
@click.option("--wave", "wave_column", metavar="COL", help="Column with the wave (long data).")
@click.option("--value", "values", metavar="COL", multiple=True,
              help="A measure column (long data); repeat for several measures.")
@click.option("--wide", "wide", metavar="NAME=C1,C2,..", multiple=True,
              help="Wide data: a measure's wave columns in wave order; repeatable.")
@click.option("--items", "items", metavar="NAME=C1,C2,..", multiple=True,
              help="Long data: a scale measure NAME, the mean of these item columns at each "
                   "wave; repeatable.")
@click.option("--wave-labels", metavar="L1,L2,..", help="Wave labels for wide columns.")
@click.option("--wave-times", metavar="T1,T2,..",
              help="Numeric time of each wave (overrides times read from the labels).")
@click.option("--wave-order", type=click.Choice(["natural", "given"]), default="natural",
              show_default=True, help="Order of text wave labels.")
@click.option("--date-format", metavar="FORM",
              help="How wave dates are written when the data cannot tell: day-first, "
                   "month-first, or a strftime pattern such as '%d.%m.%y'.")
@click.option("--wave-bins", metavar="EDGES|N",
              help="Group numeric wave values (e.g. age) into bins: edges such as 0,5,10,15, "
                   "or a number of equal-width bins.")
@click.option("--wave-round", metavar="STEP",
              help="Round numeric wave values to the nearest multiple of STEP, or take date "
                   "waves as their month, quarter or year.")
@click.option("--max-waves", type=click.IntRange(2), default=MAX_WAVES, show_default=True,
              help="Most distinct wave values a screen takes (above 40, only when most units "
                   "answer a quarter of them or more; else they look like continuous time).")
@click.option("--weight", metavar="COL", help="Longitudinal weight, one per unit.")
@click.option("--group", metavar="COL", help="A grouping column, constant within unit.")
@click.option("--covariate", "covariates", metavar="COL", multiple=True,
              help="A covariate for the dropout model; repeatable.")
@click.option("--missing-codes", metavar="CODES",
              help="Values meaning 'missing for a reason', e.g. -9,-8 or 'negative'.")
@click.option("--duplicates", type=click.Choice(["error", "first", "last", "mean"]),
              default="error", show_default=True, help="What to do with repeated unit-wave rows.")
@click.option("--drop-bad-rows", is_flag=True,
              help="Drop and count rows with a missing id or wave or a non-numeric or "
                   "infinite value, instead of stopping.")
@click.option("--format", "fmt", type=click.Choice(FORMATS), help="File format (default: by extension).")
@click.option("--delimiter", metavar="CHAR", help="Field delimiter of a text file.")
@click.option("--json", "json_path", metavar="PATH", help="Write the full JSON report here.")
@click.option("--triplet-table", "triplet_path", metavar="PATH",
              help="Write every triplet of waves' reliability values to this CSV file "
                   "(the report lists adjacent and evenly spaced triplets above 12 waves).")
@click.option("--min-cell", type=click.IntRange(1), default=5, show_default=True,
              help="Smallest count shown on its own (disclosure control).")
@click.option("--ordinal/--continuous", "ordinal", default=None,
              help="Treat every measure as ordinal (polychoric correlations) or as "
                   "continuous. Default: ordinal when all values are integers with at "
                   "most 7 distinct values.")
@click.option("--report", "report_dir", metavar="DIR",
              help="Write the methods appendix (Markdown, HTML, LaTeX tables, figures, "
                   "JSON) to this folder, replacing it whole.")
@click.option("--trajectory-sample", type=click.IntRange(0), default=0, metavar="N",
              help="Add a figure of N randomly drawn units' trajectories to the report "
                   "(off by default: individual data).")
@click.option("--trajectory-seed", type=int, default=1, show_default=True, metavar="SEED",
              help="Seed of the trajectory sample.")
@click.option("--rules", "rules_path", metavar="FILE",
              help="A TOML file of verdict thresholds replacing the defaults "
                   "(see docs/rules.md).")
@click.option("--audit-only", is_flag=True,
              help="Only the audit of who is observed when (wave profile, attrition, "
                   "response patterns, EM moments, Little's test): no dependence, "
                   "reliability, growth or verdicts. Quicker.")
@click.option("--details", is_flag=True,
              help="Show every area in full in the terminal summary, not just key figures.")
@click.option("--quiet", "-q", is_flag=True, help="No terminal summary and no progress.")
def command(data, id_columns, wave_column, values, wide, items, wave_labels, wave_times,
            wave_order, date_format, wave_bins, wave_round, max_waves, weight, group,
            covariates, missing_codes, duplicates, drop_bad_rows, fmt, delimiter, json_path,
            triplet_path, min_cell, ordinal, report_dir, trajectory_sample, trajectory_seed,
            rules_path, audit_only, details, quiet):
    """Audit a panel file and screen which process families it can support."""
    progress = Progress(quiet)
    spec = LayoutSpec(
        id=id_columns[0] if len(id_columns) == 1 else (tuple(id_columns) or None),
        wave=wave_column, values=tuple(values), wide=_wide_option(wide),
        items=_items_option(items),
        wave_labels=_list_option(wave_labels, "--wave-labels"),
        wave_times=_list_option(wave_times, "--wave-times", numeric=True),
        wave_order=wave_order, date_format=date_format,
        wave_grouping=WaveGrouping.parse(wave_bins, wave_round), max_waves=max_waves,
        weight=weight, group=group, covariates=tuple(covariates),
        missing_codes=MissingCodes.parse(missing_codes), duplicates=duplicates,
        bad_values="drop" if drop_bad_rows else "error")
    if not spec.measure_names():
        raise InputProblem("name at least one measure with --value (long) or --wide (wide)")
    thresholds = None
    if rules_path:
        from paneldiag.rules.thresholds import load_thresholds
        thresholds = load_thresholds(rules_path)
    for output in (json_path, triplet_path):
        if output:
            refuse_input_overwrite(output, [data])
    if report_dir:
        from paneldiag.render.appendix import check_report_folder, write_report
        check_report_folder(report_dir, [data])
    progress.stage(f"reading {data}")
    raw = read_table(data, fmt, columns=spec.columns(), delimiter=delimiter)
    progress.stage("building the panel")
    panel, ledgers = build_panel(raw, spec)
    progress.stage("screening")
    sha256, file_format = raw.sha256, raw.format
    del raw  # the parsed columns are in the panel now: free them before the screen
    input_info = {"path": data, "sha256": sha256, "format": file_format,
                  "options": dict(_options_record(spec, fmt, delimiter, min_cell),
                                  scale=_scale(ordinal))}
    if rules_path:
        input_info["options"]["rules"] = rules_path
    if audit_only:
        input_info["options"]["audit_only"] = True
    if report_dir and trajectory_sample:
        input_info["options"].update(trajectory_sample=trajectory_sample,
                                     trajectory_seed=trajectory_seed)
    # the diagnostics are imported only once there is data to screen, so a bad input is
    # reported without paying for their (heavy) imports
    from paneldiag.render.json import report_json
    from paneldiag.render.terminal import render_terminal
    from paneldiag.screen import ScreenOptions, screen
    report = screen(panel, ledgers, input_info,
                    ScreenOptions(min_cell=min_cell, scale=_scale(ordinal), group_column=group,
                                  rules=thresholds, audit_only=audit_only,
                                  triplet_table=bool(triplet_path)))
    progress.done()
    if triplet_path:
        import pandas as pd
        from paneldiag.screen import take_triplet_tables
        tables = [pd.DataFrame(t) for t in take_triplet_tables(report)]
        write_atomic(triplet_path, (pd.concat(tables) if tables else pd.DataFrame())
                     .to_csv(index=False))
    if json_path:
        write_atomic(json_path, report_json(report))
    if report_dir:
        progress.stage("writing the report")
        write_report(report, report_dir, [data], panel, trajectory_sample, trajectory_seed)
        progress.done()
    if not quiet:
        sys.stdout.write(render_terminal(report, color=use_color(), details=details))


def _scale(ordinal: bool | None) -> str:
    return "auto" if ordinal is None else ("ordinal" if ordinal else "continuous")


def _options_record(spec: LayoutSpec, fmt, delimiter, min_cell) -> dict:
    """The options that shaped the result, for the reproducibility record."""
    record = {
        "layout": spec.layout,
        "id": spec.id if isinstance(spec.id, str) or spec.id is None else list(spec.id), "wave": spec.wave, "values": list(spec.values),
        "wide": {name: list(cols) for name, cols in spec.wide},
        "items": {name: list(cols) for name, cols in spec.items},
        "wave_labels": list(spec.wave_labels) if spec.wave_labels else None,
        "wave_times": list(spec.wave_times) if spec.wave_times else None,
        "wave_order": spec.wave_order, "date_format": spec.date_format,
        **spec.wave_grouping.record(),
        "max_waves": spec.max_waves if spec.max_waves != MAX_WAVES else None,
        "weight": spec.weight, "group": spec.group,
        "covariates": list(spec.covariates), "missing_codes": spec.missing_codes.describe(),
        "duplicates": spec.duplicates, "drop_bad_rows": spec.bad_values == "drop",
        "format": fmt, "delimiter": delimiter, "min_cell": min_cell,
    }
    return {k: v for k, v in record.items() if v not in (None, [], {}, "")}
