"""The appendix prose: short paragraphs in neutral academic English, numbers filled in.

Every number written here is read from the report dictionary and printed with one of
the formats below (counts, shares as percentages, two- or three-decimal values), so a
reader can find each one in the JSON report. Each paragraph appears only when the
section it describes is in the report. Methods are cited by author and year; the
reference list holds the works cited.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from paneldiag.render import intake
from paneldiag.labels import ENTRY_DESIGNS, LAG_PROFILE, family_name
from paneldiag.render import bounds

REFERENCES = {
    "campbell1963": ("Campbell 1963", "Campbell, D. T. (1963). From description to "
                     "experimentation: Interpreting trends as quasi-experiments. In C. W. "
                     "Harris (Ed.), Problems in Measuring Change (pp. 212-242). University "
                     "of Wisconsin Press."),
    "cochran1954": ("Cochran 1954", "Cochran, W. G. (1954). The combination of estimates "
                    "from different experiments. Biometrics, 10, 101-129."),
    "fisher1921": ("Fisher 1921", "Fisher, R. A. (1921). On the 'probable error' of a "
                   "coefficient of correlation deduced from a small sample. Metron, 1, 3-32."),
    "hedges1985": ("Hedges and Olkin 1985", "Hedges, L. V., & Olkin, I. (1985). Statistical "
                   "Methods for Meta-Analysis. Academic Press."),
    "heise1969": ("Heise 1969", "Heise, D. R. (1969). Separating reliability and stability "
                  "in test-retest correlation. American Sociological Review, 34, 93-101."),
    "kenny1975": ("Kenny 1975", "Kenny, D. A. (1975). Cross-lagged panel correlation: A test "
                  "for spuriousness. Psychological Bulletin, 82, 887-903."),
    "kott2001": ("Kott 2001", "Kott, P. S. (2001). The delete-a-group jackknife. Journal of "
                 "Official Statistics, 17, 521-526."),
    "little1988": ("Little 1988", "Little, R. J. A. (1988). A test of missing completely at "
                   "random for multivariate data with missing values. Journal of the "
                   "American Statistical Association, 83, 1198-1202."),
    "pearson1900": ("Pearson 1900", "Pearson, K. (1900). On the criterion that a given "
                    "system of deviations from the probable in the case of a correlated "
                    "system of variables is such that it can be reasonably supposed to have "
                    "arisen from random sampling. Philosophical Magazine, 50, 157-175."),
    "quenouille1956": ("Quenouille 1956", "Quenouille, M. H. (1956). Notes on bias in "
                       "estimation. Biometrika, 43, 353-360."),
    "rogosa1980": ("Rogosa 1980", "Rogosa, D. (1980). A critique of cross-lagged "
                   "correlation. Psychological Bulletin, 88, 245-258."),
    "rubin1976": ("Rubin 1976", "Rubin, D. B. (1976). Inference and missing data. "
                  "Biometrika, 63, 581-592."),
    "wiley1970": ("Wiley and Wiley 1970", "Wiley, D. E., & Wiley, J. A. (1970). The "
                  "estimation of measurement error in panel data. American Sociological "
                  "Review, 35, 112-117."),
    "dempster1977": ("Dempster, Laird and Rubin 1977", "Dempster, A. P., Laird, N. M., & "
                     "Rubin, D. B. (1977). Maximum likelihood from incomplete data via the "
                     "EM algorithm. Journal of the Royal Statistical Society B, 39, 1-38."),
    "kenny1995": ("Kenny and Zautra 1995", "Kenny, D. A., & Zautra, A. (1995). The "
                  "trait-state-error model for multiwave data. Journal of Consulting and "
                  "Clinical Psychology, 63, 52-59."),
    "rogosa1982": ("Rogosa, Brandt and Zimowski 1982", "Rogosa, D., Brandt, D., & Zimowski, "
                   "M. (1982). A growth curve approach to the measurement of change. "
                   "Psychological Bulletin, 92, 726-748."),
    "shrout1979": ("Shrout and Fleiss 1979", "Shrout, P. E., & Fleiss, J. L. (1979). "
                   "Intraclass correlations: Uses in assessing rater reliability. "
                   "Psychological Bulletin, 86, 420-428."),
    "emerson1968": ("Emerson 1968", "Emerson, P. L. (1968). Numerical construction of "
                    "orthogonal polynomials from a general recurrence formula. Biometrics, "
                    "24, 695-701."),
    "allison1982": ("Allison 1982", "Allison, P. D. (1982). Discrete-time methods for the "
                    "analysis of event histories. Sociological Methodology, 13, 61-98."),
    "singer1993": ("Singer and Willett 1993", "Singer, J. D., & Willett, J. B. (1993). It's "
                   "about time: Using discrete-time survival analysis to study duration and "
                   "the timing of events. Journal of Educational Statistics, 18, 155-195."),
    "hedges1981": ("Hedges 1981", "Hedges, L. V. (1981). Distribution theory for Glass's "
                   "estimator of effect size and related estimators. Journal of Educational "
                   "Statistics, 6, 107-128."),
    "little2002": ("Little and Rubin 2002", "Little, R. J. A., & Rubin, D. B. (2002). "
                   "Statistical Analysis with Missing Data (2nd ed.). Wiley."),
    "okabe2008": ("Okabe and Ito 2008", "Okabe, M., & Ito, K. (2008). Color Universal "
                  "Design (CUD): How to make figures and presentations that are friendly "
                  "to colorblind people. J*Fly."),
}


def count(v) -> str:
    return f"{int(v):,}"


def pct(v) -> str:
    return f"{100 * v:.1f}%"


def dec(v, digits: int = 2) -> str:
    return f"{v:.{digits}f}"


def num(v) -> str:
    """A whole number as a count, anything else with two decimals."""
    return count(v) if float(v).is_integer() else dec(v)


def pval(p) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def wave_name(label, unit: str | None = None) -> str:
    """A wave label as a sentence names it: 'wave 3', 'the 2023 wave' (a calendar year
    or a date), 'the wave at 2.5 years' (a fractional time in a named unit, else 'wave
    2.5'), 'the baseline wave' (a word), 'wave T1' (other labels)."""
    text = str(label)
    try:
        value = float(text)
    except ValueError:
        value = None
    if value is not None:
        if value.is_integer() and 1800 <= value <= 2200:
            return f"the {text} wave"
        if not value.is_integer() and value > 0 and unit and unit != "time unit":
            return f"the wave at {text} {unit}s"
        return f"wave {text}"
    if re.fullmatch(r"\d{4}-\d{2}(-\d{2})?", text) or text.isalpha():
        return f"the {text} wave"
    return f"wave {text}"


def ok(*values) -> bool:
    return all(isinstance(v, (int, float)) and not isinstance(v, bool) and v == v
               for v in values)


@dataclass
class Citations:
    """The works cited so far, in order of first citation."""

    used: list[str] = field(default_factory=list)

    def __call__(self, *keys: str, narrative: bool = False) -> str:
        for key in keys:
            if key not in self.used:
                self.used.append(key)
        names = [REFERENCES[k][0] for k in keys]
        if narrative:
            return "; ".join(f"{n.rsplit(' ', 1)[0]} ({n.rsplit(' ', 1)[1]})" for n in names)
        return "(" + "; ".join(names) + ")"

    def reference_list(self) -> list[str]:
        return sorted(REFERENCES[k][1] for k in self.used)


def _join(items: list[str]) -> str:
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


# ----------------------------------------------------------------------------- sections

def sample(report: dict, cite: Citations) -> list[str]:
    panel, ledger = report.get("panel"), report.get("ledger")
    if not panel:
        return []
    waves = panel.get("waves", [])
    text = (f"The panel holds {count(panel['n_units'])} units observed over "
            f"{count(panel['n_waves'])} waves ({waves[0]} to {waves[-1]}). The waves were "
            f"read as {intake.time_basis(panel)}; in order, with their times: "
            f"{intake.wave_times(panel)}.")
    grouped = intake.grouping(ledger or {})
    if grouped:
        text += f" Times were grouped into waves by {grouped}."
    if ledger and ok(ledger.get("rows_read")):
        text += (f" Of the {count(ledger['rows_read'])} input rows, "
                 f"{count(ledger['rows_used'])} were used for {report.get('measure')} and "
                 f"{count(ledger['rows_dropped'])} were set aside")
        reasons = [f"{reason.replace('_', ' ')}: {count(n)}"
                   for reason, n in (ledger.get("dropped_by_reason") or {}).items() if n]
        text += f" ({'; '.join(reasons)})." if reasons else "."
    times = panel.get("times") or []
    gaps = {round(b - a, 9) for a, b in zip(times, times[1:]) if ok(a, b)}
    if len(gaps) > 1:
        text += (" The waves are not evenly spaced in time; the analyses of dependence use "
                 "the actual time distances between waves.")
    return [text]


def wave_profile(report: dict, cite: Citations) -> list[str]:
    rows = [r for r in report.get("wave_profile") or [] if ok(r.get("mean"))]
    if not rows:
        return []
    low = min(rows, key=lambda r: r["mean"])
    high = max(rows, key=lambda r: r["mean"])
    unit = unit_of_time(report)
    sds = [r["sd"] for r in rows if ok(r.get("sd"))]   # none when each wave has one value
    text = (f"The wave means of {report.get('measure')} ranged from {dec(low['mean'])} "
            f"({wave_name(low['wave'], unit)}) to {dec(high['mean'])} "
            f"({wave_name(high['wave'], unit)})"
            + (f", with standard deviations between {dec(min(sds))} and {dec(max(sds))}."
               if sds else "; no wave had two values for a standard deviation."))
    floor = max((r for r in rows if ok(r.get("floor_share"))), key=lambda r: r["floor_share"],
                default=None)
    ceiling = max((r for r in rows if ok(r.get("ceiling_share"))),
                  key=lambda r: r["ceiling_share"], default=None)
    if floor and ceiling and max(floor["floor_share"], ceiling["ceiling_share"]) >= 0.15:
        text += (f" Scores pile up at the ends of the scale: up to {pct(floor['floor_share'])} "
                 f"at the lowest value ({wave_name(floor['wave'], unit)}) and up to "
                 f"{pct(ceiling['ceiling_share'])} at the highest "
                 f"({wave_name(ceiling['wave'], unit)}).")
    caveats = (report.get("distribution") or {}).get("caveats") or []
    return [text] + ([" ".join(caveats)] if caveats else [])


def attrition(report: dict, cite: Citations) -> list[str]:
    section = report.get("attrition") or {}
    unit = unit_of_time(report)
    entry = section.get("entry") or {}
    out, text = [], ""
    if entry.get("design") in ENTRY_DESIGNS:
        text = ("By the wave at which units were first observed, the design was "
                + ENTRY_DESIGNS[entry["design"]][1])
        if ok(entry.get("first_wave_share")):
            text += f" ({pct(entry['first_wave_share'])} at the first wave)"
        text += "."
        if entry["design"] == "cohort_sequential":
            text += (f" Each unit is taken to be due at {count(entry['follow_up_waves'])} "
                     "waves from its first, the longest follow-up a substantial share of "
                     "units reached; leaving after that is not counted as dropout.")
        if ok(entry.get("retained_share")):
            text += (f" Counted from each unit's own first wave, {pct(entry['retained_share'])} "
                     "of the units were still observed at the end of their follow-up.")
    resp = [r for r in section.get("retention") or [] if ok(r.get("response_share"))]
    if resp:
        low = min(resp, key=lambda r: r["response_share"])
        text += (f" The share of all units responding was lowest at "
                 f"{wave_name(low['wave'], unit)} ({pct(low['response_share'])}).")
    if text:
        out.append(text.strip())
    types = section.get("unit_types") or {}
    types = types.get("types") if isinstance(types, dict) else types
    if isinstance(types, list) and types:
        shown = [f"{str(t['type']).replace('_', ' ')} {pct(t['share'])}" for t in types
                 if isinstance(t, dict) and t.get("type") and ok(t.get("share")) and t["share"]]
        hidden = [str(t["type"]).replace("_", " ") for t in types
                  if isinstance(t, dict) and t.get("type") and t.get("share") is None]
        if shown:
            text = "By response history, the units were " + _join(shown) + "."
            if hidden:
                text += (f" Types held by fewer units than the minimum cell size "
                         f"({_join(hidden)}) are not shown (disclosure control).")
            if entry.get("design") == "cohort_sequential":
                text += (" The types are read against the whole panel, so the planned end "
                         "of a cohort's follow-up shows there as dropout.")
            out.append(text)
    model = (section.get("selective") or {}).get("model") or {}
    if model.get("fitted") and ok(model.get("odds_ratio_per_sd"), model.get("pvalue")):
        ci = (f"confidence interval {dec(model['ci_low'])} to {dec(model['ci_high'])}; "
              if ok(model.get("ci_low"), model.get("ci_high")) else "")
        verdict = ("dropout depended on the measure" if model["pvalue"] < 0.05 else
                   "there was no clear sign that dropout depended on the measure")
        out.append(f"In a discrete-time hazard model of dropping out after a wave "
                   f"{cite('allison1982', 'singer1993')}, one standard deviation more "
                   f"{report.get('measure')} at the last wave observed went with an odds ratio "
                   f"of {dec(model['odds_ratio_per_sd'])} ({ci}{pval(model['pvalue'])}): "
                   f"{verdict}. Dropout that depends on the measure is not missing "
                   "completely at random; whether it is missing at random cannot be told "
                   f"from the data alone {cite('rubin1976')}.")
    return out


def missingness(report: dict, cite: Citations) -> list[str]:
    section = report.get("missingness") or {}
    out = []
    patterns = section.get("patterns") or {}
    rows = [r for r in patterns.get("rows") or [] if ok(r.get("share"))]
    if rows and ok(patterns.get("n_patterns")):
        top = rows[0]
        kind = "every wave answered" if "." not in str(top.get("pattern")) else \
            f"{count(top['n_observed_waves'])} waves answered"
        text = (f"The units showed {count(patterns['n_patterns'])} distinct response patterns; "
                f"the most frequent ({kind}) covered {pct(top['share'])} of the units "
                f"{cite('little2002')}.")
        rest = patterns.get("remainder") or {}
        if ok(rest.get("n_small_patterns")) and rest["n_small_patterns"]:
            text += (f" {count(rest['n_small_patterns'])} patterns held fewer units than the "
                     "minimum cell size and are shown only in total (disclosure control).")
        out.append(text)
    mcar = section.get("little_mcar")
    if isinstance(mcar, dict) and ok(mcar.get("statistic"), mcar.get("df"), mcar.get("pvalue")):
        verdict = ("the data are unlikely to be missing completely at random"
                   if mcar["pvalue"] < 0.05 else
                   "it gives no evidence against missingness completely at random, which "
                   "does not establish it")
        patterns_used = (f" over {count(mcar['n_patterns'])} response patterns"
                         if ok(mcar.get("n_patterns")) else "")
        em = section.get("em") or {}
        basis = (" The means and covariances under missing at random come from the EM "
                 f"algorithm {cite('dempster1977')}." if em.get("converged") else "")
        out.append(f"Little's test of missing completely at random "
                   f"{cite('little1988', 'rubin1976')} gave a chi-square of "
                   f"{dec(mcar['statistic'])} on {count(mcar['df'])} degrees of freedom"
                   f"{patterns_used} ({pval(mcar['pvalue'])}): {verdict}.{basis}")
    codes = (section.get("codes") or {}).get("rows")
    if isinstance(codes, list) and codes:
        names = [str(row["code"]) + (f" ({row['label']})" if row.get("label") else "")
                 for row in codes if isinstance(row, dict) and row.get("code") is not None]
        if names:
            out.append("Declared missing-value codes (" + ", ".join(names) + ") were counted "
                       "per wave, separately from plain missing values; counts below the "
                       "minimum cell size are not shown.")
    return out


def dependence(report: dict, cite: Citations) -> list[str]:
    from paneldiag.render.figures import lag_rows
    rows = lag_rows(report)
    if not rows:
        return []
    first, last = rows[0], rows[-1]
    unit = unit_of_time(report)
    ci = (f" (confidence interval {dec(first['ci_low'])} to {dec(first['ci_high'])})"
          if ok(first.get("ci_low"), first.get("ci_high")) else "")
    text = (f"Correlations between waves {num(first['time_distance'])} {unit}(s) apart "
            f"averaged {dec(first['mean_r'])}{ci}, and {dec(last['mean_r'])} at "
            f"{num(last['time_distance'])} {unit}(s) apart {cite('fisher1921', 'hedges1985')}.")
    fit = report.get("decay_fit") or {}
    per = "wave interval" if fit.get("distance") == "lag" else unit
    if fit.get("identified"):
        parts = []
        for key, words, kind, low in (
                ("stable_share", f"the {LAG_PROFILE} stable share a/(a+b) was", "share", 0.0),
                ("rho", f"the {LAG_PROFILE} carry-over per {per} was", "correlation", -1.0)):
            node = fit.get(key)
            if isinstance(node, dict) and ok(node.get("estimate")):
                parts.append(f"{words} " + bounds.prose(node["estimate"], node.get("ci_low"),
                                                        node.get("ci_high"), kind, low))
        if parts:
            d_unit = "waves" if fit.get("distance") == "lag" else f"{unit}s"
            text += (" Fitting a + b rho^d to the decay of correlation with the distance d "
                     f"between waves (in {d_unit}) {cite('kenny1995')}, " + _join(parts) + ".")
    elif fit.get("reason"):
        text += f" The decay curve was not identified ({fit['reason']})."
    refs = []
    for key, words in (("flat_vs_full", "no decay"), ("pure_decay_vs_full", "no stable part")):
        test = fit.get(key)
        if isinstance(test, dict) and ok(test.get("statistic"), test.get("p_value")):
            refs.append(f"the reference with {words} gave F = {dec(test['statistic'])} "
                        f"({pval(test['p_value'])})")
    if refs:
        text += " Against the fitted curve, " + _join(refs) + "."
    out = [text]
    markov = report.get("markov") or {}
    lag2 = next((r for r in markov.get("rows") or [] if r.get("lag") == 2), None)
    if lag2 and ok(lag2.get("mean_partial_r")):
        ci = (f" (confidence interval {dec(lag2['ci_low'])} to {dec(lag2['ci_high'])})"
              if ok(lag2.get("ci_low"), lag2.get("ci_high")) else "")
        out.append(f"Given the wave in between, correlations two waves apart kept a mean "
                   f"partial correlation of {dec(lag2['mean_partial_r'])}{ci}; under a "
                   "perfectly measured first-order carry-over (a simplex) it would be zero, "
                   "while measurement error or a stable component keep it above zero.")
    return out


def reliability(report: dict, cite: Citations) -> list[str]:
    summary = (report.get("reliability") or {}).get("summary")
    if not isinstance(summary, dict) or not ok(summary.get("estimate")):
        return []
    method = str(summary.get("method") or "")
    refs = [k for k, word in (("heise1969", "heise"), ("wiley1970", "wiley"))
            if word in method.lower()] or ["heise1969", "wiley1970"]
    from paneldiag.render.text_summary import heise_unreadable
    value = bounds.prose(summary["estimate"], summary.get("ci_low"), summary.get("ci_high"),
                         "heise")
    why = heise_unreadable(report, summary)
    caution = (f" It is not read as a reliability here ({why}): Heise's formula assumes a "
               "lag-1 simplex with error." if why and "impossible value" not in value else "")
    return [f"The Heise test-retest reliability of {report.get('measure')} (the median over "
            f"triplets of waves, from the pattern of their correlations {cite(*refs)}) was "
            f"{value}.{caution}"]


def growth(report: dict, cite: Citations) -> list[str]:
    section = report.get("growth")
    if not isinstance(section, dict):
        return []
    out = []
    traj = section.get("trajectories") or {}
    if ok(traj.get("mean_slope"), traj.get("sd_slope")):
        ci = (f" (confidence interval {dec(traj['mean_slope_ci_low'], 3)} to "
              f"{dec(traj['mean_slope_ci_high'], 3)})"
              if ok(traj.get("mean_slope_ci_low"), traj.get("mean_slope_ci_high")) else "")
        units = (f"the {count(traj['n_units'])} units" if ok(traj.get("n_units")) else
                 "the units (their number withheld by disclosure control)")
        text = (f"Straight lines fitted to each of {units} with "
                f"enough observed waves had a mean slope of {dec(traj['mean_slope'], 3)} per "
                f"{unit_of_time(report)}{ci}, and the slopes had a standard deviation of "
                f"{dec(traj['sd_slope'], 3)} {cite('rogosa1982')}.")
        rel = section.get("slope_reliability") or {}
        if ok(rel.get("estimate")):
            text += (" The reliability of these per-unit slopes, the share of their variance "
                     "that is not sampling error, was " + bounds.prose(
                         rel["estimate"], rel.get("ci_low"), rel.get("ci_high"),
                         "slope_reliability") + ".")
        out.append(text)
    icc = section.get("icc") or {}
    parts = []
    if ok(icc.get("estimate")):
        value = bounds.prose(icc["estimate"], icc.get("ci_low"), icc.get("ci_high"), "icc")
        parts.append(f"The intraclass correlation ICC(1) of the repeated measurements, from "
                     f"the one-way analysis of variance, was {value} {cite('shrout1979')}.")
    shape = section.get("mean_shape") or {}
    comps = [c for c in shape.get("components") or []
             if isinstance(c, dict) and ok(c.get("share_of_change"), c.get("pvalue"))]
    if comps:
        words = [f"the {c['component']} contrast {pct(c['share_of_change'])} "
                 f"({pval(c['pvalue'])})" for c in comps]
        parts.append("Of the change in the wave means, orthogonal polynomial contrasts for "
                     f"the actual wave times {cite('emerson1968')} carried " + _join(words)
                     + ".")
    if parts:
        out.append(" ".join(parts))
    return out


def unit_of_time(report: dict) -> str:
    from paneldiag.render.figures import time_unit
    return time_unit(report)


def verdicts(report: dict, cite: Citations) -> list[str]:
    from paneldiag.render.text_verdicts import common_undetermined_reason
    families = report.get("families")
    out = []
    if isinstance(families, list) and families:
        grouped: dict[str, list[str]] = {}
        for fam in families:
            if isinstance(fam, dict) and fam.get("family") and fam.get("verdict"):
                grouped.setdefault(str(fam["verdict"]), []).append(
                    family_name(fam["family"]))
        if grouped:
            parts = [f"{verdict.replace('_', ' ')}: {_join(names)}"
                     for verdict, names in grouped.items()]
            text = ("On the screening evidence, the process families read as follows: "
                    + "; ".join(parts) + ".")
            reason = common_undetermined_reason(families)
            if reason:
                text += f" No family could be judged: {reason[0].lower()}{reason[1:]}"
            nxt = report.get("next_models")
            if isinstance(nxt, list) and nxt:
                names = [str(m.get("model") or m.get("family") or "") if isinstance(m, dict)
                         else str(m) for m in nxt]
                names = [n for n in names if n]
                if names:
                    text += (" Candidate models to fit and compare: " + "; ".join(names) + ".")
            text += (" These verdicts summarise evidence; they do not select a model, and "
                     "the candidates must still be fitted and compared.")
            out.append(text)
            out += _bic_and_power(report, families)
    measurement = report.get("measurement")
    if isinstance(measurement, dict) and ok(measurement.get("reliability")):
        label = measurement.get("label") or "reliability"
        value = bounds.prose(measurement["reliability"], measurement.get("ci_low"),
                             measurement.get("ci_high"))
        text = (f"The {label} (the share of each wave's variance not due to measurement "
                f"error) was {value}")
        text += (f", which the screen rates as {measurement['verdict']}."
                 if measurement.get("verdict") else ".")
        if measurement.get("advice"):
            text += f" {measurement['advice']}"
        out.append(text)
    return out


def _bic_and_power(report: dict, families: list) -> list[str]:
    """How the families were compared, and what the panel can tell apart."""
    best = next((f for f in families if isinstance(f, dict)
                 and f.get("bic_difference") == 0), None)
    out = []
    if best and best.get("specification"):
        out.append(
            "Each family was judged by the best of a small set of covariance structures "
            "(one error variance or one per wave; stationary carry-over or a quasi-simplex; "
            "random curvature or free loadings for growth), fitted by full-information "
            "maximum likelihood under missing at random and chosen within the family by "
            "the Bayesian information criterion (BIC). Across families the BIC was lowest "
            f"for {family_name(best['family'])} ({best['specification']}), with "
            f"BIC weight {dec(best.get('bic_weight'))}; a family was rated supported only "
            "when the part that defines it was evidenced by a likelihood-ratio test and no "
            "family it does not nest was clearly ahead by BIC.")
    weak = [r for r in report.get("power") or [] if isinstance(r, dict)
            and not r.get("evidenced") and ok(r.get("power")) and r["power"] < 0.8]
    if weak:
        parts = [f"{family_name(r['simpler'])} from {family_name(r['richer'])} (power "
                 f"{dec(r['power'])}"
                 + (f"; about {count(r['units_for_power_90'])} units for power "
                    f"{dec(r.get('target_power'))})" if r.get("units_for_power_90")
                    else ")") for r in weak]
        out.append("At these data's estimates the panel had little power to tell apart "
                   + _join(parts) + ", so the absence of those parts is weak evidence.")
    return out


def groups(report: dict, cite: Citations) -> list[str]:
    section = report.get("groups")
    if not isinstance(section, dict):
        return []
    out = [f"The screen was repeated within each of the {count(section['n_reported'])} groups "
           f"of {section['column']} with at least {count(section['min_cell'])} units."]
    if section.get("n_suppressed"):
        out[0] += (f" {count(section['n_suppressed'])} smaller group(s) are not reported "
                   "(disclosure control).")
    refs = {"Cochran's Q": "cochran1954", "Pearson chi-square": "pearson1900"}
    for comp in section.get("comparison") or []:
        vals = [v for v in comp["by_group"] if ok(v.get("estimate"))]
        test = comp.get("test") or {}
        if len(vals) < 2 or not ok(test.get("statistic"), test.get("pvalue")):
            continue
        low = min(vals, key=lambda v: v["estimate"])
        high = max(vals, key=lambda v: v["estimate"])
        fmt = pct if comp["figure"] == "retention" else dec
        ref = refs.get(test.get("method"), "cochran1954")
        label = GROUP_FIGURE_WORDS.get(comp["figure"], comp["label"])
        out.append(f"The {label} ranged from {fmt(low['estimate'])} ({low['group']}) "
                   f"to {fmt(high['estimate'])} ({high['group']}); the test of equality "
                   f"across groups {cite(ref)} gave {dec(test['statistic'])} on "
                   f"{count(test['df'])} degrees of freedom ({pval(test['pvalue'])}).")
    return out


GROUP_FIGURE_WORDS = {"retention": "share retained from each unit's first wave to the end "
                                   "of its follow-up"}


def group_summary(label: str, section: dict, cite: Citations) -> list[str]:
    """A short paragraph on one group: its size, its compared figures and its verdicts."""
    report = (section.get("reports") or {}).get(label)
    if not isinstance(report, dict):
        return []
    parts = []
    for comp in section.get("comparison") or []:
        value = next((v for v in comp["by_group"] if v["group"] == label), None)
        if not value or not ok(value.get("estimate")):
            continue
        if comp["figure"] == "retention":
            ci = (f" ({pct(value['ci_low'])} to {pct(value['ci_high'])})"
                  if ok(value.get("ci_low"), value.get("ci_high")) else "")
            shown = f"{pct(value['estimate'])}{ci}"
        else:   # the other figures are shares or correlations: flagged at their bounds
            low = -1.0 if comp["figure"] == "lag1_correlation" else 0.0
            shown = bounds.prose(value["estimate"], value.get("ci_low"), value.get("ci_high"),
                                 low=low)
        parts.append(f"{GROUP_FIGURE_WORDS.get(comp['figure'], comp['label'])} {shown}")
    text = f"The group {label} has {count(report['n_units'])} units"
    text += ("; " + "; ".join(parts) + "." if parts else ".")
    fams = [f for f in report.get("families") or [] if isinstance(f, dict)]
    good = [family_name(f["family"]) for f in fams
            if f.get("verdict") in ("supported", "plausible")]
    if good:
        text += f" Families the screen supports or finds plausible here: {_join(good)}."
    return [text]


def cross_lag(pair: dict, cite: Citations) -> list[str]:
    lag1 = next((r for r in pair.get("lags", []) if r["lag"] == 1), None)
    sync = pair.get("synchronous") or {}
    if not lag1 or not ok(lag1["x_leads"]["r"], lag1["y_leads"]["r"]):
        return []
    x, y = pair["x"], pair["y"]
    text = ""
    if ok(sync.get("r")):
        text = f"Measured at the same wave, {x} and {y} correlated {dec(sync['r'])} on average. "
    text += (f"One wave apart, earlier {x} correlated {dec(lag1['x_leads']['r'])} with later "
             f"{y}, and earlier {y} {dec(lag1['y_leads']['r'])} with later {x} "
             f"{cite('campbell1963', 'kenny1975')}.")
    if ok(lag1.get("z_difference"), lag1.get("z_difference_ci_low"),
          lag1.get("z_difference_ci_high")):
        excludes = (lag1["z_difference_ci_low"] > 0 or lag1["z_difference_ci_high"] < 0)
        text += (f" The difference on the Fisher z scale was {dec(lag1['z_difference'], 3)} "
                 f"(confidence interval {dec(lag1['z_difference_ci_low'], 3)} to "
                 f"{dec(lag1['z_difference_ci_high'], 3)}; delete-a-group jackknife "
                 f"{cite('quenouille1956', 'kott2001')})"
                 + (", so the two directions differ." if excludes else
                    ", so the two directions cannot be told apart."))
    text += (" Such differences are descriptive and do not establish a causal order "
             f"{cite('rogosa1980')}.")
    return [text]


MEASURE_PROSE = (
    ("Sample", sample),
    ("Distribution by wave", wave_profile),
    ("Attrition", attrition),
    ("Missing data", missingness),
    ("Dependence over time", dependence),
    ("Reliability", reliability),
    ("Growth", growth),
    ("Process families", verdicts),
    ("Groups", groups),
)
