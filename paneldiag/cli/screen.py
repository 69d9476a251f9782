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
DATA is a CSV/TSV, Parquet, Stata, SPSS, SAS, Excel, OpenDocument, R (.rds, .RData) or
Arrow/Feather file, or '-' for standard input; --sheet picks a spreadsheet's sheet,
--r-object the data frame of an .RData file holding several. The terminal gets a summary;
--json PATH gets the full report (see docs/json-report.md).
"""

from __future__ import annotations

import sys

import click

from paneldiag.cli import Progress, use_color
from paneldiag.io.output import refuse_input_overwrite, write_atomic
from paneldiag.io.readers import FORMATS
from paneldiag.request import ScreenRequest, run_screen


D = ScreenRequest.default   # the defaults live with the request, shared with the Python API


@click.command("screen")
@click.argument("data", type=str)
@click.option("--id", "id", metavar="COL", multiple=True,
              help="Column with the unit id; repeat when the id is made of several columns "
                   "(e.g. --id site --id person: ids unique only within a site).")
@click.option("--wave", "wave", metavar="COL", help="Column with the wave (long data).")
@click.option("--value", "value", metavar="COL", multiple=True,
              help="A measure column (long data); repeat for several measures.")
@click.option("--wide", "wide", metavar="NAME=C1,C2,..", multiple=True,
              help="Wide data: a measure's wave columns in wave order; repeatable.")
@click.option("--items", "items", metavar="NAME=C1,C2,..", multiple=True,
              help="Long data: a scale measure NAME, the mean of these item columns at each "
                   "wave; repeatable.")
@click.option("--wave-labels", metavar="L1,L2,..", help="Wave labels for wide columns.")
@click.option("--wave-times", metavar="T1,T2,..",
              help="Numeric time of each wave (overrides times read from the labels).")
@click.option("--wave-order", type=click.Choice(["natural", "given"]), default=D("wave_order"),
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
@click.option("--max-waves", type=click.IntRange(2), default=D("max_waves"), show_default=True,
              help="Most distinct wave values a screen takes (above 40, only when most units "
                   "answer a quarter of them or more; else they look like continuous time).")
@click.option("--memory-limit", metavar="SIZE",
              help="Most memory the screen may need (e.g. 8G, 512M); a panel whose units x "
                   "waves matrices would need more stops before they are made. Default: "
                   "three quarters of the machine's memory.")
@click.option("--weight", metavar="COL", help="Longitudinal weight, one per unit.")
@click.option("--group", metavar="COL", help="A grouping column, constant within unit.")
@click.option("--covariate", "covariate", metavar="COL", multiple=True,
              help="A covariate for the dropout model; repeatable.")
@click.option("--missing-codes", metavar="CODES",
              help="Values meaning 'missing for a reason', e.g. -9,-8 or 'negative'.")
@click.option("--duplicates", type=click.Choice(["error", "first", "last", "mean"]),
              default=D("duplicates"), show_default=True,
              help="What to do with repeated unit-wave rows.")
@click.option("--drop-bad-rows", is_flag=True,
              help="Drop and count rows with a missing id or wave or a non-numeric or "
                   "infinite value, instead of stopping.")
@click.option("--format", "format", type=click.Choice(FORMATS),
              help="File format (default: by extension).")
@click.option("--delimiter", metavar="CHAR", help="Field delimiter of a text file.")
@click.option("--sheet", metavar="NAME|N",
              help="The sheet of a spreadsheet to read, by name or position from 1 "
                   "(default: the first).")
@click.option("--r-object", "r_object", metavar="NAME",
              help="The data frame to read from an .RData file holding several.")
@click.option("--max-memory", metavar="SIZE",
              help="Read a long CSV/TSV or Parquet file in blocks, holding at most about "
                   "SIZE (e.g. 2GB, 500MB) for the data; a file too large for half the "
                   "memory is read in blocks anyway (see docs/scale.md).")
@click.option("--engine", type=click.Choice(["local", "dask"]), default=D("engine"),
              show_default=True,
              help="Where a long CSV/TSV or Parquet file is read and summarised: here, or "
                   "on the workers of a Dask cluster (needs paneldiag[dask]; docs/scale.md).")
@click.option("--scheduler", metavar="ADDRESS",
              help="With --engine dask: the scheduler of a running cluster, e.g. "
                   "tcp://host:8786 (default: a cluster of this machine's cores, started "
                   "for the run).")
@click.option("--json", "json_path", metavar="PATH", help="Write the full JSON report here.")
@click.option("--triplet-table", "triplet_path", metavar="PATH",
              help="Write every triplet of waves' reliability values to this CSV file "
                   "(the report lists adjacent and evenly spaced triplets above 12 waves).")
@click.option("--min-cell", type=click.IntRange(1), default=D("min_cell"), show_default=True,
              help="Smallest count shown on its own (disclosure control).")
@click.option("--ordinal/--continuous", "ordinal", default=D("ordinal"),
              help="Treat every measure as ordinal (polychoric correlations) or as "
                   "continuous. Default: ordinal when all values are integers with at "
                   "most 7 distinct values.")
@click.option("--report", "report_dir", metavar="DIR",
              help="Write the methods appendix (Markdown, HTML, LaTeX tables, figures, "
                   "JSON) to this folder, replacing it whole.")
@click.option("--trajectory-sample", type=click.IntRange(0), default=D("trajectory_sample"),
              metavar="N",
              help="Add a figure of N randomly drawn units' trajectories to the report "
                   "(off by default: individual data).")
@click.option("--trajectory-seed", type=int, default=D("trajectory_seed"), show_default=True,
              metavar="SEED",
              help="Seed of the trajectory sample.")
@click.option("--rules", "rules", metavar="FILE",
              help="A TOML file of verdict thresholds replacing the defaults "
                   "(see docs/rules.md).")
@click.option("--audit-only", is_flag=True,
              help="Only the audit of who is observed when (wave profile, attrition, "
                   "response patterns, EM moments, Little's test): no dependence, "
                   "reliability, growth or verdicts. Quicker.")
@click.option("--disclosure-audit/--no-disclosure-audit", default=D("disclosure_audit"),
              show_default=True,
              help="Check all released counts together (sums, differences, groups beside "
                   "the whole) for counts under --min-cell they give away, and withhold "
                   "as few further counts as it can so that none does (docs/disclosure.md).")
@click.option("--chunk-units", type=click.IntRange(1), default=D("chunk_units"), hidden=True,
              help="Units summarised at a time (memory only; see DEVELOPERS.md).")
@click.option("--details", is_flag=True,
              help="Show every area in full in the terminal summary, not just key figures.")
@click.option("--quiet", "-q", is_flag=True, help="No terminal summary and no progress.")
def command(data, json_path, triplet_path, report_dir, details, quiet, **options):
    """Audit a panel file and screen which process families it can support."""
    progress = Progress(quiet)
    request = ScreenRequest(**options, triplet_table=bool(triplet_path))
    request.layout()   # bad options stop here, before any output path is checked
    for output in (json_path, triplet_path):
        if output:
            refuse_input_overwrite(output, [data])
    if report_dir:
        from paneldiag.render.appendix import check_report_folder, write_report
        check_report_folder(report_dir, [data])
    report, panel = run_screen(data, request, progress.stage)
    progress.done()
    if report_dir and request.trajectory_sample:
        report["input"]["options"].update(trajectory_sample=request.trajectory_sample,
                                          trajectory_seed=request.trajectory_seed)
    if triplet_path:
        write_atomic(triplet_path, triplet_csv(report))
    if json_path:
        from paneldiag.render.json import report_json
        write_atomic(json_path, report_json(report))
    if report_dir:
        progress.stage("writing the report")
        write_report(report, report_dir, [data], panel, request.trajectory_sample,
                     request.trajectory_seed)
        progress.done()
    if not quiet:
        from paneldiag.render.terminal import render_terminal
        sys.stdout.write(render_terminal(report, color=use_color(), details=details))


def triplet_csv(report: dict) -> str:
    import pandas as pd

    from paneldiag.pipeline import take_triplet_tables
    tables = [pd.DataFrame(t) for t in take_triplet_tables(report)]
    return (pd.concat(tables) if tables else pd.DataFrame()).to_csv(index=False)
