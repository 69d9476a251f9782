"""How a bounded figure (a share, a reliability, a correlation) is written: an
ordinary estimate with its interval, or flagged where it cannot be read as one.

``status`` classifies an estimate and its interval against the figure's range, at the
precision it is shown with:

- ``impossible``: the estimate lies outside the range (a reliability above 1, a
  negative variance share): shown with a one-line reason, never as a plain figure;
- ``uninformative``: the interval covers the whole range: not estimable here;
- ``degenerate``: the interval has zero width: the estimate sits on a bound in every
  replicate group, so no uncertainty could be measured;
- ``at_bound``: the estimate sits on a bound of its range;
- ``truncated``: an interval end lies beyond a bound or was cut at it;
- ``ok``: an ordinary estimate.
"""

from __future__ import annotations

# why a value beyond its range is impossible, by kind of figure
REASONS = {
    "heise": {"high": "above 1: the simplex assumption fails, as the correlations fall "
                      "faster with distance than a lag-1 process with error allows",
              "low": "below 0: a negative correlation in the triplets"},
    "share": {"high": "above 1: a variance share cannot exceed the whole",
              "low": "below 0: a negative variance estimate"},
    "slope_reliability": {"high": "above 1: not a proportion",
                          "low": "below 0: the slopes vary less than their sampling "
                                 "error alone would make them"},
    "icc": {"high": "above 1: not a proportion",
            "low": "below 0: the between-unit mean square is below the within-unit one"},
    "correlation": {"high": "above 1: not a correlation", "low": "below -1: not a correlation"},
}


def _num(v):
    return v if isinstance(v, (int, float)) and not isinstance(v, bool) and v == v else None


def status(est, lo, hi, low: float = 0.0, high: float = 1.0, digits: int = 2) -> str:
    est, lo, hi = _num(est), _num(lo), _num(hi)
    if est is None:
        return "missing"
    shown = round(est, digits)
    if shown > high or shown < low:
        return "impossible"
    if lo is None or hi is None:
        return "at_bound" if shown in (low, high) else "ok"
    r_lo, r_hi = round(lo, digits), round(hi, digits)
    if r_lo <= low and r_hi >= high:
        return "uninformative"
    if r_lo == r_hi:
        return "degenerate"
    if shown in (low, high):
        return "at_bound"
    if r_lo <= low or r_hi >= high:
        return "truncated"
    return "ok"


# the words of each state: (terminal form, appendix form); {v} the value, {r} the reason,
# {lo} {hi} the interval ends, {low} {high} the range
WORDS = {
    "impossible": ("{v}, impossible ({r})", "{v}, an impossible value ({r})"),
    "uninformative": ("{v}, not estimable here (interval {low} to {high})",
                      "{v}, which is not estimable here (its confidence interval spans "
                      "{low} to {high})"),
    "degenerate": ("{v}, at the boundary (an interval of zero width)",
                   "{v}, at the boundary of its range (no uncertainty could be measured)"),
    "at_bound": ("{v} at the boundary{ci}", "{v} at the boundary of its range{ci}"),
    "truncated": ("{v}{ci} (interval cut at the bound)", "{v}{ci}"),
    "ok": ("{v}{ci}", "{v}{ci}"),
}
INTERVALS = (" [{lo}, {hi}]", " (confidence interval {lo} to {hi}{cut})")


def _write(form: int, est, lo, hi, kind, low, high, digits) -> str | None:
    state = status(est, lo, hi, low, high, digits)
    if state == "missing":
        return None
    side = "high" if est > high else "low"
    ci = ""
    if _num(lo) is not None and _num(hi) is not None:
        ci = INTERVALS[form].format(lo=f"{lo:.{digits}f}", hi=f"{hi:.{digits}f}",
                                    cut=", cut at the bound" if state == "truncated" else "")
    return WORDS[state][form].format(v=f"{est:.{digits}f}", ci=ci, low=f"{low:g}",
                                     high=f"{high:g}",
                                     r=REASONS.get(kind, REASONS["share"])[side])


def text(est, lo=None, hi=None, kind: str = "share", low: float = 0.0, high: float = 1.0,
         digits: int = 2) -> str | None:
    """The terminal form: '0.47 [0.42, 0.51]', or the value with its flag."""
    return _write(0, est, lo, hi, kind, low, high, digits)


def prose(est, lo=None, hi=None, kind: str = "share", low: float = 0.0, high: float = 1.0,
          digits: int = 2) -> str | None:
    """The appendix form: '0.47 (confidence interval 0.42 to 0.51)', or the value with
    its flag in words."""
    return _write(1, est, lo, hi, kind, low, high, digits)
