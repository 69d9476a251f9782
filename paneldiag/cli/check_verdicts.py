"""paneldiag check-verdicts: validate the process-family verdicts on panels of known truth.

    paneldiag check-verdicts                       # full grid, 20 panels a cell, both cores
    paneldiag check-verdicts --grid reduced --reps 5
    paneldiag check-verdicts --grid departures --reps 20 --out departures.md
    paneldiag check-verdicts --grid departures-reduced --reps 10
    paneldiag check-verdicts --out docs/validation-table.md --rules my-thresholds.toml
Simulates panels from every family (paneldiag.simulate.family_process) over a grid of
units, waves, reliability and dropout, screens each in-process and writes the
confusion table: recall of the true family and false support of every other family.
The departure grids do the same for processes that break one textbook assumption each
(error variances that differ by wave, rising variance, unit-specific curvature, skewed,
heavy-tailed or ordinal scores) and report the rates per departure.
Seeded: the same options give the same table. Same as `python -m paneldiag.validation`.
"""

from __future__ import annotations

import os
import sys

import click

GRID_NAMES = ["full", "target", "reduced", "departures", "departures-target",
              "departures-reduced"]


@click.command("check-verdicts")
@click.option("--grid", type=click.Choice(GRID_NAMES), default="full",
              show_default=True, help="The full grid, its target region (N >= 1000, "
                                      "T >= 6), the small grid the test suite runs, or "
                                      "the departure grid (full, its target region, or "
                                      "reduced).")
@click.option("--reps", type=click.IntRange(1), default=20, show_default=True,
              help="Simulated panels per cell of the grid.")
@click.option("--seed", type=int, default=None, help="Seed of the whole study.")
@click.option("--workers", type=click.IntRange(1), default=min(2, os.cpu_count() or 1),
              show_default=True, help="Worker processes.")
@click.option("--rules", "rules_path", metavar="FILE", help="Verdict thresholds to use.")
@click.option("--out", metavar="PATH", help="Write the Markdown tables here (else stdout).")
@click.option("--power/--no-power", default=True, show_default=True,
              help="Add the table of recall against the power of the tests the verdicts "
                   "need (the target region; a few minutes).")
def command(grid, reps, seed, workers, rules_path, out, power):
    """Validate the process-family verdicts on simulated panels of known truth."""
    from paneldiag import validation
    from paneldiag.io.output import write_atomic
    if rules_path:
        from paneldiag.rules.thresholds import load_thresholds
        load_thresholds(rules_path)
    seed = validation.SEED if seed is None else seed
    chosen = validation.GRIDS[grid]
    results = validation.run(chosen, reps, seed, workers, rules_path)
    text = validation.report_markdown(results, chosen, reps, seed, power)
    if out:
        write_atomic(out, text)
    else:
        sys.stdout.write(text)
