"""Streamed reading (paneldiag/io/stream.py): a long file read in blocks gives the Panel,
the ledgers and the messages of the in-memory read.

The reference is the in-memory read of the same file (read_table + build_panel), which
the rest of the suite checks against its own sources; here each streamed result must
equal it. Blocks are made small (``block_bytes``) so that small files are cut into many
blocks, with units running across block ends.
"""

from __future__ import annotations

import json
import math
import shlex

import numpy as np
import pandas as pd
import pytest

from conftest import FIXTURES, run_cli
from paneldiag.errors import InputProblem
from paneldiag.io.readers import read_table
from paneldiag.io.stream import _unify_types, stream_panel
from paneldiag.io.validate import parse_size
from paneldiag.io.validate import LayoutSpec, MissingCodes, build_panel
from paneldiag.demo import tenant_panel

TENANTS = dict(id="household", wave="year", values=("satisfaction", "energy_use", "trust"),
               missing_codes=MissingCodes((-9.0, -8.0)), weight="weight", group="district",
               covariates=("household_size",))


def in_memory(path, spec: LayoutSpec):
    return build_panel(read_table(str(path), columns=spec.columns()), spec)


def streamed(path, spec: LayoutSpec, block_bytes=200, **options):
    panel, ledgers, _, _ = stream_panel(str(path), spec, None, None, None,
                                        block_bytes=block_bytes, **options)
    return panel, ledgers


def assert_same_panel(a, b):
    """Exact equality: each unit's rows are validated by the same code in either read."""
    np.testing.assert_array_equal(a.unit_ids, b.unit_ids)
    assert a.wave_labels == b.wave_labels
    np.testing.assert_array_equal(a.wave_times, b.wave_times)
    assert a.measures == b.measures
    for name in a.values:
        np.testing.assert_array_equal(a.values[name], b.values[name])
        assert a.codes[name].keys() == b.codes[name].keys()
        for code in a.codes[name]:
            np.testing.assert_array_equal(a.codes[name][code], b.codes[name][code])
    for kind in ("covariates", "items"):
        got, want = getattr(a, kind), getattr(b, kind)
        assert got.keys() == want.keys()
        for name in got:
            np.testing.assert_array_equal(got[name], want[name])
    for kind in ("weights", "groups"):
        got, want = getattr(a, kind), getattr(b, kind)
        assert (got is None) == (want is None)
        if got is not None:
            np.testing.assert_array_equal(got, want)
    assert a.time_unit == b.time_unit and a.wave_reading == b.wave_reading
    assert a.item_columns == b.item_columns


def assert_same_ledgers(a, b):
    assert {m: l.to_dict() for m, l in a.items()} == {m: l.to_dict() for m, l in b.items()}


def same_outcome(path, spec: LayoutSpec, block_bytes=200):
    """Both reads give the same panel and ledgers, or the same one-line problem."""
    try:
        want = in_memory(path, spec)
    except InputProblem as expected:
        with pytest.raises(InputProblem) as got:
            streamed(path, spec, block_bytes)
        assert str(got.value) == str(expected)
        return None
    got = streamed(path, spec, block_bytes)
    assert_same_panel(got[0], want[0])
    assert_same_ledgers(got[1], want[1])
    return got


@pytest.fixture(scope="module")
def tenants_csv(tmp_path_factory):
    path = tmp_path_factory.mktemp("stream") / "tenants.csv"
    tenant_panel(300).to_csv(path, index=False, float_format="%.10g", lineterminator="\n")
    return path


def test_tenant_panel_in_many_blocks(tenants_csv):
    # ~1,800 rows of ~45 bytes: blocks of 2,000 bytes cut it into ~40 blocks
    got = same_outcome(tenants_csv, LayoutSpec(**TENANTS), block_bytes=2000)
    assert got is not None and got[0].n_units == 300


def test_gzip_and_tab_separated(tmp_path):
    import gzip
    frame = tenant_panel(120)
    text = frame.to_csv(index=False, sep="\t", float_format="%.10g", lineterminator="\n")
    path = tmp_path / "tenants.tsv.gz"
    path.write_bytes(gzip.compress(text.encode()))
    same_outcome(path, LayoutSpec(**TENANTS), block_bytes=1500)


def test_byte_order_mark_windows_line_ends_and_blank_lines(tmp_path):
    lines = messy_lines(6)
    lines[30:30] = ["", ""]                     # blank lines move records off their index
    path = tmp_path / "windows.csv"
    path.write_bytes(b"\xef\xbb\xbf" + "\r\n".join(lines).encode() + b"\r\n")
    for bad_values in ("drop", "error"):
        spec = LayoutSpec(id="unit", wave="wave", values=("y", "z"), duplicates="last",
                          missing_codes=MissingCodes((-9.0,)), bad_values=bad_values)
        same_outcome(path, spec, block_bytes=70)


def test_parquet_and_a_folder_of_parquet_files(tmp_path):
    frame = tenant_panel(200)
    single = tmp_path / "tenants.parquet"
    frame.to_parquet(single, index=False, row_group_size=150)
    folder = tmp_path / "parts"
    folder.mkdir()
    for k, start in enumerate(range(0, len(frame), 400)):  # files in row order
        frame.iloc[start:start + 400].to_parquet(folder / f"part-{k:03d}.parquet",
                                                 index=False)
    spec = LayoutSpec(**TENANTS)
    want = in_memory(single, spec)
    for path in (single, folder):
        got = streamed(path, spec, block_bytes=4000)
        assert_same_panel(got[0], want[0])
        assert_same_ledgers(got[1], want[1])


def test_a_partitioned_folder(tmp_path):
    # district=<name>/ folders: the group column is held by the folder names only
    import pyarrow as pa
    import pyarrow.parquet as pq
    frame = tenant_panel(200)
    single = tmp_path / "tenants.parquet"
    frame.to_parquet(single, index=False)
    folder = tmp_path / "by_district"
    pq.write_to_dataset(pa.Table.from_pandas(frame, preserve_index=False), folder,
                        partition_cols=["district"])
    spec = LayoutSpec(**TENANTS)
    want = in_memory(single, spec)
    for got in (streamed(folder, spec, block_bytes=3000), in_memory(folder, spec)):
        # the folders come in district order, so units are put back in id order
        assert_same_panel(got[0], want[0])
        assert_same_ledgers(got[1], want[1])


LONG_BAD = [line for line in (FIXTURES / "bad" / "expected.txt").read_text().splitlines()
            if line and not line.startswith("#") and "--wide" not in line and
            line.split(" | ")[0].endswith((".csv", ".csv.gz", ".tsv", ".parquet"))]


@pytest.mark.parametrize("line", LONG_BAD, ids=[line.split(" | ")[0] for line in LONG_BAD])
def test_bad_input_corpus_gives_the_same_message(line):
    name, options = (part.strip() for part in line.split(" | ")[:2])
    args = shlex.split(options)
    if "--id" not in args or "--wave" not in args:
        pytest.skip("not a long layout")
    spec = _spec_from(args)
    path = FIXTURES / "bad" / name
    for block_bytes in (40, 10**6):   # a few rows a block, and one block
        try:
            in_memory(path, spec)
        except InputProblem as expected:
            with pytest.raises(InputProblem) as got:
                streamed(path, spec, block_bytes)
            if "are not together" in str(got.value):   # the streamed read's own limit
                assert units_apart(path, spec), str(got.value)
                continue
            assert str(got.value) == str(expected)


def units_apart(path, spec: LayoutSpec) -> bool:
    """A unit's rows resume after another unit's (checked with pandas, not our reader)."""
    ids = pd.read_csv(path, dtype=str)[list(spec.id_columns)].dropna()
    key = ids.apply(lambda r: "/".join(s.strip() for s in r), axis=1)
    runs = key[key.ne(key.shift())]
    return bool(runs.duplicated().any())


def _spec_from(args: list[str]) -> LayoutSpec:
    from paneldiag.cli.screen import command
    context = command.make_context("screen", ["x.csv", *args])
    options = {k: v for k, v in context.params.items()
               if k not in ("data", "json_path", "triplet_path", "report_dir", "details",
                            "quiet")}
    from paneldiag.request import ScreenRequest
    return ScreenRequest(**options).layout()


def messy_lines(seed: int, n_units: int = 40) -> list[str]:
    """A long file with every kind of row problem the ledger counts, spread over it."""
    rng = np.random.default_rng(seed)
    lines = ["unit,wave,y,z,w,g"]
    for u in range(n_units):
        weight = f"{1 + u % 3}"
        group = "north" if u % 2 else "south"
        for wave in rng.permutation([1, 2, 3, 4])[:rng.integers(2, 5)]:
            y = rng.choice(["", "NA", "-9", "oops", "inf", f"{rng.normal():.4f}"],
                           p=[.08, .04, .08, .05, .03, .72])
            z = f"{rng.normal() * 100:.3f}" if rng.random() > .1 else ""
            unit = "" if rng.random() < .03 else f"U{u:03d}"
            wave_text = "" if rng.random() < .03 else str(wave)
            lines.append(f"{unit},{wave_text},{y},{z},{weight},{group}")
            if rng.random() < .05:      # a repeated unit-wave row
                lines.append(f"{unit},{wave_text},{y},{z},{weight},{group}")
    return lines


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("policy", ["first", "last", "mean", "error"])
def test_messy_file_ledgers_and_messages(tmp_path, seed, policy):
    path = tmp_path / "messy.csv"
    path.write_text("\n".join(messy_lines(seed)) + "\n")
    for bad_values in ("drop", "error"):
        spec = LayoutSpec(id="unit", wave="wave", values=("y", "z"), weight="w", group="g",
                          missing_codes=MissingCodes((-9.0,)), duplicates=policy,
                          bad_values=bad_values)
        for block_bytes in (30 + 37 * seed, 90, 1000):   # a row or two a block, up to ten
            same_outcome(path, spec, block_bytes=block_bytes)


def test_units_together_but_not_in_id_order(tmp_path):
    lines = messy_lines(4)
    header, rows = lines[0], lines[1:]
    by_unit: dict[str, list[str]] = {}
    for row in rows:
        by_unit.setdefault(row.split(",")[0], []).append(row)
    order = sorted(by_unit, reverse=True)   # units together, ids descending
    path = tmp_path / "reversed.csv"
    path.write_text("\n".join([header] + [r for u in order for r in by_unit[u]]) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("y", "z"), duplicates="first",
                      bad_values="drop", missing_codes=MissingCodes((-9.0,)))
    assert same_outcome(path, spec, block_bytes=90) is not None


def test_unit_rows_apart_stop_with_the_row(tmp_path):
    path = tmp_path / "apart.csv"
    path.write_text("unit,wave,y\nA,1,1\nA,2,2\nB,1,3\nB,2,4\nA,3,5\nB,3,6\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("y",))
    assert in_memory(path, spec)[0].n_units == 2     # in memory the order does not matter
    with pytest.raises(InputProblem, match=r"unit A are not together.*sort the file by "
                                           r"unit") as problem:
        streamed(path, spec)
    assert problem.value.row == 6 and problem.value.column == "unit"


def test_budget_too_small_for_the_matrices(tmp_path):
    rows = ["unit,wave,a,b,c"] + [f"{u},{w},1,2,3" for u in range(2000) for w in range(40)]
    path = tmp_path / "many_waves.csv"
    path.write_text("\n".join(rows) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("a", "b", "c"))
    # 2,000 x 40 x 3 matrices of 8 bytes (1.92 MB) + 80 bytes a unit = 2.08 MB, above the
    # whole budget; at least that + a block of 64 KiB of text x 12 (0.79 MB) = 2.87 MB
    with pytest.raises(InputProblem, match=r"--max-memory 1.6 MB is too small: the panel's "
                                           r"matrices \(2,000 units x 40 waves\) take 2.1 MB; "
                                           r"give at least 2.9 MB"):
        stream_panel(str(path), spec, None, None, parse_size("1.6MB"))
    panel, _, _, _ = stream_panel(str(path), spec, None, None, parse_size("3MB"))
    assert panel.values["a"].shape == (2000, 40)


def test_python_api_takes_the_budget(tenants_csv):
    import paneldiag
    options = dict(id="household", wave="year", value=["satisfaction", "trust"],
                   missing_codes="-9,-8", audit_only=True)
    whole = paneldiag.screen(str(tenants_csv), **options).to_dict()
    blocks = paneldiag.screen(str(tenants_csv), max_memory="1.6MB", **options).to_dict()
    assert numbers_close(whole, blocks) == []


def test_a_file_too_large_for_the_default_budget_is_read_in_blocks(tenants_csv, monkeypatch):
    import paneldiag.io.stream as stream
    from paneldiag.request import ScreenRequest, run_screen
    request = ScreenRequest(id=("household",), wave="year", value=("trust",),
                            missing_codes="-9,-8", audit_only=True)
    whole, _ = run_screen(str(tenants_csv), request)
    read_in_blocks = []
    original = stream.stream_panel
    # a machine with 4 MB of memory (half of it the budget), and the ~80 KB file taken
    # to need 100 times its size in memory
    monkeypatch.setattr(stream, "default_budget", lambda: 2 * 10**6)
    monkeypatch.setattr(stream, "IN_MEMORY_WORK", 100)
    monkeypatch.setattr(stream, "stream_panel",
                        lambda *a, **k: read_in_blocks.append(a) or original(*a, **k))
    blocks, _ = run_screen(str(tenants_csv), request)
    assert len(read_in_blocks) == 1 and numbers_close(whole, blocks) == []


def test_a_screen_read_in_blocks_uses_one_thread(tenants_csv, monkeypatch):
    # a program property: within a memory budget the screen stays on one thread unless
    # PANELDIAG_WORKERS asks for more (a second thread holds its own temporaries)
    import paneldiag.ahead as ahead
    import paneldiag.pipeline as pipeline
    from paneldiag.request import ScreenRequest, run_screen
    monkeypatch.delenv(ahead.WORKERS_VARIABLE, raising=False)
    monkeypatch.setattr(ahead, "THREADED_UNIT_WAVES", 1)   # this panel counts as large
    threads = []
    original = pipeline.screen
    monkeypatch.setattr(pipeline, "screen", lambda panel, ledgers, info, options, summ:
                        threads.append(options.workers) or original(panel, ledgers, info,
                                                                    options, summ))
    request = ScreenRequest(id=("household",), wave="year", value=("trust",),
                            missing_codes="-9,-8", audit_only=True, max_memory="1.6MB")
    run_screen(str(tenants_csv), request)
    assert threads == [1]   # without the budget: None, two threads by the panel's size


def test_types_that_change_between_blocks(tmp_path):
    # integer ids and values in the first rows, text further down: a whole-file read
    # takes the columns as text (and the values' text as non-numeric)
    rows = ["unit,wave,y"] + [f"{u},{w},{u + w}" for u in range(1, 200) for w in (1, 2)]
    rows += ["X1,1,2.5", "X1,2,high"]
    path = tmp_path / "types.csv"
    path.write_text("\n".join(rows) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("y",), bad_values="drop")
    got = same_outcome(path, spec, block_bytes=300)
    assert got[1]["y"].dropped_by_reason["non_numeric_value"] == 1


def test_unified_types_follow_a_whole_file_read(tmp_path):
    import pyarrow as pa
    import pyarrow.csv as pacsv
    cases = {"1\n2\n": "1.5\nx\n", "7\n8\n": "2.25\n3\n", "\n\n": "4\n5\n"}
    for first, second in cases.items():
        path = tmp_path / "column.csv"
        path.write_text("c\n" + first + second)
        blocks = [pacsv.read_csv(pa.BufferReader(("c\n" + part).encode()),
                                 convert_options=pacsv.ConvertOptions(
                                     null_values=[""], strings_can_be_null=True)).schema[0].type
                  for part in (first, second)]
        whole = pacsv.read_csv(str(path), read_options=pacsv.ReadOptions(block_size=3),
                               convert_options=pacsv.ConvertOptions(
                                   null_values=[""], strings_can_be_null=True)).schema[0].type
        assert _unify_types(blocks) == whole   # reference: pyarrow's own whole-file inference


def test_wave_bins_with_rows_outside(tmp_path):
    rows = ["unit,age,y"]
    rng = np.random.default_rng(5)
    for u in range(60):
        for age in sorted(rng.uniform(0, 30, 4)):
            rows.append(f"P{u:02d},{age:.2f},{rng.normal():.3f}")
    rows.append("P99,29.5,1.0")            # a unit whose only row is outside the bins
    path = tmp_path / "ages.csv"
    path.write_text("\n".join(rows) + "\n")
    spec = LayoutSpec(id="unit", wave="age", values=("y",),
                      wave_grouping=__import__("paneldiag.io.waves", fromlist=["x"])
                      .WaveGrouping.parse("0,5,10,15,20,25", None), duplicates="mean")
    got = same_outcome(path, spec, block_bytes=120)
    assert "P99" not in set(got[0].unit_ids)


def test_scale_items(tmp_path):
    rng = np.random.default_rng(8)
    rows = ["unit,wave,a,b,c"]
    for u in range(50):
        for w in range(1, 5):
            items = [str(rng.integers(1, 6)) if rng.random() > .05 else "" for _ in range(3)]
            rows.append(f"{u},{w}," + ",".join(items))
    path = tmp_path / "items.csv"
    path.write_text("\n".join(rows) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", items=(("calm", ("a", "b", "c")),))
    same_outcome(path, spec, block_bytes=100)


def test_quoted_line_breaks_keep_line_numbers(tmp_path):
    rows = ["unit,wave,note,y"]
    for u in range(30):
        for w in (1, 2, 3):
            rows.append(f'U{u},{w},"two\nlines",{u + w}')
    rows[50] = 'U16,2,"two\nlines",oops'
    path = tmp_path / "quoted.csv"
    path.write_text("\n".join(rows) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("y",))
    with pytest.raises(InputProblem) as problem:
        streamed(path, spec, block_bytes=150)
    # record 49 spans lines 100-101; a record is placed at its last line, as the
    # in-memory read places it (csv.reader's line_num)
    assert problem.value.row == 101
    assert str(problem.value) == str(pytest.raises(InputProblem, in_memory, path, spec).value)


@pytest.mark.parametrize("text, size", [("2GB", 2 * 10**9), ("500MB", 5 * 10**8),
                                        ("800M", 800 * 2**20), ("1.5G", int(1.5 * 2**30)),
                                        ("4000000", 4 * 10**6)])
def test_sizes(text, size):
    assert parse_size(text, "--max-memory") == size


@pytest.mark.parametrize("text", ["", "lots", "-1GB", "2XB", "0"])
def test_bad_sizes(text):
    with pytest.raises(InputProblem, match="--max-memory takes a size"):
        parse_size(text, "--max-memory")


# ----------------------------------------------------------------- the command line

OPTIONS = ["--id", "household", "--wave", "year", "--value", "satisfaction", "--value",
           "energy_use", "--value", "trust", "--missing-codes", "-9,-8", "--weight",
           "weight", "--group", "district", "--quiet"]


def numbers_close(a, b, path="") -> list[str]:
    """Paths where two JSON values differ beyond 1e-10 relative (summation order over
    blocks may move the last bits; this file's blocks keep the unit order, so none do)."""
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            return [f"{path}: keys {sorted(set(a) ^ set(b))}"]
        return [d for k in a for d in numbers_close(a[k], b[k], f"{path}/{k}")]
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: lengths"]
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in numbers_close(x, y, f"{path}/{i}")]
    if isinstance(a, float) and isinstance(b, (int, float)):
        return [] if math.isclose(a, b, rel_tol=1e-10, abs_tol=0) else [f"{path}: {a} {b}"]
    return [] if a == b else [f"{path}: {a!r} {b!r}"]


@pytest.mark.parametrize("scope", [
    ["--audit-only"],
    # the whole screen: ~1 min more; the Panel it starts from is checked equal above
    pytest.param([], marks=pytest.mark.slow)])
def test_command_gives_the_same_report_with_a_memory_budget(tmp_path, scope):
    frame = tenant_panel(600)
    path = tmp_path / "tenants.csv"
    frame.to_csv(path, index=False, float_format="%.10g", lineterminator="\n")
    whole, blocks = tmp_path / "whole.json", tmp_path / "blocks.json"
    first = run_cli("screen", path, *OPTIONS, *scope, "--json", whole)
    # a file of ~155 KB; 1.6 MB: the first pass in blocks of 67 KB (1.6 MB / 24), three
    # blocks; the matrices and ids take ~0.16 MB (600 x 8 waves x 3 measures x 8 bytes +
    # 80 bytes a unit), leaving the second pass blocks of 120 KB: two blocks
    second = run_cli("screen", path, *OPTIONS, *scope, "--json", blocks, "--max-memory",
                     "1.6MB")
    assert first.returncode == 0 and second.returncode == 0, second.stderr.decode()
    a, b = json.loads(whole.read_text()), json.loads(blocks.read_text())
    assert numbers_close(a, b) == []
    for measure in ("satisfaction", "energy_use", "trust"):   # counts: equal, not close
        assert a["measures"][measure]["ledger"] == b["measures"][measure]["ledger"]
    assert a["measures"]["trust"]["ledger"]["rows_read"] == len(frame)


def test_command_refuses_a_budget_too_small(tmp_path, tenants_csv):
    out = tmp_path / "out.json"
    result = run_cli("screen", tenants_csv, *OPTIONS, "--json", out, "--max-memory", "200KB")
    assert result.returncode == 2
    lines = result.stderr.decode().strip().splitlines()
    assert len(lines) == 1 and "--max-memory 200.0 KB is too small" in lines[0]
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_command_refuses_units_apart(tmp_path, tenants_csv):
    frame = pd.read_csv(tenants_csv)
    shuffled = tmp_path / "shuffled.csv"
    frame.sample(frac=1, random_state=3).to_csv(shuffled, index=False)
    out = tmp_path / "out.json"
    result = run_cli("screen", shuffled, *OPTIONS, "--json", out, "--max-memory", "50MB")
    assert result.returncode == 2
    lines = result.stderr.decode().strip().splitlines()
    assert len(lines) == 1 and "are not together" in lines[0] and "Traceback" not in lines[0]
    assert not out.exists()


def test_command_refuses_a_budget_for_wide_data(tmp_path):
    path = tmp_path / "wide.csv"
    path.write_text("h,s1,s2\nA,1,2\nB,2,3\nC,3,3\n")
    result = run_cli("screen", path, "--id", "h", "--wide", "s=s1,s2", "--max-memory", "1GB")
    assert result.returncode == 2
    assert "wide data are read whole" in result.stderr.decode()
