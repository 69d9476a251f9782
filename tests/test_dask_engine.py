"""The distributed engine (paneldiag/dask_engine.py): a screen run on a Dask cluster's
workers gives the local engine's report and ledger.

The reference is the local engine on the same file, which the rest of the suite checks
against its own sources. The cluster is a ``distributed.LocalCluster`` of 2 workers with
1 thread each, threads of this process (processes=False, quick to start) but talking
over TCP (protocol='tcp'): every task, partition and summary part crosses a TCP comm and
is serialised as on a real cluster, and the command-line tests connect to it from
another process. Partitions are made small (``BLOCK_MIN`` lowered, ``max_memory``) so a
300-household demo is cut into about 20 partitions, units running across their ends.

Figures are compared to 1e-10 relative (absolute below 1): the parts' summaries are
added in another order than the local engine's chunks, which moves a figure by a few
units in the 16th digit times the condition of what follows (the reasoning of
tests/test_determinism.py, test_reports_agree_across_chunk_sizes).
"""

from __future__ import annotations

import builtins
import json
import math

import pandas as pd
import pytest

from conftest import json_leaves, run_cli, search_steps

distributed = pytest.importorskip("distributed")

import paneldiag  # noqa: E402
import paneldiag.dask_engine as engine  # noqa: E402
from paneldiag.demo import tenant_panel  # noqa: E402
from paneldiag.errors import InputProblem  # noqa: E402

OPTIONS = dict(id="household", wave="year", value=["satisfaction", "energy_use", "trust"],
               missing_codes="-9,-8", group="district", weight="weight",
               covariate="household_size")
SMALL_PARTS = "100KB"   # with BLOCK_MIN lowered: parts of about 4 KB of text


@pytest.fixture(scope="module")
def cluster():
    import logging
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  protocol="tcp", dashboard_address=":0",
                                  silence_logs=logging.CRITICAL) as running:
        yield running.scheduler_address


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("dask")
    long = tenant_panel(300)
    paths = {"sorted.csv": folder / "sorted.csv", "unsorted.csv": folder / "unsorted.csv",
             "sorted.csv.gz": folder / "sorted.csv.gz", "rows.parquet": folder / "rows.parquet"}
    long.to_csv(paths["sorted.csv"], index=False)
    long.to_csv(paths["sorted.csv.gz"], index=False, compression="gzip")
    long.sample(frac=1, random_state=7).to_csv(paths["unsorted.csv"], index=False)
    long.sample(frac=1, random_state=8).to_parquet(paths["rows.parquet"], row_group_size=150)
    return paths


@pytest.fixture
def small_parts(monkeypatch):
    """Small partitions; records how each run met units cut across them: the number of
    parts, whether some unit spans parts, whether the parts were re-cut at unit starts
    (units together in the file) instead of shuffled."""
    monkeypatch.setattr(engine, "BLOCK_MIN", 1024)
    seen = {"carried": False}
    spans, carry = engine.units_span_parts, engine.carry_units

    def spanning(scans):
        seen.update(parts=len(scans), spanning=spans(scans))
        return seen["spanning"]

    def carried(*args):
        seen["carried"] = True
        return carry(*args)
    monkeypatch.setattr(engine, "units_span_parts", spanning)
    monkeypatch.setattr(engine, "carry_units", carried)
    return seen


def tolerance(key: str) -> tuple[float, float]:
    """(relative, absolute) tolerance of a figure. A fitted optimum's location is known
    only to about the square root of the rounding in the function minimised (1e-8):
    the correlation-decay fit's figures are compared to 1e-6 (as in
    tests/test_determinism.py), and the structures' parameters, written to 4 decimals,
    to one unit of the 4th decimal (an optimum within 1e-8 of a rounding edge shows
    either neighbour)."""
    if ".decay_fit." in key:
        return 1e-6, 1e-6
    if ".parameters." in key:
        return 0.0, 1.0001e-4
    return 1e-10, 1e-10


def differences(local: dict, other: dict) -> list[str]:
    want, got = dict(json_leaves(local)), dict(json_leaves(other))
    assert want.keys() == got.keys()
    out = []
    for key, value in want.items():
        if search_steps(key):
            continue
        if isinstance(value, float):
            relative, absolute = tolerance(key)
            if not math.isclose(value, got[key], rel_tol=relative, abs_tol=absolute):
                out.append(key)
        elif value != got[key]:
            out.append(key)
    return out


@pytest.mark.parametrize("name", ["sorted.csv", "unsorted.csv", "sorted.csv.gz",
                                  "rows.parquet"])
def test_audit_equals_local_engine(cluster, files, small_parts, name):
    """The audit (wave profile, attrition with its dropout model, response patterns, EM
    moments, Little's test) with weights and groups, and every ledger."""
    path = str(files[name])
    local = paneldiag.screen(path, audit_only=True, **OPTIONS).to_dict()
    dask = paneldiag.screen(path, audit_only=True, engine="dask", scheduler=cluster,
                            max_memory=SMALL_PARTS, **OPTIONS).to_dict()
    assert differences(local, dask) == []
    for measure, report in local["measures"].items():
        assert dask["measures"][measure]["ledger"] == report["ledger"]
        ledger = report["ledger"]
        assert ledger["rows_read"] == ledger["rows_used"] + sum(
            ledger["dropped_by_reason"].values())
    if name.endswith(".gz"):
        assert small_parts["parts"] == 1   # a gzip stream is one partition
    else:   # units cut across parts: re-cut at unit starts when sorted, else shuffled
        assert small_parts["parts"] > 5 and small_parts["spanning"]
        assert small_parts["carried"] == name.startswith("sorted")


@pytest.mark.slow   # two whole screens: about 40 s on the shared machine
def test_dependence_and_growth_equal_local_engine(cluster, files, small_parts):
    """A whole screen of one continuous measure, unweighted, on the unsorted file (the
    sections of the summaries beyond the audit: pairwise moments, trajectories,
    replicate patterns, and the verdicts)."""
    path = str(files["unsorted.csv"])
    options = dict(id="household", wave="year", value="trust", group="district")
    local = paneldiag.screen(path, **options).to_dict()
    dask = paneldiag.screen(path, engine="dask", scheduler=cluster, max_memory=SMALL_PARTS,
                            **options).to_dict()
    assert differences(local, dask) == []
    assert small_parts["spanning"] and not small_parts["carried"]


def test_command_line_on_a_cluster(cluster, files, tmp_path):
    """The command with --engine dask --scheduler writes the local engine's JSON (the
    client is another process: the parts cross the wire)."""
    path = files["unsorted.csv"]
    args = ["screen", path, "--id", "household", "--wave", "year", "--value", "trust",
            "--weight", "weight", "--group", "district",
            "--audit-only", "-q"]
    local, dask = tmp_path / "local.json", tmp_path / "dask.json"
    assert run_cli(*args, "--json", local).returncode == 0
    done = run_cli(*args, "--json", dask, "--engine", "dask", "--scheduler", cluster)
    assert done.returncode == 0, done.stderr
    assert differences(json.loads(local.read_text()), json.loads(dask.read_text())) == []


def test_scheduler_that_does_not_answer(files, tmp_path, monkeypatch, capsys):
    # the command run in this process, so that the wait can be shortened to a second
    from paneldiag import dask_engine
    from paneldiag.cli import main
    monkeypatch.setattr(dask_engine, "CONNECT_TIMEOUT", 1)
    out = tmp_path / "report.json"
    with pytest.raises(SystemExit) as stopped:
        main(["screen", str(files["sorted.csv"]), "--id", "household", "--wave", "year",
              "--value", "trust", "--engine", "dask", "--scheduler", "tcp://127.0.0.1:9",
              "--json", str(out)])
    assert stopped.value.code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "no Dask scheduler answered at tcp://127.0.0.1:9" in lines[0]
    assert not out.exists()


def test_dask_not_installed(files, monkeypatch):
    real = builtins.__import__

    def without_dask(name, *args, **kwargs):
        if name.split(".")[0] in ("dask", "distributed"):
            raise ImportError(f"No module named '{name}'")
        return real(name, *args, **kwargs)
    monkeypatch.setattr(builtins, "__import__", without_dask)
    with pytest.raises(InputProblem, match=r'pip install "paneldiag\[dask\]"'):
        paneldiag.screen(str(files["sorted.csv"]), id="household", wave="year",
                         value="trust", engine="dask")


def test_inputs_the_engine_does_not_read(files, tmp_path):
    frame = pd.read_csv(files["sorted.csv"])
    with pytest.raises(InputProblem, match="--engine dask reads long CSV/TSV"):
        paneldiag.screen(frame, id="household", wave="year", value="trust", engine="dask")
    wide = tmp_path / "wide.csv"
    wide.write_text("unit,t1,t2\n1,2,3\n2,3,4\n")
    done = run_cli("screen", wide, "--id", "unit", "--wide", "score=t1,t2", "--engine",
                   "dask")
    assert done.returncode == 2 and b"--engine dask reads long CSV/TSV" in done.stderr
    with pytest.raises(InputProblem, match="--scheduler is for --engine dask"):
        paneldiag.screen(str(files["sorted.csv"]), id="household", wave="year",
                         value="trust", scheduler="tcp://127.0.0.1:8786")


def test_bad_input_gives_the_local_message(cluster, files, small_parts, tmp_path):
    """Problems met on the workers are raised once, with the whole file's count and its
    first row in file order, though the shuffled partitions are not in file order."""
    frame = pd.read_csv(files["unsorted.csv"])
    frame["trust"] = frame["trust"].astype(object)
    frame.loc[[900, 150, 1200], "trust"] = ["n/k", "abc", "x"]
    path = tmp_path / "bad.csv"
    frame.to_csv(path, index=False)
    options = dict(id="household", wave="year", value="trust", audit_only=True)
    with pytest.raises(InputProblem) as local:
        paneldiag.screen(str(path), **options)
    with pytest.raises(InputProblem) as dask:
        paneldiag.screen(str(path), engine="dask", scheduler=cluster, max_memory=SMALL_PARTS,
                         **options)
    assert str(dask.value) == str(local.value)
    assert "in 3 cell(s)" in str(local.value) and local.value.row == 152   # header + 0-based


@pytest.mark.parametrize("name", [pytest.param("tiny.parquet", marks=pytest.mark.slow),
                                  "tiny.csv"])   # (a task per part: the Parquet one is slow)
def test_units_over_several_parts(cluster, small_parts, monkeypatch, tmp_path, name):
    """Parts of about 3 rows, so a unit's rows (up to 8) run over three or four parts,
    some parts taken whole by the part before, and rows without an id inside the runs:
    the parts are re-cut at unit starts and the audit and ledger are the local one's."""
    monkeypatch.setattr(engine, "BLOCK_MIN", 64)
    long = tenant_panel(30)
    long.loc[[5, 6, 7, 30], "household"] = None
    path = tmp_path / name
    if name.endswith(".parquet"):
        long.to_parquet(path, row_group_size=3)
    else:
        long.to_csv(path, index=False)
    options = dict(OPTIONS, audit_only=True, drop_bad_rows=True)
    local = paneldiag.screen(str(path), **options).to_dict()
    dask = paneldiag.screen(str(path), engine="dask", scheduler=cluster, max_memory="3KB",
                            **options).to_dict()
    assert differences(local, dask) == []
    assert small_parts["carried"] and small_parts["parts"] > 30
    assert local["measures"]["trust"]["ledger"]["dropped_by_reason"]["missing_id"] == 4
