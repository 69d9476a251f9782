"""Fuzzing: generated files and panels through the reader, the validator, the whole
screen and the command line. Whatever comes in, the result is a report or one clean
``InputProblem`` (exit status 2 and one line on stderr at the command line), never
another exception, and every input row is accounted for in the ledger.

A property of the program itself (no outside reference is involved). The runs are
derandomised, so CI sees the same cases every time; PANELDIAG_FUZZ_SCALE=20 (or any
factor) multiplies the number of cases for a longer run (DEVELOPERS.md).
"""

from __future__ import annotations

import csv
import gzip
import io
import os
import string

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st

from conftest import run_cli
from test_bad_input import run_forked

from paneldiag.errors import InputProblem
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, build_panel
from paneldiag.request import ScreenRequest, run_screen

SCALE = float(os.environ.get("PANELDIAG_FUZZ_SCALE", "1"))


def fuzz_settings(examples: int, shrink: bool = True):
    """``shrink=False`` for cases that each run a whole screen: a failure is reported as
    found, since shrinking it would take many minutes."""
    phases = list(Phase) if shrink else [Phase.explicit, Phase.reuse, Phase.generate]
    return settings(max_examples=max(1, int(examples * SCALE)), deadline=None,
                    derandomize=True, database=None, print_blob=True,
                    suppress_health_check=list(HealthCheck), phases=phases)


def check_problem(problem: InputProblem) -> None:
    """A user-facing problem is one line that says what went wrong."""
    text = str(problem)
    assert text.strip() and "\n" not in text and "\r" not in text, repr(text)
    assert "Traceback" not in text


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


# ---------------------------------------------------------------------------------------
# Files: bytes and structures through the reader and the validator

NAMES = ["id", "wave", "y", "w1", "w2", "w3", "household", "", " id", "ID", "y ", "x;y",
         'a"b', "Trust", "é", "\u00a0", "1", "id.1"]
DELIMITERS = [",", ";", "\t", "|", " ", ":"]
TOKENS = ["", "NA", ".", "N/A", "null", "nan", "inf", "-inf", "Infinity", "1e400", "-0",
          "0x1F", "1,5", "1.5.2", "TRUE", "2021-03-04", "04/03/2021", "  7 ", "+3", "1_000",
          "\u2212" + "2", "１２", "abc", '"', '""', "'", "\\", "\n", "\r\n", "a\nb", "\x00",
          "\ufeff", "😀", "1e-320", "1e150", "1e151", "9" * 40]

cells = st.one_of(
    st.sampled_from(TOKENS),
    st.integers(-10**20, 10**20).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(1, 12).map(str),                     # plausible wave labels and scores
    st.text(string.printable, max_size=6),
    st.text(max_size=4),                             # any unicode
)


@st.composite
def text_tables(draw):
    """A delimited text file: header, rows (ragged or not), quoting, encoding, line ends."""
    header = draw(st.lists(st.sampled_from(NAMES), min_size=0, max_size=6))
    if draw(st.booleans()):   # usually the columns a long screen asks for
        header = ["id", "wave", "y"] + header[:2]
    sep = draw(st.sampled_from(DELIMITERS))
    width = len(header)
    ragged = draw(st.integers(0, 9)) == 0
    n_rows = draw(st.integers(0, 25))
    rows = []
    for _ in range(n_rows):
        size = draw(st.integers(0, width + 2)) if ragged else width
        rows.append([draw(cells) for _ in range(size)])
    quoting = draw(st.sampled_from([csv.QUOTE_MINIMAL, csv.QUOTE_ALL, csv.QUOTE_NONNUMERIC,
                                    None]))
    ending = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    if quoting is None:   # joined by hand: stray quotes and delimiters stay as they are
        text = ending.join(sep.join(r) for r in [header, *rows]) + ending
    else:
        out = io.StringIO()
        writer = csv.writer(out, delimiter=sep, quoting=quoting, lineterminator=ending)
        for record in [header, *rows]:
            writer.writerow(record)
        text = out.getvalue()
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-8-sig", "latin-1", "cp1252",
                                     "utf-16"]))
    data = text.encode(encoding, errors="replace")
    if draw(st.integers(0, 5)) == 0:   # cut anywhere: a truncated file
        data = data[:draw(st.integers(0, len(data)))]
    return data, sep


def _read_and_build(path, spec: LayoutSpec, delimiter=None, fmt=None):
    """Read and validate; returns the ledgers, or None after a clean problem."""
    try:
        raw = read_table(str(path), fmt, columns=spec.columns(), delimiter=delimiter)
        panel, ledgers = build_panel(raw, spec)
    except InputProblem as problem:
        check_problem(problem)
        return None
    for ledger in ledgers.values():
        assert ledger.balances(), ledger        # every input row is accounted for
        assert ledger.rows_read == len(raw.frame)
    assert panel.n_units >= 2 and panel.n_waves >= 2
    return ledgers


LONG = LayoutSpec(id="id", wave="wave", values=("y",))
LONG_LENIENT = LayoutSpec(id="id", wave="wave", values=("y",), bad_values="drop",
                          duplicates="mean")
WIDE = LayoutSpec(id="id", wide=(("y", ("w1", "w2", "w3")),))


@fuzz_settings(1100)
@given(table=text_tables(), gz=st.integers(0, 7), tell=st.booleans(),
       spec=st.sampled_from([LONG, LONG_LENIENT, WIDE]))
@example(table=(b"id,wave,y\n1,1,1e400\n1,2,2\n2,1,3\n2,2,4\n", ","), gz=1, tell=True,
         spec=LONG_LENIENT)
@example(table=(b'\r""\r', ","), gz=1, tell=False, spec=LONG)   # found: lone \r line ends
# found: a quoted line break inside a wave label split the one-line message
@example(table=(b'id,wave,y,id,id\r\n,,,,\r\n,,,,\r\ninf,"0\r0",,,\r\n,,,,\r\ninf,  7 ,,,\r\n', ","),
         gz=0, tell=False, spec=LONG_LENIENT)
def test_text_files_read_or_refuse_cleanly(folder, table, gz, tell, spec):
    data, sep = table
    path = folder / ("table.csv.gz" if gz == 0 else "table.csv")
    path.write_bytes(gzip.compress(data) if gz == 0 else data)
    _read_and_build(path, spec, delimiter=sep if tell else None)


@fuzz_settings(400)
@given(data=st.binary(max_size=3000),
       suffix=st.sampled_from([".csv", ".tsv", ".csv.gz", ".parquet", ".dta", ".sav",
                               ".sas7bdat", ".xpt"]),
       prefix=st.sampled_from([b"", b"\x1f\x8b", b"PAR1", b"\xef\xbb\xbfid,wave,y\n",
                               b"\xff\xfe", b"$FL2", b"HEADER RECORD*******LIBRARY"]))
@example(data=b"", suffix=".csv.gz", prefix=b"\xef\xbb\xbfid,wave,y\n")  # found: plain .gz
@example(data=b"\x80", suffix=".csv", prefix=b"\xef\xbb\xbfid,wave,y\n")  # found: bad last byte
def test_binary_junk_is_refused_cleanly(folder, data, suffix, prefix):
    path = folder / f"junk{suffix}"
    path.write_bytes(prefix + data)
    _read_and_build(path, LONG)


@pytest.mark.parametrize("name,pack", [("plain.csv.gz", False), ("packed.csv", True),
                                       ("mac.csv", False)])
def test_compression_is_read_from_the_content_not_the_name(folder, name, pack):
    """Found by fuzzing: plain text named '.gz' stopped the parser with an OSError, and a
    header ending in a lone carriage return (old Mac line ends) stopped the header check."""
    text = "id,wave,y\n" + "".join(f"h{u},{w},{u + w}\n" for u in range(3) for w in (1, 2))
    if name == "mac.csv":
        text = text.replace("\n", "\r")
    data = text.encode()
    path = folder / name
    path.write_bytes(gzip.compress(data) if pack else data)
    raw = read_table(str(path), None, columns=["id", "wave", "y"])
    panel, ledgers = build_panel(raw, LONG)
    assert (panel.n_units, panel.n_waves, ledgers["y"].rows_used) == (3, 2, 6)


def test_empty_and_blank_files_are_refused(folder):
    for name, data in [("empty.csv", b""), ("blank.csv", b"\n\n  \n"), ("empty.parquet", b""),
                       ("empty.dta", b""), ("empty.csv.gz", gzip.compress(b""))]:
        path = folder / name
        path.write_bytes(data)
        with pytest.raises(InputProblem) as caught:
            read_table(str(path), None, columns=["id", "wave", "y"])
        check_problem(caught.value)


# ---------------------------------------------------------------------------------------
# Panels: generated values through the validator and the whole screen

@st.composite
def panels(draw, max_units: int = 300, max_waves: int = 15):
    """A wide panel as a DataFrame: random missingness (scattered, dropout, whole waves or
    units), ties, constant waves and magnitudes up to the validator's limits."""
    bands = [(1, 12), (13, 60), (61, 300)]   # mostly small panels, some up to 300 units
    n = draw(st.one_of(*[st.integers(lo, min(hi, max_units)) for lo, hi in bands
                         if lo <= max_units]))
    t = draw(st.integers(2, max_waves))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    kind = draw(st.sampled_from(["normal", "ordinal", "ties", "skewed", "trait"]))
    if kind == "normal":
        x = rng.normal(size=(n, t))
    elif kind == "ordinal":
        x = rng.integers(1, draw(st.integers(2, 7)) + 1, size=(n, t)).astype(float)
    elif kind == "ties":
        x = rng.choice([0.0, 1.0, 2.5], size=(n, t))
    elif kind == "skewed":
        x = rng.lognormal(0, 2, size=(n, t))
    else:   # a stable trait with occasion noise and a trend
        x = rng.normal(size=(n, 1)) + 0.5 * rng.normal(size=(n, t)) + 0.3 * np.arange(t)
    scale = draw(st.sampled_from([1.0, 1.0, 1e-140, 1e-8, 1e8, 1e140]))
    offset = draw(st.sampled_from([0.0, 0.0, 1e6, -1e12]))
    x = x * scale + (offset if abs(offset) * 10 < 1e150 else 0.0)
    for _ in range(draw(st.integers(0, 2))):   # constant waves
        x[:, draw(st.integers(0, t - 1))] = draw(st.sampled_from([0.0, 3.0, -1e10]))
    missing = draw(st.sampled_from(["none", "scattered", "dropout", "heavy", "wave", "unit"]))
    if missing == "scattered":
        x[rng.random((n, t)) < draw(st.floats(0.0, 0.6))] = np.nan
    elif missing == "dropout":
        last = rng.integers(1, t + 1, size=n)
        x[np.arange(t)[None, :] >= last[:, None]] = np.nan
    elif missing == "heavy":
        x[rng.random((n, t)) < 0.95] = np.nan
    elif missing == "wave":
        x[:, draw(st.integers(0, t - 1))] = np.nan
    elif missing == "unit":
        x[draw(st.integers(0, n - 1))] = np.nan
    frame = pd.DataFrame(x, columns=[f"w{i + 1}" for i in range(t)])
    ids = draw(st.sampled_from(["int", "text", "shuffled"]))
    frame.insert(0, "id", {"int": np.arange(n), "text": [f"h{i:04d}" for i in range(n)],
                           "shuffled": rng.permutation(n) * 7 + 3}[ids])
    return frame


def as_long(frame: pd.DataFrame) -> pd.DataFrame:
    return (frame.melt(id_vars="id", var_name="wave", value_name="y")
            .assign(wave=lambda f: f["wave"].str[1:].astype(int)))


def screen_frame(frame: pd.DataFrame, layout: str, **options):
    """The report of a screen of ``frame`` (wide, or melted to long), or None after a
    clean problem."""
    waves = [c for c in frame.columns if c != "id"]
    if layout == "long":
        data, request = as_long(frame), ScreenRequest(id=("id",), wave="wave", value=("y",),
                                                      **options)
    else:
        data = frame
        request = ScreenRequest(id=("id",), wide=(f"y={','.join(waves)}",), **options)
    try:
        report, panel = run_screen(data, request)
    except InputProblem as problem:
        check_problem(problem)
        return None
    ledger = report["ledger"]
    assert ledger["rows_read"] == ledger["rows_used"] + ledger["rows_dropped"]
    assert ledger["rows_read"] == len(data)
    return report, panel


def render_everything(report: dict, panel, folder=None) -> None:
    from paneldiag.render.json import report_json
    from paneldiag.render.terminal import render_terminal
    report_json(report)            # refuses NaN and infinities (allow_nan=False)
    render_terminal(report, color=False, details=True)
    if folder is not None:
        from paneldiag.render.appendix import write_report
        write_report(report, str(folder), [], panel, 0, 1)


@fuzz_settings(450)
@given(frame=panels(max_units=60, max_waves=15), layout=st.sampled_from(["long", "wide"]))
def test_panels_validate_cleanly(frame, layout):
    """Every generated panel is either accepted with a balanced ledger or refused."""
    waves = [c for c in frame.columns if c != "id"]
    if layout == "long":
        data, spec = as_long(frame), LONG
    else:
        data, spec = frame, LayoutSpec(id="id", wide=(("y", tuple(waves)),))
    from paneldiag.request import frame_table
    try:
        panel, ledgers = build_panel(frame_table(data, spec.columns()), spec)
    except InputProblem as problem:
        check_problem(problem)
        return
    assert ledgers["y"].balances()
    assert panel.values["y"].shape == (panel.n_units, panel.n_waves)


@fuzz_settings(40, shrink=False)
@given(frame=panels(max_units=40, max_waves=8), layout=st.sampled_from(["long", "wide"]))
def test_audits_of_generated_panels(frame, layout):
    done = screen_frame(frame, layout, audit_only=True)
    if done:
        render_everything(*done)


@fuzz_settings(30, shrink=False)
@given(frame=panels(), layout=st.sampled_from(["long", "wide"]))
def test_full_screens_of_generated_panels(frame, layout):
    done = screen_frame(frame, layout)
    if done:
        render_everything(*done)


@fuzz_settings(4, shrink=False)
@given(frame=panels(max_units=80, max_waves=6))
# found: one unit observed, so no wave has a standard deviation for the appendix's prose
@example(frame=pd.DataFrame({"id": range(10), "w1": [np.nan] * 3 + [1.304] + [np.nan] * 6,
                             "w2": [np.nan] * 3 + [0.947] + [np.nan] * 6}))
def test_appendix_of_generated_panels(folder, frame):
    done = screen_frame(frame, "wide")
    if done:
        render_everything(*done, folder=folder / "appendix")


# ---------------------------------------------------------------------------------------
# The command line: exit status 0 or 2, one line, nothing written on a refusal

def _check_command(outcome, written: list[str]) -> None:
    stderr = outcome.stderr.decode("utf-8", "replace")
    assert outcome.returncode in (0, 2), stderr
    assert "Traceback" not in stderr
    if outcome.returncode == 2:
        lines = stderr.splitlines()
        assert lines and lines[0].startswith("paneldiag: error: "), stderr
        assert len(lines) == 1 or "listed below" in lines[0], stderr
        assert written == [], written
    else:
        assert written == ["report.json"]


@fuzz_settings(12, shrink=False)
@given(frame=panels(max_units=50, max_waves=6), table=text_tables(),
       which=st.sampled_from(["panel", "panel", "text"]))
# found: a measure in hundreds of millions put the polish's scaled bounds at infinity
@example(frame=pd.DataFrame({"id": [f"h{i:04d}" for i in range(23)],
                             "w1": [0.0, 0.0, 250000000.0, 0.0, 100000000.0, 250000000.0, 100000000.0, 100000000.0, 0.0, 250000000.0, 250000000.0, 250000000.0, 250000000.0, 100000000.0, 250000000.0, 100000000.0, 0.0, 0.0, 250000000.0, 100000000.0, 250000000.0, 0.0, 100000000.0],
                             "w2": [100000000.0, 0.0, 0.0, 100000000.0, np.nan, 100000000.0, np.nan, np.nan, 100000000.0, 250000000.0, 250000000.0, 100000000.0, np.nan, np.nan, 0.0, np.nan, 100000000.0, 0.0, np.nan, 250000000.0, 250000000.0, 100000000.0, 250000000.0],
                             "w3": [np.nan, 0.0, 0.0, 0.0, np.nan, 0.0, np.nan, np.nan, 0.0, 0.0, 0.0, np.nan, np.nan, np.nan, 0.0, np.nan, 0.0, np.nan, np.nan, np.nan, 0.0, np.nan, 0.0],
                             "w4": [np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, 3.0, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan]}),
         table=(b"", ","), which="panel")
def test_command_line_forked(tmp_path_factory, frame, table, which):
    """The command's main in forked children (cheap), on generated panels and files."""
    out = tmp_path_factory.mktemp("cli")
    source = out / "input.csv"
    if which == "panel":
        as_long(frame).to_csv(source, index=False)
        sep = ","
    else:
        data, sep = table
        source.write_bytes(data)
    outcome = run_forked(["screen", source, "--id", "id", "--wave", "wave", "--value", "y",
                          "--delimiter", sep, "--json", "report.json", "-q"], out)
    _check_command(outcome, sorted(p.name for p in out.iterdir() if p != source))


@fuzz_settings(3, shrink=False)
@given(frame=panels(max_units=30, max_waves=5), junk=st.binary(max_size=200))
def test_command_line_subprocess(tmp_path_factory, frame, junk):
    """The full ``python -m paneldiag`` start, on a panel read from standard input and on
    junk bytes."""
    out = tmp_path_factory.mktemp("entry")
    for stdin in (as_long(frame).to_csv(index=False).encode(), junk):
        done = run_cli("screen", "-", "--id", "id", "--wave", "wave", "--value", "y",
                       "--json", out / "report.json", "-q", stdin=stdin)
        written = sorted(p.name for p in out.iterdir())
        _check_command(done, written)
        for p in out.iterdir():
            p.unlink()
