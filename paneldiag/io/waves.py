"""Wave labels become ordered waves with times: numbers, dates in their common written
forms, or text; continuous times are grouped into waves on request (bins, rounding).

Only the validator calls this module. It works on the distinct labels of a wave column
(a loop over those, never over rows) and gives, for each distinct label, its wave.

Dates are never left as text. Each written form is recognised by its shape; when the
labels cannot tell day-first from month-first the run stops and asks for
``--date-format``. Times come in the unit the dates resolve to, as whole numbers where the
calendar allows: yearly dates (every date on one day of the year) count years, quarterly
labels count quarters, monthly dates (one day of the month, or month ends) count months
from the first wave, other dates count weeks (every gap a whole number of weeks) or days.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime
from typing import Callable

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem

MAX_WAVES = 500
"""Most waves a screen takes (``--max-waves`` raises it): every wave adds a row and a
column to each T x T summary, and diary, experience-sampling and monitoring panels have
50 to 200 occasions (common practice)."""

SPARSE_ABOVE_WAVES = 40
"""Above this many distinct wave values the waves must be shared occasions: when the
units answer on average fewer than ``MIN_OCCASION_COVERAGE`` of them, the column holds
time on a continuous scale (age in years, days since entry) and the run stops to ask
for bins or rounding. Planned panels rarely have more than a few dozen waves (common
practice); occasions of a diary are shared, so most units answer most of them."""

MIN_OCCASION_COVERAGE = 0.25
"""Share of the wave values a unit answers on average, above ``SPARSE_ABOVE_WAVES``
values, from which they are taken for shared occasions (an age column of 80 values,
each unit seen at a handful of ages, covers about a tenth; common practice)."""

UNIT_SPECIFIC_SHARE = 0.5
"""When more than this share of the rows are the only row at their wave value, each unit
has its own times (visit dates, exact ages): they are not shared waves."""

PERIODS = ("month", "quarter", "year")  # calendar periods date waves can be rounded to

_MONTHS = {name: number for number, names in enumerate(
    (("jan", "january"), ("feb", "february"), ("mar", "march"), ("apr", "april"),
     ("may",), ("jun", "june"), ("jul", "july"), ("aug", "august"),
     ("sep", "sept", "september"), ("oct", "october"), ("nov", "november"),
     ("dec", "december")), start=1) for name in names}
_DATE_DIRECTIVES = ("%d", "%j", "%e", "%a", "%A", "%U", "%W", "%u", "%w", "%H", "%M", "%S")
_MONTH_DIRECTIVES = ("%m", "%b", "%B")


@dataclass(frozen=True)
class WaveGrouping:
    """Continuous times grouped into waves: bins (edges or a count), rounding to a step,
    or, for date waves, the calendar period a date falls in."""

    edges: tuple[float, ...] = ()
    bin_count: int = 0
    step: float = 0.0
    period: str = ""

    @classmethod
    def parse(cls, bins: str | None, rounding: str | None) -> "WaveGrouping":
        if bins and rounding:
            raise InputProblem("choose one of --wave-bins and --wave-round")
        if bins:
            items = [t.strip() for t in bins.split(",") if t.strip()]
            try:
                numbers = [float(t) for t in items]
            except ValueError:
                raise InputProblem(f"--wave-bins takes edges such as 0,5,10,15 or a number of "
                                   f"equal-width bins, got '{bins}'") from None
            if len(numbers) == 1:
                if not numbers[0].is_integer() or numbers[0] < 2:
                    raise InputProblem(f"--wave-bins {bins}: a number of bins must be a whole "
                                       "number of at least 2")
                return cls(bin_count=int(numbers[0]))
            if not np.all(np.isfinite(numbers)) or not np.all(np.diff(numbers) > 0):
                raise InputProblem(f"--wave-bins {bins}: the edges must be finite and increase")
            return cls(edges=tuple(numbers))
        if rounding:
            text = rounding.strip().lower()
            if text in PERIODS:
                return cls(period=text)
            try:
                step = float(text)
            except ValueError:
                step = float("nan")
            if not np.isfinite(step) or step <= 0:
                raise InputProblem(f"--wave-round takes a positive step (numeric waves) or "
                                   f"{', '.join(PERIODS)} (date waves), got '{rounding}'")
            return cls(step=step)
        return cls()

    @property
    def active(self) -> bool:
        return bool(self.edges or self.bin_count or self.step or self.period)

    def record(self) -> dict:
        """The options as given again, for the reproducibility record."""
        if self.edges:
            return {"wave_bins": ",".join(number_text(e) for e in self.edges)}
        if self.bin_count:
            return {"wave_bins": str(self.bin_count)}
        if self.step:
            return {"wave_round": number_text(self.step)}
        return {"wave_round": self.period} if self.period else {}


@dataclass(frozen=True)
class WaveReading:
    """The waves read from the distinct labels of a wave column (or from wave labels)."""

    position: np.ndarray          # per distinct label: its wave 0..T-1, or -1 outside the bins
    labels: tuple[str, ...]       # per wave, in wave order
    times: np.ndarray             # per wave, in ``unit``
    unit: str | None              # year, quarter, month, week, day; None when unknown
    kind: str                     # numbers, dates or text
    form: str | None = None       # how the dates are written, e.g. DD/MM/YYYY
    origin: str | None = None     # times count from this date (relative units)
    grouping: str | None = None   # what the bins or rounding did
    moved: np.ndarray | None = None  # per distinct label: its time changed by the grouping

    def describe(self) -> dict:
        """JSON-ready: how the waves were read (the panel's ``wave_reading``)."""
        out = {"read_as": self.kind, "form": self.form, "times_from": self.origin,
               "grouping": self.grouping}
        return {k: v for k, v in out.items() if v is not None}


Problem = Callable[..., InputProblem]  # problem(what, index=None): an error at a label


def read_waves(uniques, where: str, problem: Problem, date_format: str | None = None,
               order: str = "natural", grouping: WaveGrouping = WaveGrouping()) -> WaveReading:
    """The waves of the distinct values ``uniques`` of a wave column.

    ``where`` names the source in messages (e.g. "wave column 'date'"); ``problem(what,
    index)`` makes the error for the distinct value at ``index`` (its first row).
    """
    series = pd.Series(uniques)
    if pd.api.types.is_datetime64_any_dtype(series):
        stamps = pd.DatetimeIndex(series)
        if stamps.tz is not None:
            stamps = stamps.tz_convert("UTC").tz_localize(None)
        return _dated(_Dates.of_stamps(stamps, "date values"), grouping, problem)
    typed = pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)
    if typed:
        numbers = series.to_numpy(dtype=float)
        bad = ~np.isfinite(numbers)
        if bad.any():
            raise problem("wave is not a finite number", int(np.flatnonzero(bad)[0]))
        texts = [number_text(v) for v in numbers]
    else:
        texts = [str(u).strip() for u in series]
        numbers = pd.to_numeric(pd.Series(texts), errors="coerce").to_numpy(dtype=float)
    if date_format:
        return _dated(_Dates.of_format(texts, date_format, where, problem), grouping, problem)
    # typed numbers are numbers; written ones are dates when every label has a date form
    # (03.2021 is March 2021, not 3.2021)
    forms = [None] * len(texts) if typed else [_form_of(t) for t in texts]
    typed_date = np.array([f is not None for f in forms])
    if np.all(np.isfinite(numbers)) and not typed_date.all():
        dates = _Dates.of_compact_numbers(numbers)
        if dates is not None:
            return _dated(dates, grouping, problem)
        return _numbered(numbers, grouping, problem)
    typed_number = np.isfinite(numbers) & ~typed_date
    if typed_number.any():
        other = typed_date | (~typed_number)
        a, b = int(np.flatnonzero(typed_number)[0]), int(np.flatnonzero(other)[0])
        raise problem(f"{where} mixes numbers and {'dates' if typed_date[b] else 'text'}: "
                      f"'{texts[a]}' and '{texts[b]}'", b)
    if typed_date.all():
        families = {f[0] for f in forms}
        if len(families) > 1:
            first = forms[0][0]
            b = next(i for i, f in enumerate(forms) if f[0] != first)
            raise problem(f"{where} mixes date forms: '{texts[0]}' and '{texts[b]}'; write "
                          "every wave date in one form", b)
        return _dated(_Dates.of_forms(texts, forms, where, problem), grouping, problem)
    if typed_date.any():
        a, b = int(np.flatnonzero(typed_date)[0]), int(np.flatnonzero(~typed_date)[0])
        raise problem(f"{where} mixes dates and text: '{texts[a]}' and '{texts[b]}'", b)
    _refuse_year_words(texts, where, problem, order)
    if grouping.active:
        raise problem(f"--wave-bins and --wave-round need numeric or date waves; {where} holds "
                      f"text such as '{texts[0]}'")
    return _texted(texts, order)


# ----------------------------------------------------------------------------- numbers

def number_text(value: float) -> str:
    value = float(value)
    return str(int(value)) if value.is_integer() else repr(value)


def _numbered(numbers: np.ndarray, grouping: WaveGrouping, problem: Problem) -> WaveReading:
    if grouping.period:
        raise problem(f"--wave-round {grouping.period} is for date waves; for numeric waves "
                      "give a step, e.g. --wave-round 1")
    whole = np.all(np.mod(numbers, 1) == 0)
    unit = "year" if whole and np.all((numbers >= 1800) & (numbers <= 2200)) else None
    times, labels, note = numbers, [number_text(v) for v in numbers], None
    if grouping.active:
        times, labels, note = _group(numbers, grouping, problem)
    return _ordered(times, labels, unit, "numbers", grouping=note,
                    moved=None if note is None else ~(times == numbers))


def _group(times: np.ndarray, grouping: WaveGrouping, problem: Problem):
    """New times and labels per distinct value (NaN outside the bins), and a description."""
    if grouping.step:
        step = grouping.step
        rounded = np.floor(times / step + 0.5) * step  # halves go up
        rounded = np.round(rounded, 12)                  # 0.1 steps without binary dust
        return rounded, [number_text(v) for v in rounded], \
            f"rounded to the nearest multiple of {number_text(step)} (halves up)"
    edges = np.asarray(grouping.edges, dtype=float)
    if grouping.bin_count:
        lo, hi = float(times.min()), float(times.max())
        if lo == hi:
            raise problem("--wave-bins: the wave column has a single value")
        edges = np.linspace(lo, hi, grouping.bin_count + 1)
    index = np.searchsorted(edges, times, side="right") - 1
    index[times == edges[-1]] = len(edges) - 2   # the last bin is closed on the right
    inside = (index >= 0) & (index < len(edges) - 1)
    names = [f"{_edge(a)}–{_edge(b)}" for a, b in zip(edges[:-1], edges[1:])]
    middles = (edges[:-1] + edges[1:]) / 2
    new_times = np.where(inside, middles[np.clip(index, 0, len(edges) - 2)], np.nan)
    labels = [names[i] if ok else "" for i, ok in zip(index, inside)]
    edge_text = ", ".join(_edge(e) for e in edges)
    how = "equal-width bins" if grouping.bin_count else "bins"
    return new_times, labels, (f"{how} with edges {edge_text} (each bin holds its lower edge; "
                               "the last also its upper edge), placed at their midpoints")


def _edge(value: float) -> str:
    return f"{value:.6g}"


# ----------------------------------------------------------------------------- text

def _texted(texts: list[str], order: str) -> WaveReading:
    if order == "given":
        ranks = np.arange(len(texts), dtype=float)
    else:
        sorted_index = sorted(range(len(texts)), key=lambda i: _natural_key(texts[i]))
        ranks = np.empty(len(texts))
        ranks[sorted_index] = np.arange(len(texts))
    reading = _ordered(ranks, texts, None, "text")
    return WaveReading(reading.position, reading.labels,
                       np.arange(1, len(reading.labels) + 1, dtype=float), None, "text")


def _natural_key(text: str):
    return [(0, int(part), "") if part.isdigit() else (1, 0, part.lower())
            for part in re.split(r"(\d+)", text) if part]


def _refuse_year_words(texts: list[str], where: str, problem: Problem, order: str) -> None:
    """Labels that carry a year among differing words ('Spring 2021', 'Autumn 2020') cannot
    be put in time order by their text."""
    if order == "given":
        return
    words = {re.sub(r"\d+", "#", t).lower() for t in texts}
    yearly = [i for i, t in enumerate(texts) if re.search(r"(?<!\d)(1[89]|2[01])\d\d(?!\d)", t)]
    if len(words) > 1 and yearly:
        raise problem(f"{where} holds labels such as '{texts[yearly[0]]}' that look like dates "
                      "in no form paneldiag reads; give their form with --date-format (e.g. "
                      "'%b %Y'), their times with --wave-times, or keep their order of first "
                      "appearance with --wave-order given", yearly[0])


# ----------------------------------------------------------------------------- dates

# Each written form: (family, pattern). A family is parsed as one; the day-first or
# month-first reading of the numeric day-month-year family is decided over all labels.
_FORMS = [
    ("iso-time", re.compile(r"\d{4}-\d{1,2}-\d{1,2}[T ]\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?"
                            r"(Z|[+-]\d{2}:?\d{2})?")),
    ("ymd", re.compile(r"(\d{4})([-/.])(\d{1,2})\2(\d{1,2})")),
    ("dmy", re.compile(r"(\d{1,2})([-/.])(\d{1,2})\2(\d{4})")),
    ("dmyy", re.compile(r"(\d{1,2})([-/.])(\d{1,2})\2(\d{2})")),
    ("ym", re.compile(r"(\d{4})([-/])(\d{1,2}|\d{4})")),
    ("my", re.compile(r"(\d{1,2})([-/.])(\d{4})")),
    ("d-mon-y", re.compile(r"(\d{1,2})[\s/.-]*([A-Za-z]+)\.?[\s,/.-]*(\d{4})")),
    ("mon-d-y", re.compile(r"([A-Za-z]+)\.?\s*(\d{1,2})(?:st|nd|rd|th)?,?\s+(\d{4})")),
    ("mon-y", re.compile(r"([A-Za-z]+)\.?[\s,/.-]*(\d{4})")),
    ("y-mon", re.compile(r"(\d{4})[\s/.-]*([A-Za-z]+)\.?")),
    ("mon-yy", re.compile(r"([A-Za-z]+)\.?[\s'/.-]*(\d{2})")),
    ("yq", re.compile(r"(\d{4})\s*[-/ ]?\s*[Qq]([1-4])")),
    ("qy", re.compile(r"[Qq]([1-4])\s*[-/ ]?\s*(\d{4})")),
]
_NAMED = {"d-mon-y": 2, "mon-d-y": 1, "mon-y": 1, "y-mon": 2, "mon-yy": 1}  # month-name group


def _form_of(text: str):
    """(family, match) of the first written form the text has, or None."""
    for family, pattern in _FORMS:
        match = pattern.fullmatch(text)
        if match is None:
            continue
        if family in _NAMED and match.group(_NAMED[family]).lower().rstrip(".") not in _MONTHS:
            continue
        return family, match
    return None


@dataclass(frozen=True)
class _Dates:
    """Parsed wave dates at the precision they were written: ``day`` (timestamps),
    ``month`` (year, month), ``quarter`` (year, quarter) or ``year`` (year spans)."""

    precision: str
    form: str
    stamps: pd.DatetimeIndex | None = None
    year: np.ndarray | None = None
    part: np.ndarray | None = None       # month (1-12) or quarter (1-4)
    year_labels: tuple[str, ...] = ()    # year precision: the labels (spans keep theirs)

    @classmethod
    def of_stamps(cls, stamps: pd.DatetimeIndex, form: str) -> "_Dates":
        return cls("day", form, stamps=stamps)

    @classmethod
    def of_compact_numbers(cls, numbers: np.ndarray):
        """Whole numbers written YYYYMMDD (20210314) are dates; None for other numbers."""
        if not (np.all(np.mod(numbers, 1) == 0) and np.all(numbers >= 18000101)
                and np.all(numbers <= 22001231)):
            return None
        whole = numbers.astype(np.int64)
        stamps = _stamps(whole // 10000, whole // 100 % 100, whole % 100)
        return None if stamps.isna().any() else cls.of_stamps(stamps, "YYYYMMDD")

    @classmethod
    def of_format(cls, texts: list[str], date_format: str, where: str,
                  problem: Problem) -> "_Dates":
        """Dates read with --date-format: day-first, month-first or a strftime pattern."""
        key = date_format.strip().lower()
        if key in ("day-first", "month-first"):
            forms = [_form_of(t) for t in texts]
            odd = next((i for i, f in enumerate(forms) if f is None or f[0] != "dmy"), None)
            if odd is not None:
                raise problem(f"--date-format {key} is for dates written with day and month "
                              f"as numbers and a four-digit year (e.g. 01/12/1987); {where} "
                              f"holds '{texts[odd]}'", odd)
            return cls._day_month_year(texts, forms, where, problem, day_first=key == "day-first")
        if "%" not in date_format:
            raise problem("--date-format takes day-first, month-first or a pattern such as "
                          f"'%d.%m.%Y' (strftime codes), got '{date_format}'")
        parsed = []
        for i, text in enumerate(texts):
            try:
                parsed.append(datetime.strptime(text, date_format))
            except ValueError:
                raise problem(f"wave '{text}' does not match --date-format '{date_format}'",
                              i) from None
        stamps = pd.DatetimeIndex(parsed)
        if any(d in date_format for d in _DATE_DIRECTIVES):
            return cls.of_stamps(stamps, date_format)
        if any(d in date_format for d in _MONTH_DIRECTIVES):
            return cls("month", date_format, year=stamps.year.to_numpy(),
                       part=stamps.month.to_numpy())
        return cls.of_years(stamps.year.to_numpy(), date_format)

    @classmethod
    def of_years(cls, years, form: str) -> "_Dates":
        years = np.asarray(years, dtype=np.int64)
        return cls("year", form, year=years, year_labels=tuple(str(y) for y in years))

    @classmethod
    def of_forms(cls, texts: list[str], forms: list, where: str, problem: Problem) -> "_Dates":
        family = forms[0][0]
        groups = [f[1].groups() for f in forms]
        if family == "iso-time":
            stamps = pd.to_datetime(pd.Series(texts), format="ISO8601", utc=True)
            return cls.of_stamps(pd.DatetimeIndex(stamps).tz_localize(None), "YYYY-MM-DD hh:mm")
        if family == "dmy":
            return cls._day_month_year(texts, forms, where, problem, day_first=None)
        if family in ("dmyy", "mon-yy"):
            example = texts[0]
            pattern = "%d/%m/%y" if family == "dmyy" else "%b-%y"
            raise problem(f"{where} holds dates with two-digit years such as '{example}'; "
                          f"give their form with --date-format (e.g. '{pattern}')", 0)
        if family == "ymd":
            y, sep, m, d = zip(*groups)
            return cls._checked_days(texts, y, m, d, f"YYYY{sep[0]}MM{sep[0]}DD", problem)
        if family == "d-mon-y":
            d, mon, y = zip(*groups)
            return cls._checked_days(texts, y, [_MONTHS[w.lower().rstrip(".")] for w in mon], d,
                                     "DD Mon YYYY", problem)
        if family == "mon-d-y":
            mon, d, y = zip(*groups)
            return cls._checked_days(texts, y, [_MONTHS[w.lower().rstrip(".")] for w in mon], d,
                                     "Mon DD, YYYY", problem)
        if family == "ym":
            return cls._year_month(texts, groups, where, problem)
        if family == "my":
            m, sep, y = zip(*groups)
            return cls._checked_months(texts, y, m, f"MM{sep[0]}YYYY", problem)
        if family in ("mon-y", "y-mon"):
            words, years = (0, 1) if family == "mon-y" else (1, 0)
            months = [_MONTHS[g[words].lower().rstrip(".")] for g in groups]
            return cls._checked_months(texts, [g[years] for g in groups], months,
                                       "Mon YYYY" if family == "mon-y" else "YYYY Mon", problem)
        if family in ("yq", "qy"):
            y, q = zip(*groups) if family == "yq" else tuple(reversed(list(zip(*groups))))
            return cls("quarter", "YYYY-Qn" if family == "yq" else "Qn YYYY",
                       year=np.array(y, dtype=np.int64), part=np.array(q, dtype=np.int64))
        raise AssertionError(family)  # every family of _FORMS is handled above

    @classmethod
    def _day_month_year(cls, texts, forms, where, problem, day_first):
        a, sep, b, y = (np.array(g) for g in zip(*(f[1].groups() for f in forms)))
        a, b = a.astype(np.int64), b.astype(np.int64)
        s = sep[0]
        if day_first is None:
            as_day_first = _stamps(y.astype(np.int64), b, a)
            as_month_first = _stamps(y.astype(np.int64), a, b)
            can_df, can_mf = as_day_first.notna().all(), as_month_first.notna().all()
            if can_df and can_mf and np.any(a != b):
                i = int(np.flatnonzero(a != b)[0])
                raise problem(f"{where} holds dates such as '{texts[i]}' that can be read "
                              f"day-first (DD{s}MM{s}YYYY) or month-first (MM{s}DD{s}YYYY); "
                              "say which with --date-format day-first or --date-format "
                              "month-first", i)
            if not (can_df or can_mf):
                i = int(np.flatnonzero(as_day_first.isna() & as_month_first.isna())[0]) \
                    if (as_day_first.isna() & as_month_first.isna()).any() else 0
                raise problem(f"{where}: '{texts[i]}' is not a date read day-first or "
                              "month-first (and the labels need one reading for all)", i)
            day_first = bool(can_df)
        day, month = (a, b) if day_first else (b, a)
        form = f"DD{s}MM{s}YYYY" if day_first else f"MM{s}DD{s}YYYY"
        return cls._checked_days(texts, y, month, day, form, problem)

    @classmethod
    def _checked_days(cls, texts, y, m, d, form, problem):
        stamps = _stamps(np.array(y, dtype=np.int64), np.array(m, dtype=np.int64),
                         np.array(d, dtype=np.int64))
        if stamps.isna().any():
            i = int(np.flatnonzero(stamps.isna())[0])
            raise problem(f"'{texts[i]}' is not a calendar date (read as {form})", i)
        return cls.of_stamps(stamps, form)

    @classmethod
    def _checked_months(cls, texts, y, m, form, problem):
        months = np.array(m, dtype=np.int64)
        bad = (months < 1) | (months > 12)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise problem(f"'{texts[i]}' is not a month of a year (read as {form})", i)
        return cls("month", form, year=np.array(y, dtype=np.int64), part=months)

    @classmethod
    def _year_month(cls, texts, groups, where, problem):
        """YYYY-MM, or year spans such as school years 2010-11 (or 2010-2011)."""
        y, sep, second = zip(*groups)
        first = np.array(y, dtype=np.int64)
        tail = np.array(second, dtype=np.int64)
        wide = np.array([len(s) == 4 for s in second])
        follows = np.where(wide, tail == first + 1, tail == (first + 1) % 100)
        if follows.all():
            return cls("year", f"YYYY{sep[0]}{'YYYY' if wide.all() else 'YY'} (year spans)",
                       year=first, year_labels=tuple(texts))
        if wide.any():
            i = int(np.flatnonzero(wide & ~follows)[0]) if (wide & ~follows).any() else 0
            raise problem(f"{where}: '{texts[i]}' is neither a year and month nor a span of "
                          "two successive years", i)
        return cls._checked_months(texts, first, tail, f"YYYY{sep[0]}MM", problem)

    # -------------------------------------------------------------- to times

    def rounded(self, period: str, problem: Problem) -> "_Dates":
        """Each date replaced by the month, quarter or year it falls in (--wave-round)."""
        rank = {"day": 0, "month": 1, "quarter": 2, "year": 3}
        if rank[period] < rank[self.precision]:
            raise problem(f"--wave-round {period}: the wave dates are already {self.precision}s")
        if self.precision == "day":
            year, month = self.stamps.year.to_numpy(), self.stamps.month.to_numpy()
        elif self.precision == "month":
            year, month = self.year, self.part
        elif self.precision == "quarter":
            year, month = self.year, 3 * self.part - 2
        else:
            return self
        if period == "month":
            return _Dates("month", self.form, year=year, part=month)
        if period == "quarter":
            return _Dates("quarter", self.form, year=year, part=(month - 1) // 3 + 1)
        return _Dates.of_years(year, self.form)

    def times(self):
        """(times, unit, labels, origin) per distinct date."""
        if self.precision == "year":
            return self.year.astype(float), "year", list(self.year_labels), None
        if self.precision == "quarter":
            labels = [f"{y}-Q{q}" for y, q in zip(self.year, self.part)]
            if np.all(self.part == self.part[0]):
                return self.year.astype(float), "year", labels, None
            count = self.year * 4 + self.part - 1
            first = int(np.argmin(count))
            return (count - count[first]).astype(float), "quarter", labels, labels[first]
        if self.precision == "month":
            labels = [f"{y:04d}-{m:02d}" for y, m in zip(self.year, self.part)]
            return self._monthly(self.year, self.part, labels)
        stamps = self.stamps
        timed = not (stamps == stamps.normalize()).all()
        labels = [s.isoformat() if timed else s.strftime("%Y-%m-%d") for s in stamps]
        if not timed:
            year, month, day = (stamps.year.to_numpy(), stamps.month.to_numpy(),
                                stamps.day.to_numpy())
            if np.all(month == month[0]) and np.all(day == day[0]):
                return year.astype(float), "year", labels, None
            if np.all(day == day[0]) or np.all(stamps.is_month_end):
                return self._monthly(year, month, labels)
        first = int(np.argmin(stamps.asi8))
        days = (stamps - stamps[first]) / pd.Timedelta(days=1)
        days = np.asarray(days, dtype=float)
        if not timed and len(days) > 1 and np.all(np.mod(days, 7) == 0):
            return days / 7, "week", labels, labels[first]
        return days, "day", labels, labels[first]

    @staticmethod
    def _monthly(year, month, labels):
        if np.all(month == month[0]):
            return year.astype(float), "year", labels, None
        count = np.asarray(year, dtype=np.int64) * 12 + np.asarray(month) - 1
        first = int(np.argmin(count))
        return (count - count[first]).astype(float), "month", labels, labels[first][:7]


def _stamps(year, month, day) -> pd.DatetimeIndex:
    """Timestamps from whole-number parts; NaT where the parts are not a calendar date."""
    frame = pd.DataFrame({"year": year, "month": month, "day": day})
    return pd.DatetimeIndex(pd.to_datetime(frame, errors="coerce"))


def _dated(dates: _Dates, grouping: WaveGrouping, problem: Problem) -> WaveReading:
    if grouping.edges or grouping.bin_count or grouping.step:
        raise problem("--wave-bins and a numeric --wave-round are for numeric waves; for date "
                      f"waves give --wave-round {'|'.join(PERIODS)}")
    note = None
    if grouping.period:
        before = dates.times()[2]
        dates = dates.rounded(grouping.period, problem)
        note = f"each date taken as the {grouping.period} it falls in"
    times, unit, labels, origin = dates.times()
    moved = None if note is None else np.array([a != b for a, b in zip(before, labels)])
    return _ordered(np.asarray(times, dtype=float), labels, unit, "dates", form=dates.form,
                    origin=origin, grouping=note, moved=moved)


# ----------------------------------------------------------------------------- order

def _ordered(times: np.ndarray, labels: list[str], unit: str | None, kind: str,
             **details) -> WaveReading:
    """Distinct labels with equal times are one wave; waves in time order. A NaN time
    (outside the bins) gets position -1."""
    inside = np.isfinite(times)
    distinct, inverse = np.unique(times[inside], return_inverse=True)
    position = np.full(len(times), -1, dtype=np.int64)
    position[inside] = inverse
    first = np.full(len(distinct), -1, dtype=np.int64)
    for i in np.flatnonzero(inside)[::-1]:   # a loop over distinct labels: the first names it
        first[position[i]] = i
    wave_labels = tuple(labels[i] for i in first)
    return WaveReading(position, wave_labels, distinct.astype(float), unit, kind, **details)


# ----------------------------------------------------------------------------- checks

def check_shared_waves(rows_per_wave: np.ndarray, times: np.ndarray, where: str,
                       problem: Problem, grouping: WaveGrouping, max_waves: int, kind: str,
                       n_units: int) -> None:
    """Stop when the wave column holds continuous time rather than shared waves: more
    distinct values than ``max_waves``, more than ``SPARSE_ABOVE_WAVES`` answered
    sparsely, or most rows alone at their time. ``rows_per_wave`` counts the rows."""
    n_waves = len(times)
    n_rows = int(rows_per_wave.sum())
    coverage = n_rows / max(n_units * n_waves, 1)
    remedy = _grouping_remedy(times, kind)
    after = " after grouping" if grouping.active else ""
    if n_waves > max_waves:
        raise problem(too_many_waves(where + after, n_waves, max_waves, times, kind))
    if n_waves > SPARSE_ABOVE_WAVES and kind != "text" and coverage < MIN_OCCASION_COVERAGE:
        raise problem(
            f"{where} has {n_waves:,} distinct values{after} and the units answer "
            f"{coverage:.0%} of them on average: it looks like continuous time, not shared "
            f"waves; {remedy}")
    if grouping.active or kind == "text" or n_rows * UNIT_SPECIFIC_SHARE >= n_waves:
        return  # (a row alone is a wave of one row: at most n_waves rows are alone)
    alone = int(np.count_nonzero(rows_per_wave == 1))
    if alone > UNIT_SPECIFIC_SHARE * n_rows:
        raise problem(
            f"{where}: {alone:,} of {n_rows:,} rows are the only row at their "
            f"time, so the units have their own times, not shared waves; {remedy}")


def too_many_waves(where: str, n_waves: int, max_waves: int, times=None,
                   kind: str = "text") -> str:
    """The message for a wave column of more distinct values than ``max_waves``: the
    limit, how to group continuous time (numbers or dates), and how to raise it."""
    looks = "" if kind == "text" else ": if it is continuous time, " + \
        _grouping_remedy(times, kind)
    return (f"{where} has {n_waves:,} distinct values, more than the {max_waves} waves a "
            f"panel screen takes{looks} (or raise the limit with --max-waves)")


def _grouping_remedy(times, kind: str) -> str:
    if kind == "dates":
        return f"group them with --wave-round {'|'.join(PERIODS)}"
    step = _round_step((times[-1] - times[0]) / 8)
    edges = np.arange(np.floor(times[0] / step), np.ceil(times[-1] / step) + 1) * step
    return (f"group them with --wave-bins EDGES (e.g. {','.join(map(number_text, edges))}) "
            "or --wave-bins N (N equal-width bins), or round them with --wave-round STEP")


def _round_step(width: float) -> float:
    """The smallest of 1, 2 or 5 times a power of ten that is at least ``width``."""
    if not width > 0:
        return 1.0
    power = 10.0 ** np.floor(np.log10(width))
    return next(m * power for m in (1, 2, 5, 10) if m * power >= width)
