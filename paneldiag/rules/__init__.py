"""Process-family verdicts from the diagnostics and a thresholds table.

``RULE_SECTIONS`` are the report sections of the rules, run after every diagnostic:
``verdict_basis`` (the statistics, fits and thresholds the verdicts cite), then
``families``, ``measurement`` and ``next_models`` (see docs/rules.md).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.results import plain
from paneldiag.rules.thresholds import Thresholds, default_thresholds, load_thresholds
from paneldiag.rules.verdicts import FAMILY_IDS, Judgement, inputs_from_patterns, judge

__all__ = ["RULE_SECTIONS", "Thresholds", "default_thresholds", "load_thresholds",
           "judge_context", "FAMILY_IDS"]


@dataclass(frozen=True)
class VerdictBasis:
    """The section object: the whole judgement; its JSON is the evidence basis."""

    judgement: Judgement

    def to_dict(self) -> dict:
        return plain(self.judgement.basis)


def _nested(obj, *names):
    for name in names:
        obj = getattr(obj, name, None) if not isinstance(obj, dict) else obj.get(name)
        if obj is None:
            return None
    return obj


def judge_context(ctx) -> Judgement:
    """The verdicts for one measure of a screen (reads the summaries and earlier results)."""
    from paneldiag.diagnostics.missingness import em_moments
    from paneldiag.summaries import summarise
    from paneldiag.summaries.moments import WaveMoments
    from paneldiag.summaries.patterns import PatternMoments

    # the summaries of the screen when already built; else only the two kinds needed
    summaries = ctx.__dict__.get("summaries") or {}
    if PatternMoments not in summaries or WaveMoments not in summaries:
        summaries = summarise(ctx.panel, ctx.measure, [PatternMoments, WaveMoments],
                              chunk_units=ctx.options.chunk_units,
                              n_replicates=ctx.options.n_replicates)
    patterns = summaries[PatternMoments]
    em = em_moments(patterns)
    moments = summaries.get(WaveMoments)
    if moments is not None:
        values = np.unique(np.concatenate([np.asarray(d) for d in moments.distinct]))
        categories = int(len(values))
    else:
        categories = 10 ** 6
    inp = inputs_from_patterns(patterns, em, ctx.panel.wave_times, categories)
    inp.wave_labels = tuple(str(label) for label in ctx.panel.wave_labels)
    slope_rel = _nested(ctx.results.get("growth"), "slope_reliability", "estimate")
    if slope_rel is not None and np.isfinite(slope_rel):
        inp.slope_reliability = float(slope_rel)
    rac = _nested(ctx.results.get("growth"), "residual_autocorrelation")
    if rac is not None:
        inp.residual_autocorrelation = {
            "lag1": _nested(rac, "lag1"), "ci_low": _nested(rac, "ci_low"),
            "ci_high": _nested(rac, "ci_high"),
            "expected": _nested(rac, "expected_under_independence")}
        if any(v is None for v in inp.residual_autocorrelation.values()):
            inp.residual_autocorrelation = None
    never_observed = ctx.panel.n_units - inp.n_units
    inp.units_disclosed = not 0 < never_observed < getattr(ctx.options, "min_cell", 5)
    thresholds = getattr(ctx.options, "rules", None) or default_thresholds()
    return judge(inp, thresholds)


def _basis_section(ctx):
    return VerdictBasis(judge_context(ctx))


def _part(name):
    def section(ctx):
        basis = ctx.results.get("verdict_basis")
        if basis is None:
            return None
        return list(getattr(basis.judgement, name)) if name != "measurement" \
            else basis.judgement.measurement
    return section


RULE_SECTIONS = [("verdict_basis", _basis_section), ("families", _part("families")),
                 ("measurement", _part("measurement")),
                 ("next_models", _part("next_models"))]
