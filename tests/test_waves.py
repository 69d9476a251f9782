"""Waves and time (paneldiag/io/waves.py): dates in their written forms, time units,
grouping of continuous times, and the stop on continuous time; then the intake fixtures
(fixtures/intake, fixtures/bad) through the command line.

The expected order and times of dates come from pandas (Timestamp and Period arithmetic),
computed apart from paneldiag's parser.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import FIXTURES
from paneldiag.errors import InputProblem
from paneldiag.io.waves import (MAX_WAVES, SPARSE_ABOVE_WAVES, WaveGrouping,
                                check_shared_waves, read_waves)
from test_bad_input import run_forked

INTAKE, BAD = FIXTURES / "intake", FIXTURES / "bad"


def problem(what, index=None):
    return InputProblem(what, row=index)


def read(labels, **options):
    return read_waves(np.array(labels, dtype=object), "the wave column 'w'", problem, **options)


# ----------------------------------------------------------------------------- written forms

MONTH_ABBR = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]
MONTH_NAME = ["January", "February", "March", "April", "May", "June", "July", "August",
              "September", "October", "November", "December"]
DAY_FORMS = {  # a day-level date written in each form paneldiag reads without being told
    "YYYY-MM-DD": lambda d: d.strftime("%Y-%m-%d"),
    "YYYY/MM/DD": lambda d: d.strftime("%Y/%m/%d"),
    "YYYYMMDD": lambda d: d.strftime("%Y%m%d"),
    "DD Mon YYYY": lambda d: f"{d.day} {MONTH_ABBR[d.month - 1]} {d.year}",
    "Mon DD, YYYY": lambda d: f"{MONTH_NAME[d.month - 1]} {d.day}, {d.year}",
}
MONTH_FORMS = {
    "Mon YYYY": lambda y, m: f"{MONTH_ABBR[m - 1]} {y}",
    "Month YYYY": lambda y, m: f"{MONTH_NAME[m - 1]} {y}",
    "MM/YYYY": lambda y, m: f"{m:02d}/{y}",
    "M.YYYY": lambda y, m: f"{m}.{y}",
    "YYYY-MM": lambda y, m: f"{y}-{m:02d}",
    "YYYY Mon": lambda y, m: f"{y} {MONTH_ABBR[m - 1]}",
}
QUARTER_FORMS = {"YYYYQn": lambda y, q: f"{y}Q{q}", "YYYY-Qn": lambda y, q: f"{y}-Q{q}",
                 "Qn YYYY": lambda y, q: f"Q{q} {y}"}


def reference_day_times(stamps: pd.DatetimeIndex):
    """The documented rule, from pandas fields: one day of the year -> years; one day of the
    month (or every date a month end) -> months from the first; whole weeks -> weeks;
    else days from the first."""
    if stamps.month.nunique() == 1 and stamps.day.nunique() == 1:
        return stamps.year.to_numpy(float), "year"
    if stamps.day.nunique() == 1 or stamps.is_month_end.all():
        months = stamps.to_period("M").asi8
        if stamps.month.nunique() == 1:
            return stamps.year.to_numpy(float), "year"
        return (months - months.min()).astype(float), "month"
    days = ((stamps - stamps.min()) / pd.Timedelta(days=1)).to_numpy(float)
    if np.all(days % 7 == 0):
        return days / 7, "week"
    return days, "day"


def check_round_trip(texts, keys, expected_times, unit):
    """The labels come out in time order, each text at its key's wave, with the times."""
    reading = read(texts)
    order = np.argsort(keys, kind="stable")
    ranks = np.empty(len(keys), dtype=int)
    ranks[order] = np.arange(len(keys))
    np.testing.assert_array_equal(reading.position, ranks)
    np.testing.assert_array_equal(reading.times, np.sort(expected_times))
    assert reading.unit == unit
    return reading


DAYS = st.dates(min_value=pd.Timestamp("1950-01-01").date(),
                max_value=pd.Timestamp("2049-12-31").date())


@settings(max_examples=60, deadline=None)
@given(dates=st.lists(DAYS, min_size=2, max_size=8, unique=True),
       form=st.sampled_from(sorted(DAY_FORMS)))
def test_day_dates_round_trip(dates, form):
    stamps = pd.DatetimeIndex(pd.to_datetime(dates))
    times, unit = reference_day_times(stamps)
    check_round_trip([DAY_FORMS[form](d) for d in stamps], stamps.asi8, times, unit)


@settings(max_examples=40, deadline=None)
@given(dates=st.lists(DAYS, min_size=2, max_size=8, unique=True),
       day_first=st.booleans(), sep=st.sampled_from("/.-"))
def test_day_month_year_round_trip_with_the_reading_named(dates, day_first, sep):
    stamps = pd.DatetimeIndex(pd.to_datetime(dates))
    pattern = f"%d{sep}%m{sep}%Y" if day_first else f"%m{sep}%d{sep}%Y"
    texts = [d.strftime(pattern) for d in stamps]
    times, unit = reference_day_times(stamps)
    reading = read_waves(np.array(texts, dtype=object), "w", problem,
                         date_format="day-first" if day_first else "month-first")
    np.testing.assert_array_equal(reading.times, np.sort(times))
    assert reading.unit == unit and reading.labels == tuple(sorted(stamps.strftime("%Y-%m-%d")))
    # the same texts with the strftime pattern give the same waves
    assert read(texts, date_format=pattern).labels == reading.labels


def reference_period_times(periods: pd.PeriodIndex, parts: list[int], unit: str):
    """One month (or quarter) of the year in every label: calendar years; else months (or
    quarters) from the first, from pandas Period ordinals."""
    if len(set(parts)) == 1:
        return periods.year.to_numpy(float), "year"
    return (periods.asi8 - periods.asi8.min()).astype(float), unit


@settings(max_examples=40, deadline=None)
@given(months=st.lists(st.tuples(st.integers(1950, 2049), st.integers(1, 12)), min_size=2,
                       max_size=10, unique=True),
       form=st.sampled_from(sorted(MONTH_FORMS)))
def test_month_forms_round_trip(months, form):
    periods = pd.PeriodIndex([pd.Period(year=y, month=m, freq="M") for y, m in months])
    times, unit = reference_period_times(periods, [m for _, m in months], "month")
    reading = check_round_trip([MONTH_FORMS[form](y, m) for y, m in months], periods.asi8,
                               times, unit)
    assert reading.labels == tuple(sorted(str(p) for p in periods))


@settings(max_examples=30, deadline=None)
@given(quarters=st.lists(st.tuples(st.integers(1950, 2049), st.integers(1, 4)), min_size=2,
                         max_size=10, unique=True),
       form=st.sampled_from(sorted(QUARTER_FORMS)))
def test_quarter_forms_round_trip(quarters, form):
    periods = pd.PeriodIndex([pd.Period(year=y, quarter=q, freq="Q") for y, q in quarters])
    times, unit = reference_period_times(periods, [q for _, q in quarters], "quarter")
    check_round_trip([QUARTER_FORMS[form](y, q) for y, q in quarters], periods.asi8, times, unit)


def test_yearly_iso_dates_are_one_year_apart():
    # before: decimal years gave 2016-01-01 - 2015-01-01 = 0.998615 (2016 is a leap year)
    reading = read(["2016-01-01", "2015-01-01", "2017-01-01", "2021-01-01"])
    np.testing.assert_array_equal(reading.times, [2015, 2016, 2017, 2021])
    assert reading.unit == "year"
    # the same day of the year other than 1 January, through a leap day
    assert read(["2015-07-01", "2016-07-01"]).times.tolist() == [2015, 2016]


def test_day_first_dates_are_not_ordered_as_text():
    # as text 01/12/1987 sorts before 02/12/1981; 13/06/1985 says the dates are day-first
    reading = read(["01/12/1987", "02/12/1981", "13/06/1985"])
    assert reading.labels == ("1981-12-02", "1985-06-13", "1987-12-01")
    assert reading.describe()["form"] == "DD/MM/YYYY" and reading.unit == "day"


def test_month_first_is_seen_from_the_data():
    assert read(["12/31/2020", "06/30/2021"]).describe()["form"] == "MM/DD/YYYY"


def test_ambiguous_day_and_month_stop_with_the_remedy():
    with pytest.raises(InputProblem, match="--date-format day-first or --date-format "
                                           "month-first") as info:
        read(["01/12/1987", "02/12/1981"])
    assert "'01/12/1987'" in info.value.what and info.value.row == 0
    # day and month equal in every label: both readings give the same dates
    assert read(["01/01/2020", "02/02/2020"]).labels == ("2020-01-01", "2020-02-02")


@pytest.mark.parametrize("labels,fragment", [
    (["01/12/87", "02/12/88"], "two-digit years such as '01/12/87'"),
    (["Mar-21", "Jun-21"], "two-digit years"),
    (["2021-03-01", "Mar 2021"], "mixes date forms: '2021-03-01' and 'Mar 2021'"),
    (["2021-03-01", "baseline"], "mixes dates and text"),
    (["2015", "2016-06"], "mixes numbers and dates"),
    (["Spring 2021", "Autumn 2021"], "look like dates in no form paneldiag reads"),
    (["31/02/2020", "01/03/2020"], "not a date read day-first or month-first"),
    (["2021-13", "2021-02"], "not a month of a year"),
    (["2021-02-30", "2021-03-01"], "not a calendar date"),
])
def test_unreadable_dates_stop(labels, fragment):
    with pytest.raises(InputProblem, match=fragment.replace("(", r"\(")):
        read(labels)


def test_a_date_format_that_does_not_fit_names_the_label():
    with pytest.raises(InputProblem, match="wave '2021-03-01' does not match --date-format"):
        read(["01.03.2021", "2021-03-01"], date_format="%d.%m.%Y")
    with pytest.raises(InputProblem, match="--date-format day-first is for dates written"):
        read(["2021-03", "2021-04"], date_format="day-first")


def test_year_spans_and_other_calendars():
    spans = read(["2011-12", "2010-11", "2012-13"])      # school years, not months
    assert spans.labels == ("2010-11", "2011-12", "2012-13") and spans.unit == "year"
    np.testing.assert_array_equal(spans.times, [2010, 2011, 2012])
    month_ends = read(["2021-01-31", "2021-02-28", "2021-04-30"])
    np.testing.assert_array_equal(month_ends.times, [0, 1, 3])
    weeks = read(["2021-01-04", "2021-01-11", "2021-02-01"])
    assert weeks.unit == "week" and weeks.times.tolist() == [0, 1, 4]
    clock = read(["2021-03-01T06:00", "2021-03-02T18:00"])
    assert clock.unit == "day" and clock.times.tolist() == [0, 1.5]
    # a date column in a typed file (parquet, Stata) follows the same rules
    typed = read_waves(pd.to_datetime(["2019-01-01", "2018-01-01"]), "w", problem)
    assert typed.unit == "year" and typed.times.tolist() == [2018, 2019]


def test_numbers_and_text():
    years = read_waves(np.array([2015.0, 2016.0, 2018.0]), "w", problem)
    assert years.unit == "year" and years.labels == ("2015", "2016", "2018")
    assert read_waves(np.array([0.0, 0.5, 1.0]), "w", problem).unit is None
    assert read(["1", "1.0", "2"]).labels == ("1", "2")   # one number, one wave
    assert read(["W10", "W2", "W1"]).labels == ("W1", "W2", "W10")


# ----------------------------------------------------------------------------- grouping

AGES = np.array([18.5, 20.0, 33.0, 41.7, 60.0, 64.0])


def test_bins_from_edges():
    reading = read_waves(AGES, "w", problem, grouping=WaveGrouping.parse("20,40,60", None))
    assert reading.labels == ("20–40", "40–60")
    np.testing.assert_array_equal(reading.times, [30, 50])       # midpoints
    # 18.5 and 64 fall outside; 60 is in the last bin, closed on the right
    np.testing.assert_array_equal(reading.position, [-1, 0, 0, 1, 1, -1])


def test_equal_width_bins_and_rounding():
    reading = read_waves(AGES, "w", problem, grouping=WaveGrouping.parse("3", None))
    # numpy.linspace(18.5, 64, 4) edges: 18.5, 33.667, 48.833, 64
    np.testing.assert_allclose(reading.times, (np.linspace(18.5, 64, 4)[:-1]
                                               + np.linspace(18.5, 64, 4)[1:]) / 2)
    np.testing.assert_array_equal(reading.position, [0, 0, 0, 1, 2, 2])
    rounded = read_waves(np.array([14.5, 15.49, 25.0, 0.25]), "w", problem,
                         grouping=WaveGrouping.parse(None, "1"))
    # halves go up (numpy.round would give 14 for 14.5: it rounds halves to even)
    assert rounded.labels == ("0", "15", "25") and rounded.position.tolist() == [1, 1, 2, 0]
    assert rounded.moved.tolist() == [True, True, False, True]


def test_dates_taken_as_their_period():
    reading = read(["2021-03-14", "2021-05-20", "2021-08-02"],
                   grouping=WaveGrouping.parse(None, "quarter"))
    assert reading.labels == ("2021-Q1", "2021-Q2", "2021-Q3") and reading.unit == "quarter"
    years = read(["2021-03-14", "2022-05-20"], grouping=WaveGrouping.parse(None, "year"))
    assert years.labels == ("2021", "2022") and years.unit == "year"


@pytest.mark.parametrize("bins,rounding,labels,fragment", [
    ("20,10", None, [1.0, 2.0], "the edges must be finite and increase"),
    ("1", None, [1.0, 2.0], "a whole number of at least 2"),
    ("5", "1", [1.0, 2.0], "choose one of --wave-bins and --wave-round"),
    (None, "-2", [1.0, 2.0], "a positive step"),
    (None, "month", [1.0, 2.0], "--wave-round month is for date waves"),
    ("0,5", None, ["2021-01-01", "2021-02-03"], "are for numeric waves"),
    (None, "1", ["W1", "W2"], "need numeric or date waves"),
])
def test_grouping_errors(bins, rounding, labels, fragment):
    with pytest.raises(InputProblem, match=fragment):
        grouping = WaveGrouping.parse(bins, rounding)
        read_waves(np.array(labels, dtype=object if isinstance(labels[0], str) else float),
                   "w", problem, grouping=grouping)


def test_continuous_time_stops():
    def stop(what):
        return InputProblem(what)
    times = np.arange(MAX_WAVES + 1, dtype=float)
    with pytest.raises(InputProblem, match=f"{MAX_WAVES + 1} distinct values, more than the "
                                           f"{MAX_WAVES} waves"):
        check_shared_waves(np.ones(MAX_WAVES + 1, dtype=int), times, "w", stop, WaveGrouping(),
                           MAX_WAVES, "numbers", 1)
    check_shared_waves(np.full(MAX_WAVES + 1, 2), times, "w", stop,
                       WaveGrouping(), MAX_WAVES + 1, "numbers", 2)    # --max-waves
    # above SPARSE_ABOVE_WAVES values, occasions most units answer (a diary) are waves;
    # a handful of values per unit (ages) is continuous time
    many = SPARSE_ABOVE_WAVES + 10
    diary = np.tile(np.arange(many), 30)                         # 30 units, every occasion
    check_shared_waves(np.bincount(diary), np.arange(float(many)), "w", stop, WaveGrouping(), MAX_WAVES,
                       "numbers", 30)
    ages = np.tile(np.arange(many), 3)                           # 30 units, 5 ages each
    with pytest.raises(InputProblem, match="answer 10% of them on average"):
        check_shared_waves(np.bincount(ages), np.arange(float(many)), "w", stop, WaveGrouping(),
                           MAX_WAVES, "numbers", 30)
    # four rows alone at their time out of six: the units have their own times
    with pytest.raises(InputProblem, match="4 of 6 rows are the only row at their time"):
        check_shared_waves(np.bincount([0, 0, 1, 2, 3, 4]), np.arange(5.0), "w", stop,
                           WaveGrouping(), MAX_WAVES, "numbers", 2)
    check_shared_waves(np.bincount([0, 0, 1, 1, 2, 3]), np.arange(4.0), "w", stop,
                       WaveGrouping(), MAX_WAVES, "numbers", 2)          # two of six alone


# ----------------------------------------------------------------------------- through the CLI

def screen_json(tmp_path, fixture, *options, audit=True):
    out = tmp_path / "report.json"
    result = run_forked(["screen", fixture, *options, *(["--audit-only"] if audit else []),
                         "--json", out, "--quiet"], tmp_path)
    assert result.returncode == 0, result.stderr.decode()
    return json.loads(out.read_text(encoding="utf-8"))


def test_cli_day_first_interview_dates(tmp_path):
    report = screen_json(tmp_path, INTAKE / "earnings_day_first.csv", "--id", "household",
                         "--wave", "interview", "--value", "log_earnings")
    panel = report["panel"]
    # fixtures/intake/make_fixtures.py: fieldwork dates 03/11/2015 ... 17/10/2022
    assert panel["waves"] == ["2015-11-03", "2016-10-28", "2017-11-14", "2018-10-30",
                              "2019-11-12", "2021-11-02", "2022-10-17"]
    stamps = pd.to_datetime(panel["waves"])
    assert panel["times"] == ((stamps - stamps[0]).days).tolist()     # pandas reference
    assert panel["time_unit"] == "day"
    assert panel["wave_reading"] == {"read_as": "dates", "form": "DD/MM/YYYY",
                                     "times_from": "2015-11-03"}
    # the intake block of the terminal and the appendix say how the waves were read
    from paneldiag.render.prose import Citations, sample
    from paneldiag.render.terminal import render_terminal
    basis = "dates written DD/MM/YYYY; times in days from 2015-11-03"
    text = render_terminal(report, details=True)
    assert basis in text and "waves in order (time): 2015-11-03 (0), 2016-10-28 (360)," in text
    assert f"The waves were read as {basis}; in order, with their times: 2015-11-03 (0)" in \
        sample(report, Citations())[0]


def test_cli_ambiguous_dates_with_the_reading_named_are_yearly(tmp_path):
    report = screen_json(tmp_path, BAD / "earnings_ambiguous.csv", "--id", "household",
                         "--wave", "interview", "--value", "log_earnings",
                         "--date-format", "day-first")
    assert report["panel"]["waves"][0] == "2015-12-01"
    assert report["panel"]["times"] == [2015, 2016, 2017, 2018, 2019, 2021]
    assert report["panel"]["time_unit"] == "year"
    assert report["input"]["options"]["date_format"] == "day-first"


@pytest.mark.parametrize("fixture,wave,value,waves,times,unit", [
    ("rents_month_year.csv", "survey", "rent",
     ["2021-03", "2021-06", "2021-09", "2021-12", "2022-03", "2022-06"],
     [0, 3, 6, 9, 12, 15], "month"),
    ("arrears_quarters.csv", "quarter", "arrears",
     ["2021-Q3", "2021-Q4", "2022-Q1", "2022-Q2", "2022-Q3"], [0, 1, 2, 3, 4], "quarter"),
])
def test_cli_month_and_quarter_waves(tmp_path, fixture, wave, value, waves, times, unit):
    report = screen_json(tmp_path, INTAKE / fixture, "--id", "household", "--wave", wave,
                         "--value", value)
    assert report["panel"]["waves"] == waves and report["panel"]["times"] == times
    assert report["panel"]["time_unit"] == unit


def test_cli_yearly_iso_dates_give_whole_year_distances(tmp_path):
    report = screen_json(tmp_path, INTAKE / "trust_yearly_iso.csv", "--id", "household",
                         "--wave", "surveyed_on", "--value", "trust", audit=False)
    assert report["panel"]["times"] == [2015, 2016, 2017, 2018, 2019, 2021, 2022, 2023]
    distances = {r["time_distance"] for r in report["lag_profile"] if r["basis"] == "time"}
    assert distances == {1, 2, 3, 4, 5, 6, 7, 8}                       # 2020 has no wave
    text = run_forked(["screen", INTAKE / "trust_yearly_iso.csv", "--id", "household",
                       "--wave", "surveyed_on", "--value", "trust"], tmp_path).stdout.decode()
    assert "r at distance 1 year:" in text
    assert "(2015-01-01 to 2023-01-01, times in years)" in text


def test_cli_ages_in_bins(tmp_path):
    options = ["--id", "household", "--wave", "age", "--value", "satisfaction",
               "--wave-bins", "20,40,60"]
    result = run_forked(["screen", BAD / "satisfaction_by_age.csv", *options], tmp_path)
    assert result.returncode == 2
    assert "appear more than once after grouping the waves" in result.stderr.decode()
    assert "choose --duplicates mean" in result.stderr.decode()
    report = screen_json(tmp_path, BAD / "satisfaction_by_age.csv", *options,
                         "--duplicates", "mean")
    ledger, panel = report["ledger"], report["panel"]
    assert panel["waves"] == ["20–40", "40–60"] and panel["times"] == [30, 50]
    # reference with pandas: ages 20-78 (make_fixtures.py); outside [20, 60] are dropped
    frame = pd.read_csv(BAD / "satisfaction_by_age.csv")
    inside = frame[(frame["age"] >= 20) & (frame["age"] <= 60)]
    bins = np.where(inside["age"] < 40, 0, 1)
    grouping = ledger["wave_grouping"]
    assert grouping["rows_outside"] == len(frame) - len(inside)
    assert ledger["dropped_by_reason"]["wave_outside_bins"] == len(frame) - len(inside)
    assert grouping["rows_moved"] == int((inside["age"] != np.where(bins == 0, 30, 50)).sum())
    before = len(inside) - len(inside.drop_duplicates(["household", "age"]))
    after = len(inside) - len(inside.assign(bin=bins).drop_duplicates(["household", "bin"]))
    assert grouping["rows_sharing_a_wave"] == after - before
    assert ledger["rows_read"] == ledger["rows_used"] + ledger["rows_dropped"]
    assert report["input"]["options"]["wave_bins"] == "20,40,60"
    # the reproducibility block records the grouping and the command that repeats it
    from paneldiag.render.appendix import command_line, reproducibility
    facts = " ".join(str(block) for block in reproducibility(report))
    assert "Waves: numbers; times as written (their unit is not named); grouped by bins " \
           "with edges 20, 40, 60" in facts
    assert "--wave-bins 20,40,60 --duplicates mean" in command_line(report["input"])


def test_cli_own_visit_dates_by_quarter(tmp_path):
    report = screen_json(tmp_path, BAD / "visits_own_dates.csv", "--id", "household", "--wave",
                         "visited", "--value", "condition", "--wave-round", "quarter",
                         "--duplicates", "mean")
    frame = pd.read_csv(BAD / "visits_own_dates.csv", parse_dates=["visited"])
    quarters = sorted({f"{p.year}-Q{p.quarter}" for p in frame["visited"].dt.to_period("Q")})
    assert report["panel"]["waves"] == quarters and report["panel"]["time_unit"] == "quarter"
    assert report["panel"]["wave_reading"]["grouping"] == "each date taken as the quarter it " \
                                                           "falls in"


def test_cli_ids_made_of_two_columns(tmp_path):
    report = screen_json(tmp_path, BAD / "district_numbered.csv", "--id", "district", "--id",
                         "household", "--wave", "year", "--value", "trust")
    # four districts of 15 households each (make_fixtures.py)
    assert report["panel"]["n_units"] == 60
    assert report["input"]["options"]["id"] == ["district", "household"]
    result = run_forked(["screen", BAD / "district_numbered.csv", "--id", "district", "--id",
                         "household", "--wave", "year", "--value", "trust", "--report",
                         tmp_path / "appendix", "--quiet"], tmp_path)
    assert result.returncode == 0, result.stderr.decode()
    markdown = (tmp_path / "appendix" / "appendix.md").read_text(encoding="utf-8")
    assert "--id district --id household" in markdown
