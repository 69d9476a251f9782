"""Readers: every supported format round-trips through read_table and build_panel.

Each file is written in the test by the reference writer of its format (pandas for
CSV/TSV/gzip, pyarrow for Parquet, pyreadstat for Stata, SPSS and SAS transport), and the
Panel built from it is compared with a pandas pivot of the frame that was written.
"""

from __future__ import annotations

import gzip
import hashlib
import io
import sys

import numpy as np
import pandas as pd
import pyreadstat
import pytest

from paneldiag.errors import InputProblem
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, MissingCodes, build_panel
from conftest import FIXTURES

SPEC = LayoutSpec(id="unit", wave="wave", values=("score",))


def tenant_frame() -> pd.DataFrame:
    """A small invented Ostervale panel: 5 households x 3 waves, two values missing."""
    rng = np.random.default_rng(7)
    frame = pd.DataFrame({
        "unit": np.repeat([f"H{i:03d}" for i in range(1, 6)], 3),
        "wave": np.tile([2015, 2016, 2018], 5),
        "score": np.round(rng.normal(5.0, 1.5, 15), 3),
    })
    frame.loc[[4, 11], "score"] = np.nan
    return frame


def expected_matrix(frame: pd.DataFrame) -> np.ndarray:
    # reference: pandas pivot of the written frame (units sorted, waves sorted)
    return frame.pivot(index="unit", columns="wave", values="score").to_numpy(dtype=float)


def check_round_trip(path, fmt=None, frame=None):
    frame = tenant_frame() if frame is None else frame
    raw = read_table(str(path), fmt, columns=SPEC.columns())
    panel, ledgers = build_panel(raw, SPEC)
    np.testing.assert_array_equal(panel.values["score"], expected_matrix(frame))
    assert list(panel.unit_ids) == sorted(frame["unit"].unique())
    assert panel.wave_labels == ("2015", "2016", "2018")
    np.testing.assert_array_equal(panel.wave_times, [2015.0, 2016.0, 2018.0])
    ledger = ledgers["score"]
    assert ledger.rows_read == 15 and ledger.rows_used == 13
    assert ledger.dropped_by_reason["missing_value"] == 2
    with open(path, "rb") as handle:
        assert raw.sha256 == hashlib.sha256(handle.read()).hexdigest()
    return raw, panel


def test_csv(tmp_path):
    path = tmp_path / "panel.csv"
    tenant_frame().to_csv(path, index=False)
    raw, _ = check_round_trip(path)
    assert raw.format == "csv" and raw.first_row_number == 2


def test_tsv(tmp_path):
    path = tmp_path / "panel.tsv"
    tenant_frame().to_csv(path, index=False, sep="\t")
    assert check_round_trip(path)[0].format == "tsv"


def test_csv_gzip(tmp_path):
    path = tmp_path / "panel.csv.gz"
    tenant_frame().to_csv(path, index=False, compression="gzip")
    with open(path, "rb") as handle:
        assert handle.read(2) == b"\x1f\x8b"
    assert check_round_trip(path)[0].format == "csv"


def test_parquet(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = tmp_path / "panel.parquet"
    pq.write_table(pa.Table.from_pandas(tenant_frame(), preserve_index=False), path)
    raw, _ = check_round_trip(path)
    assert raw.format == "parquet" and raw.first_row_number == 1


def test_stata_with_tagged_missing(tmp_path):
    frame = tenant_frame().astype({"score": object})
    frame.loc[[1, 7], "score"] = "a"   # Stata's tagged missing .a (e.g. refused)
    frame.loc[[13], "score"] = "b"     # and .b (e.g. moved away)
    path = tmp_path / "panel.dta"
    pyreadstat.write_dta(frame, str(path), missing_user_values={"score": ["a", "b"]})
    raw = read_table(str(path), columns=SPEC.columns())
    panel, ledgers = build_panel(raw, SPEC)
    expected = tenant_frame()
    expected.loc[[1, 7, 13], "score"] = np.nan
    np.testing.assert_array_equal(panel.values["score"], expected_matrix(expected))
    # rows 1 and 7 are waves 2016 (index 1); row 13 is wave 2016 of unit 5
    assert {k: v.tolist() for k, v in panel.codes["score"].items()} == \
        {".a": [0, 2, 0], ".b": [0, 1, 0]}
    reasons = ledgers["score"].dropped_by_reason
    assert reasons["declared_missing_code"] == 3 and reasons["missing_value"] == 2
    assert ledgers["score"].rows_used == 10


def test_stata_plain(tmp_path):
    path = tmp_path / "panel.dta"
    pyreadstat.write_dta(tenant_frame(), str(path))
    assert check_round_trip(path)[0].format == "dta"


def test_spss_user_missing_and_labels(tmp_path):
    frame = tenant_frame()
    frame.loc[[0, 3], "score"] = -9      # discrete user-missing value
    frame.loc[[5], "score"] = -7.5       # inside the declared range -8..-7
    frame.loc[[6], "score"] = -1         # negative but not declared: stays a value
    path = tmp_path / "panel.sav"
    pyreadstat.write_sav(frame, str(path),
                         missing_ranges={"score": [-9, {"lo": -8, "hi": -7}]},
                         variable_value_labels={"score": {-9: "refused", -1: "rounded down"}})
    raw = read_table(str(path), columns=SPEC.columns())
    panel, ledgers = build_panel(raw, SPEC)
    expected = frame.copy()
    expected.loc[[0, 3, 5], "score"] = np.nan
    np.testing.assert_array_equal(panel.values["score"], expected_matrix(expected))
    codes = {k: v.tolist() for k, v in panel.codes["score"].items()}
    assert codes == {"-9": [2, 0, 0], "-7.5": [0, 0, 1]}
    assert panel.code_labels["score"] == {"-9": "refused"}
    assert ledgers["score"].dropped_by_reason["declared_missing_code"] == 3


def test_sas_transport(tmp_path):
    path = tmp_path / "panel.xpt"
    pyreadstat.write_xport(tenant_frame(), str(path))
    raw, _ = check_round_trip(path)
    assert raw.format == "xpt"


def test_sas7bdat_fixture():
    # fixtures/tenants.sas7bdat: 4 invented households x 3 years, written by the ReadStat
    # 1.1.8 command-line converter (Debian package readstat) from a .dta file made by
    # pyreadstat.write_dta; pyreadstat cannot write .sas7bdat itself. Expected values are
    # the ones that were written (see fixtures/README.md).
    path = FIXTURES / "tenants.sas7bdat"
    spec = LayoutSpec(id="household", wave="year", values=("trust",))
    raw = read_table(str(path), columns=spec.columns())
    panel, ledgers = build_panel(raw, spec)
    assert raw.format == "sas7bdat"
    assert list(panel.unit_ids) == ["H00001", "H00002", "H00003", "H00004"]
    assert panel.wave_labels == ("2015", "2016", "2017")
    np.testing.assert_array_equal(panel.values["trust"],
                                  [[3, 4, np.nan], [2, 2, 3], [5, 4, 4], [1, np.nan, 2]])
    assert ledgers["trust"].dropped_by_reason["missing_value"] == 2


def test_numeric_ids_stay_integers(tmp_path):
    # Stata, SAS and a CSV id column with a gap all come back as floats; the ids must
    # still read 1, 2, ... (not 1.0) in the panel and in messages.
    frame = tenant_frame()
    frame["unit"] = np.repeat([101, 102, 103, 104, 105], 3)
    path = tmp_path / "panel.xpt"
    pyreadstat.write_xport(frame, str(path))
    raw = read_table(str(path), columns=SPEC.columns())
    panel, _ = build_panel(raw, SPEC)
    assert panel.unit_ids.dtype.kind == "i"
    assert panel.unit_ids.tolist() == [101, 102, 103, 104, 105]


def test_format_override(tmp_path):
    path = tmp_path / "panel.data"          # an extension that says nothing
    tenant_frame().to_csv(path, index=False, sep="\t")
    with pytest.raises(InputProblem, match="unknown file type"):
        read_table(str(path))
    assert check_round_trip(path, fmt="tsv")[0].format == "tsv"


def test_utf8_byte_order_mark(tmp_path):
    path = tmp_path / "panel.csv"
    path.write_bytes(b"\xef\xbb\xbf" + tenant_frame().to_csv(index=False).encode())
    raw, _ = check_round_trip(path)
    assert list(raw.frame.columns) == ["unit", "wave", "score"]


def test_standard_input(monkeypatch):
    text = tenant_frame().to_csv(index=False).encode()
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(text)))
    raw = read_table("-", columns=SPEC.columns())
    panel, _ = build_panel(raw, SPEC)
    np.testing.assert_array_equal(panel.values["score"], expected_matrix(tenant_frame()))
    assert raw.sha256 == hashlib.sha256(text).hexdigest() and raw.source == "-"


def test_standard_input_gzip(monkeypatch):
    text = gzip.compress(tenant_frame().to_csv(index=False).encode())
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(text)))
    raw = read_table("-", columns=SPEC.columns())
    assert len(raw.frame) == 15


def test_only_named_columns_read(tmp_path):
    frame = tenant_frame().assign(note=["free text, with comma"] * 15)
    path = tmp_path / "panel.csv"
    frame.to_csv(path, index=False)
    raw = read_table(str(path), columns=SPEC.columns())
    assert list(raw.frame.columns) == ["unit", "wave", "score"]


def test_null_tokens_are_missing(tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text("unit,wave,score\nA,1,NA\nA,2,.\nB,1,\nB,2,4\n")
    panel, ledgers = build_panel(read_table(str(path)), SPEC)
    assert ledgers["score"].dropped_by_reason["missing_value"] == 3
    assert np.isnan(panel.values["score"]).sum() == 3


def test_missing_codes_through_reader(tmp_path):
    frame = tenant_frame()
    frame.loc[[2, 8], "score"] = -8
    path = tmp_path / "panel.parquet"
    frame.to_parquet(path, index=False)
    spec = LayoutSpec(id="unit", wave="wave", values=("score",),
                      missing_codes=MissingCodes.parse("-9,-8"))
    panel, ledgers = build_panel(read_table(str(path)), spec)
    assert {k: v.tolist() for k, v in panel.codes["score"].items()} == {"-8": [0, 0, 2]}
    assert ledgers["score"].dropped_by_reason["declared_missing_code"] == 2


def test_stata_letter_strings_are_not_tagged_missing(tmp_path):
    # a text column whose values are single letters (district codes) stays text; only
    # numeric Stata variables carry tagged missing values (pyreadstat variable types)
    frame = tenant_frame().assign(district=np.repeat(list("ABCAB"), 3)).astype({"score": object})
    frame.loc[[1], "score"] = "a"
    path = tmp_path / "panel.dta"
    pyreadstat.write_dta(frame, str(path), missing_user_values={"score": ["a"]})
    spec = LayoutSpec(id="unit", wave="wave", values=("score",), group="district")
    panel, _ = build_panel(read_table(str(path), columns=spec.columns()), spec)
    assert panel.groups.tolist() == ["A", "B", "C", "A", "B"]
    assert {k: v.tolist() for k, v in panel.codes["score"].items()} == {".a": [0, 1, 0]}


def test_standard_input_parquet_with_format(monkeypatch):
    buffer = io.BytesIO()
    tenant_frame().to_parquet(buffer, index=False)
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(buffer.getvalue())))
    raw = read_table("-", "parquet", columns=SPEC.columns())
    panel, _ = build_panel(raw, SPEC)
    np.testing.assert_array_equal(panel.values["score"], expected_matrix(tenant_frame()))


def test_date_waves_from_stata(tmp_path):
    frame = pd.DataFrame({"unit": np.repeat(["H1", "H2"], 2),
                          "wave": pd.to_datetime(["2020-01-01", "2020-07-02"] * 2),
                          "score": [1.0, 2.0, 3.0, 4.0]})
    path = tmp_path / "panel.dta"
    pyreadstat.write_dta(frame, str(path))
    panel, _ = build_panel(read_table(str(path), columns=SPEC.columns()), SPEC)
    assert panel.wave_labels == ("2020-01-01", "2020-07-02")
    # 2020 is a leap year: 2 July 2020 is 183 days after 1 January (pandas day_of_year - 1)
    np.testing.assert_array_equal(panel.wave_times, [0, 183])
    assert panel.time_unit == "day"


def test_blank_lines_and_quoted_breaks_keep_line_numbers(tmp_path):
    path = tmp_path / "panel.csv"
    path.write_text('unit,wave,score\nA,1,1\n\nA,2,2\n"B",1,"3\n"\nB,2,bad\n')
    with pytest.raises(InputProblem) as info:
        build_panel(read_table(str(path), columns=SPEC.columns()), SPEC)
    assert (info.value.row, info.value.column) == (7, "score")


def test_spss_wide_user_missing_per_wave_column(tmp_path):
    frame = pd.DataFrame({"hh": ["H1", "H2", "H3"], "t1": [1.0, -9, 3], "t2": [-8, 2.0, 4],
                          "t3": [5.0, 6, -9]})
    path = tmp_path / "wide.sav"
    waves = ["t1", "t2", "t3"]
    pyreadstat.write_sav(frame, str(path), missing_ranges={c: [-9, -8] for c in waves},
                         variable_value_labels={c: {-9: "refused", -8: "don't know"}
                                                for c in waves})
    spec = LayoutSpec(id="hh", wide=(("trust", tuple(waves)),))
    panel, ledgers = build_panel(read_table(str(path), columns=spec.columns()), spec)
    np.testing.assert_array_equal(panel.values["trust"],
                                  [[1, np.nan, 5], [np.nan, 2, 6], [3, 4, np.nan]])
    assert {k: v.tolist() for k, v in panel.codes["trust"].items()} == \
        {"-8": [0, 1, 0], "-9": [1, 0, 1]}
    assert panel.code_labels["trust"] == {"-9": "refused", "-8": "don't know"}
    assert ledgers["trust"].cells["declared_missing_code"] == 3


# ----------------------------------------------------------------------------- column not found

def test_column_not_found_offers_near_matches_and_the_whole_header(tmp_path):
    header = ["NR", "YEAR"] + [f"ITEM_{i:02d}" for i in range(30)] + ["Satisfaction"]
    path = tmp_path / "wide_header.csv"
    path.write_text(",".join(header) + "\n" + ",".join("1" * len(header)) + "\n")
    for asked, offered in (("nr", "'NR'"), ("satisfacton", "'Satisfaction'"),
                           ("ITEM_7", "'ITEM_07'")):
        with pytest.raises(InputProblem) as info:
            read_table(str(path), columns=[asked, "YEAR"])
        # near matches: the same name in another case first, then difflib close matches
        # (difflib.get_close_matches, cutoff 0.6; ITEM_27 and ITEM_17 tie with ITEM_07)
        assert f"column '{asked}' not found (did you mean " in info.value.what
        assert offered in info.value.what.split("?")[0]
        assert info.value.listing == ("header", tuple(header))   # every column, none cut
        assert "listed below" in info.value.what and info.value.row == 1
    with pytest.raises(InputProblem) as info:
        read_table(str(path), columns=["tenure"])
    assert "did you mean" not in info.value.what


def test_a_short_header_stays_on_the_line(tmp_path):
    path = tmp_path / "short.csv"
    path.write_text("Household,year,trust\nH1,2015,3\n")
    with pytest.raises(InputProblem) as info:
        read_table(str(path), columns=["household"])
    assert info.value.what == ("column 'household' not found (did you mean 'Household'?); "
                               "the header has: Household, year, trust")
    assert info.value.listing is None


def test_the_listing_wraps_between_names():
    from paneldiag.cli import wrap_items
    names = [f"COLUMN_{i:02d}" for i in range(20)] + ["A_NAME_LONGER_THAN_THE_LINE" * 3]
    lines = wrap_items("header:", names, 40)
    assert all(len(line) <= 40 for line in lines[:-1])
    assert lines[-1].strip() == names[-1]            # too long for a line: a line of its own
    items = " ".join(line.strip() for line in lines).removeprefix("header: ").split(", ")
    assert items == names                            # every name, in order, none broken
