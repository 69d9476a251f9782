"""The validation study of the process-family verdicts: panels of known truth.

    python -m paneldiag.validation [--grid full|target|reduced|departures|departures-reduced]
                                   [--reps R] [--seed S] [--workers W]
                                   [--out docs/validation-table.md]
    paneldiag check-verdicts ...     (the same, as a paneldiag command)

For every family of ``paneldiag.simulate.FAMILIES`` and every condition of the grid
(units N, waves T, reliability, dropout), R panels are simulated with
``simulate.family_values`` and screened in-process: the Panel goes straight to the
rule sections of the screen (no file round trip). Each panel's supported family (if
any) is recorded. The confusion table gives, per true family, the recall (the true
family is supported) and the false support of every other family (that family is
supported instead). Panels run on a process pool; every panel has its own seed drawn
from one ``numpy.random.SeedSequence``, so the table is the same whatever the number
of workers.

The departure grids cross every departure from the textbook assumptions
(``paneldiag.simulate.DEPARTURES``: error variances that differ by wave, a carry-over
variance that rises over time, unit-specific curvature, skewed or heavy-tailed draws,
ordinal scores) with the families it applies to (``simulate.DEPARTURE_FAMILIES``), and
report recall and false support per departure. They use error-free measures (the
wave_error departure brings its own error: reliability 0.9 at the first wave) and no
dropout or MCAR dropout, so that each cell shows the departure's own effect; the full
one includes the textbook processes ("none") as the reference.
"""

from __future__ import annotations

import argparse
import itertools
import os
import sys
from dataclasses import dataclass

import numpy as np

from paneldiag.simulate import DEPARTURE_FAMILIES, DEPARTURES, FAMILIES

FULL_GRID = {"n_units": (300, 1000, 3000), "n_waves": (4, 6, 10),
             "reliability": (1.0, 0.6), "dropout": ("none", "mcar", "dependent")}
TARGET_GRID = {"n_units": (1000, 3000), "n_waves": (6, 10), "reliability": (1.0, 0.6),
               "dropout": ("none", "mcar", "dependent")}
REDUCED_GRID = {"n_units": (1000,), "n_waves": (6,), "reliability": (1.0, 0.6),
                "dropout": ("none", "dependent")}
# departures: N {100, 300, 1000} x T {4, 6, 10} x dropout none/MCAR, error-free measures
DEPARTURE_GRID = {"departure": DEPARTURES, "n_units": (100, 300, 1000), "n_waves": (4, 6, 10),
                  "reliability": (1.0,), "dropout": ("none", "mcar")}
DEPARTURE_REDUCED_GRID = {"departure": DEPARTURES[1:], "n_units": (1000,), "n_waves": (6,),
                          "reliability": (1.0,), "dropout": ("none",)}
DEPARTURE_TARGET_GRID = {"departure": DEPARTURES, "n_units": (1000,), "n_waves": (6, 10),
                         "reliability": (1.0,), "dropout": ("none", "mcar")}
SEED = 20240611
GRIDS = {"full": FULL_GRID, "target": TARGET_GRID, "reduced": REDUCED_GRID,
         "departures": DEPARTURE_GRID, "departures-target": DEPARTURE_TARGET_GRID,
         "departures-reduced": DEPARTURE_REDUCED_GRID}


@dataclass(frozen=True)
class Condition:
    family: str
    n_units: int
    n_waves: int
    reliability: float
    dropout: str
    departure: str = "none"   # paneldiag.simulate.DEPARTURES

    def in_target(self) -> bool:
        """The region the targets are set for: N >= 1000 and T >= 6."""
        return self.n_units >= 1000 and self.n_waves >= 6


def panel_of(values: np.ndarray):
    from paneldiag.panel import Panel
    n, t = values.shape
    return Panel(unit_ids=np.array([f"u{i}" for i in range(n)]),
                 wave_labels=tuple(str(k) for k in range(t)),
                 wave_times=np.arange(t, dtype=float), values={"score": values})


def verdicts_for_panel(panel, measure: str = "score", options=None) -> list[dict]:
    """The families section of a screen of ``panel``: the rule sections run on a
    measure context exactly as ``paneldiag.pipeline`` runs them."""
    from paneldiag.io.ledger import Ledger
    from paneldiag.rules import RULE_SECTIONS
    from paneldiag.pipeline import MeasureContext, ScreenOptions, run_sections

    ctx = MeasureContext(panel=panel, measure=measure, options=options or ScreenOptions(),
                         ledger=Ledger(rows_read=0, rows_used=0))
    return run_sections(ctx, RULE_SECTIONS)["families"]


def _one(task) -> tuple[Condition, str | None]:
    condition, seed, rules_path = task
    rng = np.random.default_rng(seed)
    from paneldiag.rules import load_thresholds
    from paneldiag.pipeline import ScreenOptions
    from paneldiag.simulate import family_values
    values = family_values(condition.family, condition.n_units, condition.n_waves,
                           condition.reliability, condition.dropout, rng, condition.departure)
    options = ScreenOptions(rules=load_thresholds(rules_path)) if rules_path else None
    families = verdicts_for_panel(panel_of(values), options=options)
    supported = [f["family"] for f in families if f["verdict"] == "supported"]
    return condition, (supported[0] if supported else None)


def conditions_of(grid: dict) -> list[Condition]:
    """The cells of ``grid``: every family (or, with a "departure" axis, every family
    each departure applies to) crossed with units, waves, reliability and dropout."""
    cells = list(itertools.product(grid["n_units"], grid["n_waves"], grid["reliability"],
                                   grid["dropout"]))
    if "departure" not in grid:
        return [Condition(f, n, t, r, d) for f in FAMILIES for n, t, r, d in cells]
    return [Condition(f, n, t, r, d, dep) for dep in grid["departure"]
            for f in DEPARTURE_FAMILIES[dep] for n, t, r, d in cells]


def tasks(grid: dict, reps: int, seed: int = SEED, rules_path: str | None = None):
    conditions = conditions_of(grid)
    seeds = np.random.SeedSequence(seed).spawn(len(conditions) * reps)
    return [(c, seeds[i * reps + k], rules_path) for i, c in enumerate(conditions)
            for k in range(reps)]


def _init_worker():
    try:
        from threadpoolctl import threadpool_limits
        threadpool_limits(limits=1)
    except ImportError:  # pragma: no cover
        pass


def run(grid: dict, reps: int, seed: int = SEED, workers: int = 2,
        rules_path: str | None = None, progress=None) -> list[tuple]:
    """Every panel's (condition, supported family or None), in task order."""
    work = tasks(grid, reps, seed, rules_path)
    if workers <= 1:
        _init_worker()
        return [_one(task) for task in work]
    import multiprocessing as mp
    ctx = mp.get_context("spawn")
    with ctx.Pool(workers, initializer=_init_worker) as pool:
        out = []
        for done in pool.imap(_one, work, chunksize=max(1, min(16, len(work) // (8 * workers)))):
            out.append(done)
            if progress is not None and len(out) % 50 == 0:
                progress(len(out), len(work))
        return out


@dataclass(frozen=True)
class Rates:
    n: int
    recall: float
    false_support: dict   # other family -> share of panels where it was supported
    none_supported: float


def confusion(results, select=lambda c: True) -> dict[str, Rates]:
    """Per true family: recall, false support per other family, share with none."""
    out = {}
    for fam in FAMILIES:
        picked = [s for c, s in results if c.family == fam and select(c)]
        n = len(picked)
        if n == 0:
            continue
        counts = {g: sum(1 for s in picked if s == g) / n for g in FAMILIES if g != fam}
        out[fam] = Rates(n, sum(1 for s in picked if s == fam) / n, counts,
                         sum(1 for s in picked if s is None) / n)
    return out


def by_condition(results) -> list[tuple]:
    """(N, T, reliability, dropout, family, n, recall, worst false support, to which)."""
    return [(*key[1:], *rest) for key, *rest in _by_cell(results)]


def _by_cell(results) -> list[tuple]:
    """((departure, N, T, reliability, dropout, family), n, recall, worst false support,
    to which), sorted by departure in the order of DEPARTURES, then by the rest."""
    groups: dict = {}
    for c, s in results:
        groups.setdefault((DEPARTURES.index(c.departure), c.n_units, c.n_waves,
                           c.reliability, c.dropout, c.family), []).append(s)
    rows = []
    for key, picked in sorted(groups.items()):
        fam = key[-1]
        n = len(picked)
        others = {g: sum(1 for s in picked if s == g) / n for g in FAMILIES if g != fam}
        worst = max(others, key=others.get)
        rows.append(((DEPARTURES[key[0]], *key[1:]), n,
                     sum(1 for s in picked if s == fam) / n, others[worst], worst))
    return rows


def departure_rates(results, select=lambda c: True) -> dict[str, dict[str, Rates]]:
    """Per departure present in ``results`` (in the order of DEPARTURES): the
    ``confusion`` of its panels that ``select`` keeps."""
    present = {c.departure for c, _ in results}
    out = {}
    for dep in DEPARTURES:
        if dep in present:
            rates = confusion(results, lambda c, dep=dep: c.departure == dep and select(c))
            if rates:
                out[dep] = rates
    return out


SHORT = {"occasion_noise": "noise", "stable_trait": "trait", "autoregressive": "AR",
         "trait_autoregressive": "trait+AR", "linear_growth": "lin", "quadratic_growth": "quad",
         "free_shape_growth": "free", "growth_autoregressive": "growth+AR"}


def confusion_markdown(rates: dict[str, Rates], title: str) -> str:
    head = ["true family", "panels", "recall", "none supported"] + \
        [f"→ {SHORT[g]}" for g in FAMILIES]
    lines = [f"**{title}**", "", "| " + " | ".join(head) + " |",
             "|" + "---|" * len(head)]
    for fam, r in rates.items():
        cells = [fam, str(r.n), f"{r.recall:.3f}", f"{r.none_supported:.3f}"]
        cells += ["·" if g == fam else f"{r.false_support[g]:.3f}" for g in FAMILIES]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


# the part tests a family's verdict needs to reject (its defining parts)
REQUIRED_TESTS = {"occasion_noise": (), "stable_trait": ("dependence",),
                  "autoregressive": ("carry",), "trait_autoregressive": ("trait", "carry"),
                  "linear_growth": ("growth",), "quadratic_growth": ("growth",),
                  "free_shape_growth": ("growth",),
                  "growth_autoregressive": ("growth", "growth_carry")}


def power_bound(condition: Condition) -> float:
    """The asymptotic power of the weakest of the tests the true family's verdict needs,
    for the cell's units, waves, reliability and response patterns (monotone dropout at
    the simulation's hazard; paneldiag.power): recall cannot be expected above it."""
    from paneldiag.power import population_tests
    from paneldiag.rules.thresholds import default_thresholds
    from paneldiag.rules.verdicts import PART_TESTS, lr_power
    from paneldiag.simulate import (DROPOUT_HAZARD, family_process, population_covariance,
                                    population_mean)
    required = REQUIRED_TESTS[condition.family]
    if not required:
        return 1.0
    alpha = default_thresholds()["alpha"]
    times = np.arange(condition.n_waves, dtype=float)
    process = family_process(condition.family, times, condition.reliability)
    hazard = 0.0 if condition.dropout == "none" else DROPOUT_HAZARD
    # every required test from one run of the rules on the population moments
    tests = population_tests(population_covariance(process, times),
                             population_mean(process, times), times, condition.n_units,
                             alpha, hazard, tests=required)
    return min(lr_power(tests[test][0], tests[test][1], alpha, PART_TESTS[test][4])[0]
               for test in required)


def power_markdown(results) -> str:
    """Recall against the power bound, per cell of the target region: the target is
    recall >= 0.95 where the bound is >= 0.95, and recall within 0.05 of the bound
    elsewhere (with 10 panels a cell, one panel is 0.1 of recall)."""
    lines = ["**Recall against the power of the tests the verdict needs** (target region; "
             "bound: the asymptotic power of the weakest required part test at the cell's "
             "response patterns)", "",
             "| N | T | reliability | dropout | true family | panels | power bound | recall "
             "| target |", "|---|---|---|---|---|---|---|---|---|"]
    for (dep, n, t, rel, drop, fam), k, rec, _, _ in _by_cell(results):
        condition = Condition(fam, n, t, rel, drop, dep)
        if not condition.in_target() or dep != "none":
            continue
        bound = power_bound(condition)
        goal = 0.95 if bound >= 0.95 else bound - 0.05
        lines.append(f"| {n} | {t} | {rel} | {drop} | {fam} | {k} | {bound:.3f} | "
                     f"{rec:.2f} | {'met' if rec >= goal else 'missed'} |")
    return "\n".join(lines)


def report_markdown(results, grid: dict, reps: int, seed: int,
                    with_power: bool = False) -> str:
    if "departure" in grid:
        return departures_markdown(results, grid, reps, seed)
    parts = [f"Grid: N {list(grid['n_units'])}, T {list(grid['n_waves'])}, reliability "
             f"{list(grid['reliability'])}, dropout {list(grid['dropout'])}; {reps} panels "
             f"per cell; seed {seed}.", ""]
    parts.append(confusion_markdown(confusion(results, lambda c: c.in_target()),
                                    "Target region: N >= 1000 and T >= 6"))
    parts += ["", confusion_markdown(confusion(results), "Whole grid"), ""]
    parts.append("**Per condition** (recall of the true family; the largest false support "
                 "and the family it went to)")
    parts += ["", "| N | T | reliability | dropout | true family | panels | recall | "
                  "worst false support | to |", "|---|---|---|---|---|---|---|---|---|"]
    for n, t, rel, drop, fam, k, rec, worst, to in by_condition(results):
        parts.append(f"| {n} | {t} | {rel} | {drop} | {fam} | {k} | {rec:.2f} | "
                     f"{worst:.2f} | {SHORT[to] if worst > 0 else '–'} |")
    if with_power and any(c.in_target() for c, _ in results):
        parts += ["", power_markdown(results)]
    return "\n".join(parts) + "\n"


def _largest_false(rates: Rates) -> tuple[float, str]:
    to = max(rates.false_support, key=rates.false_support.get)
    share = rates.false_support[to]
    return share, (SHORT[to] if share > 0 else "–")


def departures_markdown(results, grid: dict, reps: int, seed: int) -> str:
    """The departure grid's report: per departure and true family, recall and false
    support in the target region (a summary row each, then the confusion tables), over
    the whole grid, and per condition."""
    deps = list(grid["departure"])
    parts = [f"Departures {deps}; N {list(grid['n_units'])}, T {list(grid['n_waves'])}, "
             f"reliability {list(grid['reliability'])} (wave_error: 0.9 at the first wave "
             f"when 1.0), dropout {list(grid['dropout'])}; {reps} panels per cell; "
             f"seed {seed}.", ""]
    in_target = departure_rates(results, lambda c: c.in_target())
    whole = departure_rates(results)
    parts += ["**Per departure** (recall of the true family and the largest false support of "
              "another family, in the target region N >= 1000 and T >= 6, and over the "
              "whole grid)", "",
              "| departure | true family | panels (target) | recall (target) | "
              "largest false support (target) | to | recall (whole grid) | "
              "largest false support (whole grid) | to |",
              "|---|---|---|---|---|---|---|---|---|"]
    for dep, rates in whole.items():
        for fam, r in rates.items():
            cells = [dep, fam]
            t = in_target.get(dep, {}).get(fam)
            if t is None:
                cells += ["0", "–", "–", "–"]
            else:
                share, to = _largest_false(t)
                cells += [str(t.n), f"{t.recall:.3f}", f"{share:.3f}", to]
            share, to = _largest_false(r)
            cells += [f"{r.recall:.3f}", f"{share:.3f}", to]
            parts.append("| " + " | ".join(cells) + " |")
    for dep, rates in in_target.items():
        parts += ["", confusion_markdown(rates, f"{dep}: target region, N >= 1000 and T >= 6")]
    if any(not c.in_target() for c, _ in results):
        for dep, rates in whole.items():
            parts += ["", confusion_markdown(rates, f"{dep}: whole grid")]
    parts += ["", "**Per condition** (recall of the true family; the largest false support "
                  "and the family it went to)", "",
              "| departure | N | T | reliability | dropout | true family | panels | recall | "
              "worst false support | to |", "|---|---|---|---|---|---|---|---|---|---|"]
    for (dep, n, t, rel, drop, fam), k, rec, worst, to in _by_cell(results):
        parts.append(f"| {dep} | {n} | {t} | {rel} | {drop} | {fam} | {k} | {rec:.2f} | "
                     f"{worst:.2f} | {SHORT[to] if worst > 0 else '–'} |")
    return "\n".join(parts) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m paneldiag.validation",
                                     description="Validate the process-family verdicts on "
                                                 "simulated panels of known truth.")
    parser.add_argument("--grid", choices=list(GRIDS), default="full")
    parser.add_argument("--reps", type=int, default=20, help="panels per cell")
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--workers", type=int, default=min(2, os.cpu_count() or 1))
    parser.add_argument("--out", help="write the Markdown tables here (else stdout)")
    parser.add_argument("--rules", help="a thresholds file, as for paneldiag screen --rules")
    parser.add_argument("--no-power", action="store_true",
                        help="leave out the table of recall against the power bound")
    args = parser.parse_args(argv)
    grid = GRIDS[args.grid]
    if args.rules:
        from paneldiag.rules import load_thresholds
        load_thresholds(args.rules)  # refuse a bad file before any work
    def progress(done, total):
        sys.stderr.write(f"{done}/{total} panels\n")
        sys.stderr.flush()
    results = run(grid, args.reps, args.seed, args.workers, args.rules, progress)
    text = report_markdown(results, grid, args.reps, args.seed, not args.no_power)
    if args.out:
        from paneldiag.io.output import write_atomic
        write_atomic(args.out, text)
    else:
        sys.stdout.write(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
