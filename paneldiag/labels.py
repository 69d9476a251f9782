"""The names the outputs give to things: one table of process-family names and one of
the figures the verdicts cite, each saying what the figure is and how it was estimated.
The terminal, the appendix and the JSON report all read them from here, so one name
never stands for two numbers (two estimators of one quantity carry the name of their
fit: "from the lag-profile fit" against "trait + carry-over fit")."""

from __future__ import annotations

FAMILY_NAMES = {
    "occasion_noise": "occasion noise", "stable_trait": "stable trait",
    "autoregressive": "carry-over", "trait_autoregressive": "trait + carry-over",
    "linear_growth": "linear growth", "quadratic_growth": "quadratic growth",
    "free_shape_growth": "free-shape growth", "growth_autoregressive": "growth + carry-over",
}

# verdict_basis.statistics key -> what the figure is (and the fit it comes from)
STATISTIC_LABELS = {
    "adjacent_correlation": "mean adjacent-wave r (ML moments)",
    "trait_share": "trait share of wave variance (stable-trait fit)",
    "stable_share": "stable share (trait + carry-over fit)",
    "carry_rho": "carry-over rho (trait + carry-over fit)",
    "profile_decline": "decline of the lag profile (trait + carry-over fit)",
    "slope_share": "slopes' share of change (growth fit)",
    "mean_change_sd": "mean change in SDs (straight line)",
    "mean_bend_sd": "mean bend in SDs (quadratic)",
    "mean_remainder_sd": "mean departure from the quadratic in SDs",
    "growth_carry_rho": "carry-over rho of the deviations (growth + carry-over fit)",
    "growth_carry_share": "carried-over share of the deviations (growth + carry-over fit)",
    "residual_lag1": "residual lag-1 autocorrelation (per-unit lines)",
}

# entry designs (diagnostics.attrition.classify_entry): the terminal's few words, the
# appendix's sentence, and the JSON report's description
ENTRY_DESIGNS = {
    "single_cohort": ("single cohort",
                      "a single cohort: nearly all units entered at the first wave",
                      "single cohort: nearly all units start at the first wave"),
    "refreshment": ("refreshment samples",
                    "a main sample at the first wave with refreshment samples joining later",
                    "refreshment samples: the first wave holds the main sample and later "
                    "waves add blocks of new units"),
    "cohort_sequential": ("cohort-sequential entry",
                          "cohort-sequential: units entered spread over many waves",
                          "cohort-sequential (accelerated) entry: units enter spread over "
                          "many waves"),
    "mixed_entry": ("mixed entry",
                    "mixed: units entered at several waves, in no regular pattern",
                    "mixed entry: units start at several waves, in none of the patterns "
                    "of a single cohort, refreshment samples or cohort-sequential entry"),
    "one_wave_each": ("no unit observed twice",
                      "repeated cross-sections: no unit was observed at more than one wave",
                      "no unit observed at more than one wave: repeated cross-sections, "
                      "not a panel"),
}

# the figures of the lag-profile fit r(d) = a + b rho^d (decay_fit)
LAG_PROFILE = "lag-profile"


def family_name(family_id) -> str:
    return FAMILY_NAMES.get(str(family_id), str(family_id).replace("_", " "))


def measurement_label(family_id: str, lower_bound: bool) -> str:
    """The name of the measurement figure: the reliability under the leading family's
    structure fit (a lower bound where error and occasion variance are not separable)."""
    kind = "reliability, lower bound," if lower_bound else "reliability"
    return f"{kind} from the {family_name(family_id)} structure fit"
