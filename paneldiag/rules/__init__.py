"""Process-family verdicts from the diagnostics and a thresholds table.

``RULE_SECTIONS`` are the report sections of the rules, run after every diagnostic:
``verdict_basis`` (the statistics, fits and thresholds the verdicts cite), then
``families``, ``measurement``, ``power`` (what the panel can tell apart) and
``next_models`` (see docs/rules.md).
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
    if moments is not None:
        inp.kurtosis = relative_kurtosis(moments)
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
    _use_polychoric(inp, ctx.results.get("correlation"), em)
    never_observed = ctx.panel.n_units - inp.n_units
    inp.units_disclosed = not 0 < never_observed < getattr(ctx.options, "min_cell", 5)
    thresholds = getattr(ctx.options, "rules", None) or default_thresholds()
    return judge(inp, thresholds)


def relative_kurtosis(moments) -> float:
    """Mean relative kurtosis of the waves, m4 / (3 m2^2), at least 1: the elliptical
    scaling of normal-theory likelihood-ratio statistics (Browne 1984, British Journal
    of Mathematical and Statistical Psychology 37, 62-83; the mean of the univariate
    kurtoses as its estimate, Bentler and Wu 1995, EQS manual, from memory). Light
    tails (below 1) keep the normal-theory statistics."""
    with np.errstate(invalid="ignore", divide="ignore"):
        n = np.asarray(moments.n, dtype=float)
        kurt = (moments.m4 / n) / (moments.m2 / n) ** 2 / 3.0
    kurt = kurt[np.isfinite(kurt) & (n > 3)]
    return float(max(1.0, np.mean(kurt))) if kurt.size else 1.0


def _use_polychoric(inp, corr, em) -> None:
    """For an ordinal measure, the structures are fitted to the polychoric correlations
    (two-stage, with the mean pairwise count as N) instead of Pearson moments; the
    means are put in within-wave SD units to match. Kept Pearson when the polychoric
    matrix is not positive definite."""
    if corr is None or getattr(corr, "scale", None) != "ordinal" or \
            corr.primary != "polychoric":
        return
    r = np.asarray(corr.matrix, dtype=float)
    n = np.asarray(corr.n_pairs, dtype=float)
    if not (np.all(np.isfinite(r)) and np.all(np.isfinite(n))):
        return
    r = 0.5 * (r + r.T)
    np.fill_diagonal(r, 1.0)
    if np.linalg.eigvalsh(r)[0] <= 1e-8:
        return
    from paneldiag.rules import structures as st
    sd = np.sqrt(np.diag(np.asarray(em.covariance, dtype=float)))
    t = len(r)
    inp.mu = np.asarray(em.means, dtype=float) / np.where(sd > 0, sd, 1.0)
    inp.sigma = r
    inp.pair_n = n
    inp.n_units = int(round(float(np.mean(n[np.triu_indices(t, 1)])))) if t > 1 else \
        inp.n_units
    inp.likelihood = st.CovarianceLikelihood(r)
    inp.moments_kind = "polychoric"
    inp.kurtosis = 1.0   # the scores' kurtosis says nothing of the latent normal variables


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
                 ("power", _part("power")),
                 ("next_models", _part("next_models"))]
