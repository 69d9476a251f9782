"""The screen: for each measure, summaries in one pass, then every diagnostic section.

A section is a function of a ``MeasureContext`` returning a result object (or None
when it does not apply). ``sections()`` lists them in report order; a new diagnostic
area adds its summary kinds to ``SUMMARY_KINDS`` and its section there.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import cached_property
from typing import Callable

from paneldiag import SCHEMA_VERSION, __version__, ahead
from paneldiag.diagnostics.attrition import attrition_section, measure_dropout_model
from paneldiag.diagnostics.crosslag import cross_lag_screen
from paneldiag.diagnostics.degenerate import degenerate_section
from paneldiag.diagnostics.groups import group_screen
from paneldiag.diagnostics.missingness import missingness_section
from paneldiag.diagnostics.profile import wave_profile
from paneldiag.io.ledger import Ledger
from paneldiag.panel import Panel
from paneldiag.results import plain
from paneldiag.summaries import CHUNK_UNITS, N_REPLICATES, summarise
from paneldiag.summaries.contingency import PairwiseTables
from paneldiag.summaries.moments import WaveMoments
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries.patterns import PatternMoments
from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments
from paneldiag.summaries.trajectories import TrajectorySummary

CAUTION_SCREENING = (
    "Screening evidence is not proof of a model: it shows which process families the data "
    "can support; candidate models must still be fitted and compared.")


@dataclass(frozen=True)
class ScreenOptions:
    min_cell: int = 5              # smallest count ever shown (disclosure control)
    n_replicates: int = N_REPLICATES
    chunk_units: int = CHUNK_UNITS
    scale: str = "auto"             # "auto", "ordinal" or "continuous" (dependence)
    group_column: str | None = None  # name of the grouping column, for by-group screens
    by_group: bool = True            # screen each group too when the panel has groups
    rules: object = None             # paneldiag.rules.Thresholds (None: the defaults)
    audit_only: bool = False         # only the audit areas (AUDIT_SECTIONS)
    disclosure_audit: bool = False   # the released counts audited together (protect_report)
    triplet_table: bool = False      # every triplet's reliability, for a file of its own
    workers: int | None = None   # threads (1: a serial run; None: ahead.workers decides)


@dataclass
class MeasureContext:
    """What a section sees: the panel, the measure, the options and the summaries."""

    panel: Panel
    measure: str
    options: ScreenOptions
    ledger: Ledger
    results: dict = field(default_factory=dict)  # earlier sections' results, by key
    started: dict = field(default_factory=dict)  # work started ahead (paneldiag.ahead)

    @cached_property
    def summaries(self) -> dict:
        kinds = AUDIT_SUMMARY_KINDS if self.options.audit_only else SUMMARY_KINDS
        return summarise(self.panel, self.measure, list(kinds),
                         chunk_units=self.options.chunk_units,
                         n_replicates=self.options.n_replicates)

    def summary(self, kind: type):
        return self.summaries[kind]

    @property
    def values(self):
        return self.panel.values[self.measure]


def _panel_section(ctx: MeasureContext) -> dict:
    return {"n_units": ctx.panel.n_units, "n_waves": ctx.panel.n_waves,
            "waves": list(ctx.panel.wave_labels), "times": plain(ctx.panel.wave_times),
            "time_unit": ctx.panel.time_unit, "wave_reading": dict(ctx.panel.wave_reading)}


SUMMARY_KINDS: list[type] = [WaveMoments, PairwiseMoments, PairwiseTables, TrajectorySummary,
                             PatternMoments, ReplicatePatternMoments]
Section = tuple[str, Callable[[MeasureContext], object]]
# The audit of who is observed when: a quick screen of its own (--audit-only), which needs
# only these summaries.
AUDIT_SECTIONS: list[Section] = [
    ("panel", _panel_section),
    ("degenerate", degenerate_section),
    ("wave_profile", lambda ctx: wave_profile(ctx.summary(WaveMoments), ctx.panel.wave_labels)),
    ("attrition", attrition_section),
    ("missingness", missingness_section),
]
AUDIT_SUMMARY_KINDS: list[type] = [WaveMoments, PatternMoments]


def sections(audit_only: bool = False) -> list[Section]:
    """The sections in report order. The areas beyond the audit are imported here, on
    first use, so that an audit-only screen does not pay for their imports."""
    if audit_only:
        return AUDIT_SECTIONS
    from paneldiag.diagnostics.dependence import SECTIONS as DEPENDENCE_SECTIONS
    from paneldiag.diagnostics.profile import distribution_section
    from paneldiag.diagnostics.growth import growth_section
    from paneldiag.diagnostics.reliability import reliability_section
    from paneldiag.rules import RULE_SECTIONS
    return [*AUDIT_SECTIONS, ("distribution", distribution_section), *DEPENDENCE_SECTIONS,
            ("reliability", reliability_section),
            ("growth", growth_section),
            *RULE_SECTIONS]  # always last: the verdicts read every earlier section


def screen_measure(panel: Panel, measure: str, ledger: Ledger, input_info: dict,
                   options: ScreenOptions, summaries: dict | None = None) -> dict:
    """The JSON-ready report for one measure (``summaries``: built elsewhere, merged)."""
    ctx = MeasureContext(panel=panel, measure=measure, options=options, ledger=ledger)
    if summaries is not None:
        ctx.summaries = summaries
    report = {"schema_version": SCHEMA_VERSION,
              "tool": {"name": "paneldiag", "version": __version__},
              "input": input_info, "measure": measure, "ledger": ledger.to_dict()}
    report.update(run_sections(ctx))
    if options.by_group and panel.groups is not None:
        report["groups"] = plain(group_screen(ctx, lambda sub: _run_group(ctx, sub)))
        if panel.weights is not None and isinstance(report["groups"], dict):
            report["groups"]["weighted"] = report["weighting"]["sections"]["groups"] = True
    # the counts of all sections together, before any of them is written
    if options.disclosure_audit:
        from paneldiag.disclosure_audit import protect_report
        report["disclosure"] = protect_report(report, panel, measure, options.min_cell)
    report["cautions"] = cautions(options, weighted=panel.weights is not None)
    return report


# Sections that stay unweighted under --weight: what the panel is (its units, waves and
# times), counted in units. Every other section is weighted (docs/design.md, "Weights").
UNWEIGHTED_SECTIONS = ("panel",)


def work_ahead(ctx: MeasureContext) -> list[Callable]:
    """The costly work of the context's screen that depends on the panel alone."""
    if ctx.options.audit_only:
        return [measure_dropout_model]
    from paneldiag.diagnostics.dependence import measure_rank_moments
    return [measure_dropout_model] + ([measure_rank_moments] if ctx.panel.n_waves > 1 else [])


def run_sections(ctx: MeasureContext, chosen: list[Section] | None = None) -> dict:
    """Each section (default: those of the context's options) on one context, as
    JSON-ready values. With weights, each section that is a mapping says whether it is
    weighted (``weighted``), and ``weighting`` lists every section's state."""
    out = {}
    ahead.start(ctx, work_ahead(ctx) if chosen is None else [])
    for key, section in chosen or sections(ctx.options.audit_only):
        result = section(ctx)
        ctx.results[key] = result
        if result is not None:
            out[key] = plain(result)
    if ctx.panel.weights is not None:
        state = {key: key not in UNWEIGHTED_SECTIONS for key in out}
        for key, value in out.items():
            if isinstance(value, dict):
                value["weighted"] = state[key]
        out["weighting"] = {"sections": state, "note": WEIGHTING_NOTE}
    return out


WEIGHTING_NOTE = (
    "The unit weights are rescaled to average 1 over the units screened. Shares, means, "
    "SDs, correlations, ML moments, the dropout model, reliabilities, growth figures and "
    "the structure fits behind the verdicts are weighted (pseudo-likelihood where a "
    "likelihood is fitted); intervals come from the delete-a-group jackknife. Counts are "
    "counts of units, and disclosure control applies to them, never to weight sums; the "
    "BIC and the tests take N as the number of units.")


def _run_group(ctx: MeasureContext, sub: Panel) -> tuple[dict, dict]:
    """The same sections on a group's units: (sections, summaries)."""
    sub_ctx = MeasureContext(panel=sub, measure=ctx.measure, ledger=ctx.ledger,
                             options=replace(ctx.options, by_group=False))
    return run_sections(sub_ctx), sub_ctx.summaries


CAUTION_AUDIT_ONLY = (
    "Audit only: the dependence between waves, reliability, growth and the process-family "
    "verdicts were not computed (run the screen without --audit-only for them).")


CAUTION_WEIGHTED = (
    "Weighted screen: the tests and BIC treat the rescaled weights as frequencies and make "
    "no design-effect correction, so their p-values are approximate; the jackknife "
    "intervals account for the weights.")


def cautions(options: ScreenOptions, weighted: bool = False) -> list[str]:
    return [CAUTION_SCREENING,
            f"Disclosure control: any count below {options.min_cell} units is suppressed and "
            "never shown on its own."] + ([CAUTION_AUDIT_ONLY] if options.audit_only else []) \
        + ([CAUTION_WEIGHTED] if weighted else [])


def take_triplet_tables(report: dict) -> list[dict]:
    """Remove each measure's table of every triplet (``ScreenOptions.triplet_table``)
    from the report and return them as columns with the measure's name: the tables
    have T^3 / 6 rows and go to a file of their own, not into the report."""
    measures = report.get("measures") or {report.get("measure"): report}
    tables = []
    for name, one in measures.items():
        table = (one.get("reliability") or {}).pop("all_triplets", None)
        if table:
            tables.append({"measure": [name] * len(table["wave_first"]), **table})
    return tables


def one_blas_thread():
    """A context in which the BLAS library runs on one thread.

    The screen's matrix products are small (waves x waves) or long and thin (units x
    waves); a threaded BLAS spends more time starting and syncing its threads on these
    than it saves (a dot product of two 900,000-long vectors took 40 x longer with two
    threads than with one on the benchmark machine, docs/performance.md)."""
    from threadpoolctl import threadpool_limits
    return threadpool_limits(limits=1, user_api="blas")


def screen(panel: Panel, ledgers: dict[str, Ledger], input_info: dict,
           options: ScreenOptions | None = None, summaries: dict | None = None) -> dict:
    """The whole report: the measure's report itself, or ``measures {name: report}``.
    ``summaries`` ({measure: {kind: summary}}) were built and merged elsewhere (the dask
    engine's workers); without them each measure is summarised here. Runs on
    ``options.workers`` threads, or as many as ahead.workers gives for the panel's size."""
    options = options or ScreenOptions()
    n_threads = options.workers or ahead.workers(panel.n_units * panel.n_waves)
    with one_blas_thread(), ahead.threads(n_threads):
        return _screen(panel, ledgers, input_info, options, summaries or {})


def _screen(panel: Panel, ledgers: dict[str, Ledger], input_info: dict,
            options: ScreenOptions, summaries: dict) -> dict:
    reports = {m: screen_measure(panel, m, ledgers[m], input_info, options, summaries.get(m))
               for m in panel.measures}
    if len(reports) == 1:
        return next(iter(reports.values()))
    out = {"schema_version": SCHEMA_VERSION,
           "tool": {"name": "paneldiag", "version": __version__},
           "input": input_info, "measures": reports}
    if not options.audit_only:   # carry-over between measures belongs to the full screen
        out["cross_lag"] = plain(cross_lag_screen(panel, options.min_cell,
                                                  options.n_replicates, options.chunk_units))
        if panel.weights is not None:   # the cross-lags are weighted as the rest
            for pair in out["cross_lag"] or []:
                pair["weighted"] = True
    return out
