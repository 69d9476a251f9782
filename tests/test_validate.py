"""Validation: waves and times, wide layouts, duplicates, and the ledger.

The ledger property (rows_read == rows_used + sum of drops) and every drop count are
checked against an independent pandas computation over random tables (hypothesis).
"""

from __future__ import annotations

import os
import sys
import tempfile

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from paneldiag.errors import InputProblem
from paneldiag.io.readers import NULL_TOKENS, read_table
from paneldiag.io.validate import LayoutSpec, MissingCodes, build_panel


def panel_from_text(tmp_path, text: str, name: str = "panel.csv", **spec):
    path = tmp_path / name
    path.write_text(text)
    options = {"id": "unit", "wave": "wave", "values": ("y",), **spec}
    if "wide" in spec:
        options.pop("wave"), options.pop("values")
    layout = LayoutSpec(**options)
    return build_panel(read_table(str(path), columns=layout.columns()), layout)


def long_text(waves: list[str], units=("A", "B", "C")) -> str:
    lines = ["unit,wave,y"]
    for u, unit in enumerate(units):
        for w, wave in enumerate(waves):
            lines.append(f"{unit},{wave},{u * 10 + w}")
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------------ waves and time

def test_integer_waves(tmp_path):
    panel, _ = panel_from_text(tmp_path, long_text(["3", "1", "2"]))
    assert panel.wave_labels == ("1", "2", "3")
    np.testing.assert_array_equal(panel.wave_times, [1, 2, 3])
    # values follow their waves, not the file order: unit A had 0 at wave 3, 1 at wave 1
    np.testing.assert_array_equal(panel.values["y"][0], [1, 2, 0])


def test_years_keep_the_gap(tmp_path):
    panel, _ = panel_from_text(tmp_path, long_text(["2015", "2016", "2018", "2019"]))
    assert panel.wave_labels == ("2015", "2016", "2018", "2019")
    np.testing.assert_array_equal(panel.wave_times, [2015, 2016, 2018, 2019])


def test_text_waves_natural_order(tmp_path):
    panel, _ = panel_from_text(tmp_path, long_text(["W10", "W2", "W1"]))
    assert panel.wave_labels == ("W1", "W2", "W10")           # not W1, W10, W2
    np.testing.assert_array_equal(panel.wave_times, [1, 2, 3])
    np.testing.assert_array_equal(panel.values["y"][1], [12, 11, 10])


def test_text_waves_given_order(tmp_path):
    panel, _ = panel_from_text(tmp_path, long_text(["intake", "follow-up", "exit"]),
                               wave_order="given")
    assert panel.wave_labels == ("intake", "follow-up", "exit")
    np.testing.assert_array_equal(panel.values["y"][0], [0, 1, 2])
    natural, _ = panel_from_text(tmp_path, long_text(["intake", "follow-up", "exit"]))
    assert natural.wave_labels == ("exit", "follow-up", "intake")


def test_iso_dates_count_days(tmp_path):
    dates = ["2020-01-01", "2020-07-02", "2021-04-01"]
    panel, _ = panel_from_text(tmp_path, long_text(dates))
    assert panel.wave_labels == tuple(dates)
    # reference: days between the dates from pandas Timestamp arithmetic
    stamps = pd.to_datetime(dates)
    np.testing.assert_array_equal(panel.wave_times, (stamps - stamps[0]).days)
    assert panel.wave_times[1] == 183           # 2020 is a leap year: 31+29+31+30+31+30+1
    assert panel.time_unit == "day"
    assert panel.wave_reading == {"read_as": "dates", "form": "YYYY-MM-DD",
                                  "times_from": "2020-01-01"}


def test_wave_times_override(tmp_path):
    panel, _ = panel_from_text(tmp_path, long_text(["W1", "W2", "W3"]),
                               wave_times=(0.0, 0.5, 2.0))
    np.testing.assert_array_equal(panel.wave_times, [0.0, 0.5, 2.0])
    with pytest.raises(InputProblem, match="must increase"):
        panel_from_text(tmp_path, long_text(["W1", "W2", "W3"]), wave_times=(0.0, 2.0, 1.0))


def test_mixed_wave_types_refused(tmp_path):
    with pytest.raises(InputProblem, match="mixes numbers and text") as info:
        panel_from_text(tmp_path, long_text(["1", "2", "late"]))
    assert info.value.column == "wave" and info.value.row is not None


WIDE = "unit,y2019,y2020,y2022\nA,1,2,3\nB,4,,6\nC,7,8,\n"


def test_wide_labels_from_trailing_numbers(tmp_path):
    panel, ledgers = panel_from_text(tmp_path, WIDE, wide=(("y", ("y2019", "y2020", "y2022")),))
    assert panel.wave_labels == ("2019", "2020", "2022")
    np.testing.assert_array_equal(panel.wave_times, [2019, 2020, 2022])
    np.testing.assert_array_equal(panel.values["y"], [[1, 2, 3], [4, np.nan, 6], [7, 8, np.nan]])
    assert ledgers["y"].cells == {"missing_value": 2, "declared_missing_code": 0,
                                  "non_numeric_value": 0, "infinite_value": 0, "observed": 7}


def test_wide_given_labels(tmp_path):
    panel, _ = panel_from_text(tmp_path, WIDE, wide=(("y", ("y2019", "y2020", "y2022")),),
                               wave_labels=("spring", "summer", "winter"))
    assert panel.wave_labels == ("spring", "summer", "winter")
    np.testing.assert_array_equal(panel.wave_times, [1, 2, 3])
    panel, _ = panel_from_text(tmp_path, WIDE, wide=(("y", ("y2019", "y2020", "y2022")),),
                               wave_labels=("0", "6", "18"))
    np.testing.assert_array_equal(panel.wave_times, [0, 6, 18])   # numeric labels are times


def test_wide_without_numbers_counts_waves(tmp_path):
    text = "unit,first,second\nA,1,2\nB,3,4\n"
    panel, _ = panel_from_text(tmp_path, text, wide=(("y", ("first", "second")),))
    assert panel.wave_labels == ("1", "2")


def test_wide_several_measures_and_no_observed_row(tmp_path):
    text = "unit,a1,a2,b1,b2\nA,1,2,,\nB,3,4,5,6\nC,,,7,8\n"
    panel, ledgers = panel_from_text(tmp_path, text, wide=(("a", ("a1", "a2")),
                                                           ("b", ("b1", "b2"))))
    assert panel.measures == ["a", "b"]
    assert ledgers["a"].dropped_by_reason["no_observed_value"] == 1
    assert ledgers["b"].dropped_by_reason["no_observed_value"] == 1
    assert panel.n_units == 3                           # the silent unit stays in the panel
    assert all(ledger.balances() for ledger in ledgers.values())


# ------------------------------------------------------------------------ duplicates

DUPES = ("unit,wave,y\nA,1,1\nA,1,3\nA,2,5\nB,1,2\nB,2,4\nB,2,8\nC,1,1\nC,1,1\nD,2,1\nD,2,2\n"
         "E,1,0\n")


def test_duplicates_are_an_error_naming_the_first_few(tmp_path):
    with pytest.raises(InputProblem) as info:
        panel_from_text(tmp_path, DUPES)
    message = info.value.what
    assert message.startswith("4 unit-wave pair(s) appear more than once")
    assert "A at wave 1 (rows 2 and 3)" in message
    assert "B at wave 2 (rows 6 and 7)" in message
    assert "C at wave 1 (rows 8 and 9)" in message
    assert "D at wave" not in message and ", ..." in message
    assert info.value.row == 2 and info.value.column == "unit"


@pytest.mark.parametrize("policy,expected", [
    ("first", {"A": [1, 5], "B": [2, 4], "C": [1, np.nan], "D": [np.nan, 1]}),
    ("last", {"A": [3, 5], "B": [2, 8], "C": [1, np.nan], "D": [np.nan, 2]}),
    ("mean", {"A": [2, 5], "B": [2, 6], "C": [1, np.nan], "D": [np.nan, 1.5]}),
])
def test_duplicate_policies(tmp_path, policy, expected):
    panel, ledgers = panel_from_text(tmp_path, DUPES, duplicates=policy)
    for u, unit in enumerate(panel.unit_ids[:4]):
        np.testing.assert_array_equal(panel.values["y"][u], expected[unit])
    ledger = ledgers["y"]
    assert ledger.rows_read == 11 and ledger.balances()
    dropped = 0 if policy == "mean" else 4
    assert ledger.dropped_by_reason["duplicate_unit_wave"] == dropped
    assert ledger.rows_used == 11 - dropped


# ------------------------------------------------------------------------ the ledger

ID_TOKENS = st.sampled_from(["A", "B", "C", "D", None, " "])
WAVE_TOKENS = st.sampled_from(["1", "2", "3", None])
VALUE_TOKENS = st.sampled_from(["1.5", "2", "7", "-9", "-8", None, "NA", ".", "x", "inf",
                                "-inf", "0"])
PROPERTY = settings(max_examples=40, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])


def write_csv(folder: str, header: list[str], rows: list[tuple]) -> str:
    path = os.path.join(folder, "panel.csv")
    with open(path, "w") as handle:
        handle.write(",".join(header) + "\n")
        for row in rows:
            handle.write(",".join("" if v is None else v for v in row) + "\n")
    return path


def classify(tokens: pd.Series, codes: set[float]) -> pd.Series:
    """Reference classification of value cells, written independently of paneldiag."""
    empty = tokens.isna() | tokens.isin(NULL_TOKENS)
    number = pd.to_numeric(tokens.where(~empty), errors="coerce")
    out = pd.Series("observed", index=tokens.index)
    out[empty] = "missing_value"
    out[~empty & number.isna()] = "non_numeric_value"
    out[np.isinf(number)] = "infinite_value"
    out[number.isin(list(codes))] = "declared_missing_code"
    return out


def blank(tokens: pd.Series) -> pd.Series:
    return tokens.isna() | (tokens.fillna("").str.strip() == "")


@PROPERTY
@given(rows=st.lists(st.tuples(ID_TOKENS, WAVE_TOKENS, VALUE_TOKENS), min_size=1, max_size=40),
       policy=st.sampled_from(["first", "last", "mean"]))
def test_long_ledger_balances(rows, policy):
    frame = pd.DataFrame(rows, columns=["unit", "wave", "y"], dtype=object)
    spec = LayoutSpec(id="unit", wave="wave", values=("y",), duplicates=policy,
                      bad_values="drop", missing_codes=MissingCodes.parse("-9,-8"))
    # reference computation with pandas
    id_missing = blank(frame["unit"])
    wave_missing = ~id_missing & blank(frame["wave"])
    valid = frame[~id_missing & ~wave_missing]
    kept = valid if policy == "mean" else valid.drop_duplicates(["unit", "wave"], keep=policy)
    outcome = classify(kept["y"], {-9.0, -8.0})
    expected = {"missing_id": int(id_missing.sum()), "missing_wave": int(wave_missing.sum()),
                "duplicate_unit_wave": len(valid) - len(kept)}
    for reason in ("non_numeric_value", "infinite_value", "declared_missing_code",
                   "missing_value"):
        expected[reason] = int((outcome == reason).sum())
    observed = kept[outcome == "observed"].assign(y=lambda f: f["y"].astype(float))
    n_units, n_waves = valid["unit"].nunique(), valid["wave"].nunique()
    # most rows alone at their wave: the units have their own times (io.waves)
    alone = (valid.groupby("wave")["wave"].transform("size") == 1).mean() > 0.5
    with tempfile.TemporaryDirectory() as folder:
        path = write_csv(folder, ["unit", "wave", "y"], rows)
        if n_units < 2 or n_waves < 2 or observed.empty or alone:
            with pytest.raises(InputProblem):
                build_panel(read_table(path, columns=spec.columns()), spec)
            return
        panel, ledgers = build_panel(read_table(path, columns=spec.columns()), spec)
    ledger = ledgers["y"]
    assert ledger.rows_read == len(rows)
    assert ledger.rows_read == ledger.rows_used + sum(ledger.dropped_by_reason.values())
    assert ledger.rows_used == len(observed)
    assert {k: v for k, v in ledger.dropped_by_reason.items() if v} == \
        {k: v for k, v in expected.items() if v}
    # and the panel holds the cell values pandas computes (mean of duplicates for 'mean')
    cells = observed.assign(wave=observed["wave"].astype(int)).groupby(["unit", "wave"])["y"]
    reference = cells.mean() if policy == "mean" else cells.first()
    got = pd.DataFrame(panel.values["y"], index=panel.unit_ids,
                       columns=[int(w) for w in panel.wave_labels]).stack().dropna()
    pd.testing.assert_series_equal(got.sort_index(), reference.sort_index(),
                                   check_names=False, check_dtype=False)


@PROPERTY
@given(rows=st.lists(st.tuples(ID_TOKENS, VALUE_TOKENS, VALUE_TOKENS, VALUE_TOKENS),
                     min_size=1, max_size=30),
       policy=st.sampled_from(["first", "last"]))
def test_wide_ledger_balances(rows, policy):
    columns = ["unit", "y1", "y2", "y3"]
    frame = pd.DataFrame(rows, columns=columns, dtype=object)
    spec = LayoutSpec(id="unit", wide=(("y", ("y1", "y2", "y3")),), duplicates=policy,
                      bad_values="drop", missing_codes=MissingCodes.parse("negative"))
    id_missing = blank(frame["unit"])
    kept = frame[~id_missing].drop_duplicates(["unit"], keep=policy)
    outcomes = pd.DataFrame({c: classify(kept[c], set()) for c in columns[1:]})
    numbers = pd.DataFrame({c: pd.to_numeric(kept[c].where(~kept[c].isin(NULL_TOKENS)),
                                             errors="coerce") for c in columns[1:]})
    negative = (numbers < 0) & np.isfinite(numbers)          # --missing-codes negative
    outcomes = outcomes.mask(negative & (outcomes == "observed"), "declared_missing_code")
    any_observed = (outcomes == "observed").any(axis=1)
    with tempfile.TemporaryDirectory() as folder:
        path = write_csv(folder, columns, rows)
        if kept["unit"].nunique() < 2 or not any_observed.any():
            with pytest.raises(InputProblem):
                build_panel(read_table(path, columns=spec.columns()), spec)
            return
        panel, ledgers = build_panel(read_table(path, columns=spec.columns()), spec)
    ledger = ledgers["y"]
    assert ledger.rows_read == len(rows) == ledger.rows_used + ledger.rows_dropped
    assert ledger.rows_used == int(any_observed.sum())
    expected = {"missing_id": int(id_missing.sum()),
                "duplicate_unit_wave": int((~id_missing).sum() - len(kept)),
                "no_observed_value": int((~any_observed).sum())}
    assert {k: v for k, v in ledger.dropped_by_reason.items() if v} == \
        {k: v for k, v in expected.items() if v}
    counts = outcomes.stack().value_counts()
    for reason in ("observed", "missing_value", "declared_missing_code", "non_numeric_value",
                   "infinite_value"):
        assert ledger.cells[reason] == counts.get(reason, 0), reason


def test_strict_mode_stops_at_the_first_bad_row(tmp_path):
    text = "unit,wave,y\nA,1,1\nA,2,x\nB,1,2\nB,2,inf\n"
    with pytest.raises(InputProblem) as info:
        panel_from_text(tmp_path, text)
    assert (info.value.row, info.value.column) == (3, "y")
    panel, ledgers = panel_from_text(tmp_path, text, bad_values="drop")
    assert ledgers["y"].dropped_by_reason == {
        **ledgers["y"].dropped_by_reason, "non_numeric_value": 1, "infinite_value": 1}


def test_missing_codes_counted_per_code_and_wave(tmp_path):
    text = "unit,wave,y\nA,1,-9\nA,2,3\nB,1,-8\nB,2,-9\nC,1,2\nC,2,99\n"
    panel, ledgers = panel_from_text(tmp_path, text,
                                     missing_codes=MissingCodes.parse("negative,99"))
    assert {k: v.tolist() for k, v in panel.codes["y"].items()} == \
        {"-8": [1, 0], "-9": [1, 1], "99": [0, 1]}
    assert ledgers["y"].dropped_by_reason["declared_missing_code"] == 4


def test_absent_column_is_an_input_problem(tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text(long_text(["1", "2"]))
    spec = LayoutSpec(id="unit", wave="wave", values=("rent",))
    with pytest.raises(InputProblem, match="'rent' not found"):
        build_panel(read_table(str(path)), spec)       # no column list given to the reader


# ------------------------------------------------------------------------ vectorised

def count_lines(function) -> int:
    """Python lines executed inside paneldiag/io and paneldiag/panel.py while it runs."""
    import paneldiag
    root = os.path.dirname(paneldiag.__file__)
    watched = (os.path.join(root, "io"), os.path.join(root, "panel.py"))
    count = 0

    def tracer(frame, event, arg):
        nonlocal count
        if not frame.f_code.co_filename.startswith(watched):
            return None
        if event == "line":
            count += 1
        return tracer

    sys.settrace(tracer)
    try:
        function()
    finally:
        sys.settrace(None)
    return count


def tenant_rows(n_units: int) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"unit": np.repeat(np.arange(n_units), 4),
                          "wave": np.tile([2015, 2016, 2017, 2019], n_units),
                          "y": rng.integers(-9, 6, 4 * n_units).astype(float),
                          "w": np.repeat(rng.uniform(0.5, 2, n_units), 4)})
    frame.loc[frame.index % 7 == 0, "y"] = np.nan
    return frame


@pytest.mark.parametrize("fmt", ["csv", "dta"])
def test_panel_construction_has_no_loop_over_rows(tmp_path, fmt):
    """The Python work of reading and building does not grow with the number of rows."""
    import pyreadstat

    def build(n_units):
        frame = tenant_rows(n_units)
        path = tmp_path / f"p{n_units}.{fmt}"
        if fmt == "csv":
            frame.to_csv(path, index=False)
        else:
            tagged = frame.astype({"y": object})
            tagged.loc[tagged.index % 11 == 0, "y"] = "a"
            pyreadstat.write_dta(tagged, str(path), missing_user_values={"y": ["a"]})
        spec = LayoutSpec(id="unit", wave="wave", values=("y",), weight="w",
                          missing_codes=MissingCodes.parse("-9,-8"), duplicates="mean")
        return lambda: build_panel(read_table(str(path), columns=spec.columns()), spec)

    small, large = count_lines(build(50)), count_lines(build(2000))
    assert large <= small + 20, (small, large)


def test_padded_ids_and_wave_labels_are_trimmed(tmp_path):
    # fixed-width exports pad text: ' W1' and 'W1 ' are the wave W1, ' B' is the unit B
    text = "unit,wave,y\nA,W1,1\nA,W2,2\n B,W1 ,3\nB , W2,4\n"
    panel, _ = panel_from_text(tmp_path, text)
    assert panel.wave_labels == ("W1", "W2")
    assert panel.unit_ids.tolist() == ["A", "B"]
    np.testing.assert_array_equal(panel.values["y"], [[1, 2], [3, 4]])
    with pytest.raises(InputProblem, match="A at wave W1"):
        panel_from_text(tmp_path, text + " A,W1,5\n")


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-10**12, 10**12), min_size=1, max_size=200), st.booleans())
def test_integer_codes_equal_pandas_factorize(values, presorted):
    # reference: pandas.factorize(sort=True), on sorted columns (the counting path) and
    # on unsorted ones (the direct-addressing path, or None for a too-wide range)
    from paneldiag.io.validate import _dense_integer_codes
    column = pd.Series(sorted(values) if presorted else values, dtype=np.int64)
    got = _dense_integer_codes(column)
    codes, uniques = pd.factorize(column, sort=True)
    if got is None:
        assert not presorted and max(values) - min(values) + 1 > 4 * len(values) + 1024
        return
    assert np.array_equal(got[0], codes) and np.array_equal(got[1], np.asarray(uniques))


# ------------------------------------------------------------------------ composite ids

SITES = ("site,person,wave,y\n"
         "B,2,1,1\nB,2,2,2\nA,10,1,3\nA,10,2,4\nA,2,1,5\nA,2,2,6\nB,10,1,7\nB,10,2,8\n"
         "A,3,1,9\nA,3,2,10\n")


def test_an_id_of_two_columns(tmp_path):
    panel, ledgers = panel_from_text(tmp_path, SITES, id=("site", "person"))
    # ordered by site, then by person as a number (2 before 10), shown joined by '/'
    assert panel.unit_ids.tolist() == ["A/2", "A/3", "A/10", "B/2", "B/10"]
    np.testing.assert_array_equal(panel.values["y"], [[5, 6], [9, 10], [3, 4], [1, 2], [7, 8]])
    assert ledgers["y"].units == 5 and ledgers["y"].balances()


def test_a_missing_part_of_the_id_is_a_missing_id(tmp_path):
    text = SITES.replace("A,3,2,10", ",3,2,10")
    with pytest.raises(InputProblem, match="missing unit id") as info:
        panel_from_text(tmp_path, text, id=("site", "person"))
    assert (info.value.row, info.value.column) == (11, "site")
    _, ledgers = panel_from_text(tmp_path, text, id=("site", "person"), bad_values="drop")
    assert ledgers["y"].dropped_by_reason["missing_id"] == 1


def test_ids_unique_only_within_a_site_are_named(tmp_path):
    with pytest.raises(InputProblem) as info:
        panel_from_text(tmp_path, SITES, id="person")
    message = info.value.what
    assert "the repeated ids differ in 'site'" in message
    assert "give both, --id site --id person" in message
    assert "--duplicates" not in message            # merging different people is no remedy
    assert info.value.column == "person" and info.value.row == 2


def test_a_column_that_varies_within_units_is_not_offered(tmp_path):
    # the interviewer differs between the repeated rows but also within person 3's waves
    text = ("person,interviewer,wave,y\n"
            "1,K,1,1\n1,L,1,2\n2,K,1,3\n2,K,2,4\n3,K,1,5\n3,M,2,6\n4,K,1,7\n4,K,2,8\n"
            "5,L,1,9\n5,L,2,10\n")
    with pytest.raises(InputProblem, match="choose --duplicates first, last or mean") as info:
        panel_from_text(tmp_path, text, id="person")
    assert "interviewer" not in info.value.what


def test_standard_input_gets_no_site_hint(monkeypatch):
    # standard input cannot be read a second time for the file's other columns
    import io
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(SITES.encode())))
    spec = LayoutSpec(id="person", wave="wave", values=("y",))
    raw = read_table("-", "csv", columns=spec.columns())
    assert raw.all_columns is None
    with pytest.raises(InputProblem, match="choose --duplicates first, last or mean"):
        build_panel(raw, spec)
