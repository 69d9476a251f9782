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
from paneldiag.summaries.contingency import PairwiseTables
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
    needed = [PatternMoments, WaveMoments, PairwiseTables]
    if any(kind not in summaries for kind in needed):
        summaries = summarise(ctx.panel, ctx.measure, needed,
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
    _use_polychoric(inp, _polychoric_matrix(ctx, summaries), em, summaries)
    never_observed = ctx.panel.n_units - inp.n_units
    inp.units_disclosed = not 0 < never_observed < getattr(ctx.options, "min_cell", 5)
    from paneldiag.diagnostics.attrition import end_shown, retention_to_end
    inp.retention_disclosed = end_shown(*retention_to_end(patterns.observed, patterns.n),
                                        getattr(ctx.options, "min_cell", 5))
    thresholds = getattr(ctx.options, "rules", None) or default_thresholds()
    return judge(inp, thresholds)


def relative_kurtosis(moments) -> float:
    """Mean relative kurtosis of the waves, m4 / (3 m2^2), at least 1: the elliptical
    scaling of normal-theory likelihood-ratio statistics (Browne 1984, British Journal
    of Mathematical and Statistical Psychology 37, 62-83; the mean of the univariate
    kurtoses as its estimate, Bentler and Wu 1995, EQS manual, from memory). Light
    tails (below 1) keep the normal-theory statistics."""
    with np.errstate(invalid="ignore", divide="ignore"):
        n = np.asarray(moments.mass, dtype=float)
        kurt = (moments.m4 / n) / (moments.m2 / n) ** 2 / 3.0
    kurt = kurt[np.isfinite(kurt) & (moments.n > 3)]
    return float(max(1.0, np.mean(kurt))) if kurt.size else 1.0


def _polychoric_matrix(ctx, summaries):
    """(r, n_pairs, leave-one-group-out copies of r) of an ordinal measure: the
    dependence section's polychoric matrices, or the same computed from the pairwise
    tables when that section has not run; None for a continuous measure."""
    corr = ctx.results.get("correlation")
    if corr is not None:
        if getattr(corr, "scale", None) != "ordinal" or corr.primary != "polychoric":
            return None
        return (np.asarray(corr.matrix, dtype=float), np.asarray(corr.n_pairs, dtype=float),
                np.asarray(corr.replicates, dtype=float))
    from paneldiag.diagnostics.dependence import _polychoric_matrices, decide_scale
    tables = summaries.get(PairwiseTables)
    if tables is None or decide_scale(tables, getattr(ctx.options, "scale", "auto"))[0] \
            != "ordinal":
        return None
    r, n = _polychoric_matrices(tables)
    return r[0], n[0], r[1:]


def _wave_margins(summaries) -> tuple[np.ndarray, np.ndarray] | None:
    """Category counts of each wave, (T, L), of all units and (K, T, L) of each
    delete-a-group copy: the diagonal of each wave's own table."""
    tables = summaries.get(PairwiseTables)
    if tables is None or tables.counts is None:
        return None
    return (np.einsum("ttii->ti", tables.pooled(weighted=True)),
            np.einsum("kttii->kti", tables.leave_one_out(weighted=True)))


def _use_polychoric(inp, matrix, em, summaries) -> None:
    """For an ordinal measure, the structures are fitted to the covariance of the
    normal variables behind the scores (two-stage, with the mean pairwise count as N)
    instead of Pearson moments: the polychoric correlations, scaled by the latent SDs
    and with the latent means that thresholds held equal across waves give
    (``polychoric.latent_scale``), so growth in mean and spread still shows. With fewer
    than three categories the latent variances are not identified: correlations and
    standardised means. Kept Pearson when the polychoric matrix is not positive
    definite."""
    if matrix is None:
        return
    r, n, copies = matrix
    if not (np.all(np.isfinite(r)) and np.all(np.isfinite(n))):
        return
    r = 0.5 * (r + r.T)
    np.fill_diagonal(r, 1.0)
    if np.linalg.eigvalsh(r)[0] <= 1e-8:
        return
    from paneldiag.diagnostics.polychoric import latent_scale
    from paneldiag.rules import structures as st
    t = len(r)
    copies = np.array(copies, dtype=float)
    np.einsum("kii->ki", copies)[:] = 1.0
    margins = _wave_margins(summaries)
    scale = latent_scale(margins[0]) if margins is not None and len(margins[0]) == t \
        else None
    if scale is not None and np.all(np.isfinite(scale[0])) and np.all(scale[1] > 0):
        inp.mu = scale[0]
        r = r * np.outer(scale[1], scale[1])
        for copy, counts in zip(copies, margins[1]):
            own = latent_scale(counts)
            sd = own[1] if own is not None and np.all(own[1] > 0) else scale[1]
            copy *= np.outer(sd, sd)
        inp.moments_kind = "polychoric-latent"
    else:
        sd = np.sqrt(np.diag(np.asarray(em.covariance, dtype=float)))
        inp.mu = np.asarray(em.means, dtype=float) / np.where(sd > 0, sd, 1.0)
        inp.moments_kind = "polychoric"
    inp.sigma = r
    inp.pair_n = n
    inp.n_units = int(round(float(np.mean(n[np.triu_indices(t, 1)])))) if t > 1 else \
        inp.n_units
    inp.likelihood = st.CovarianceLikelihood(r)
    # the scores' kurtosis says nothing of the latent normal variables: each test is
    # scaled from the delete-a-group copies of the polychoric matrix instead
    inp.kurtosis = 1.0
    inp.copies = copies if np.all(np.isfinite(copies)) else None


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
