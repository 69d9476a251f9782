"""Reruns give the same bytes: the JSON report, the appendix (Markdown, HTML) and the
LaTeX tables do not depend on Python's hash seed, the BLAS library's thread count, or
the size of the blocks a file is read in (``--max-memory``). The summaries' own chunk
size (a knob for tests of the merges) changes the order of their sums, so there the
JSON figures agree to rounding and the appendix and tables byte for byte (see the test).
A property of the program itself (no outside reference is involved)."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from conftest import json_leaves, search_steps
from paneldiag.simulate import family_values

OUTPUTS = ("report.json", "appendix.md", "appendix.html", "tables.tex")


def _screen(path, folder, *options, **env):
    settings = dict(os.environ, NO_COLOR="1", **env)
    done = subprocess.run([sys.executable, "-m", "paneldiag", "screen", str(path), "--id", "id",
                           "--wave", "wave", "--value", "y", "--report", str(folder), "-q",
                           *options], capture_output=True, env=settings)
    assert done.returncode == 0, done.stderr.decode()
    return {name: (folder / name).read_bytes() for name in OUTPUTS}


def _panel_file(tmp_path, n_units=300):
    # a trait + carry-over panel with MCAR gaps (simulated, known truth): every area
    # runs, the EM and full-information fits included; each unit's rows together
    values = family_values("trait_autoregressive", n_units, 6, 0.8, "mcar",
                           np.random.default_rng(4), "none")
    frame = pd.DataFrame(values)
    frame.insert(0, "id", [f"u{i:05d}" for i in range(len(frame))])
    long = frame.melt(id_vars="id", var_name="wave", value_name="y").dropna()
    path = tmp_path / "panel.csv"
    long.sort_values(["id", "wave"]).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def baseline(tmp_path_factory):
    """The 300-unit panel and its report under the default settings, shared by the
    comparisons below."""
    folder = tmp_path_factory.mktemp("determinism")
    path = _panel_file(folder)
    return path, _screen(path, folder / "baseline")


def test_reports_are_byte_identical_across_hash_seeds_and_blas_threads(baseline, tmp_path):
    path, first = baseline
    runs = [_screen(path, tmp_path / f"run{k}", PYTHONHASHSEED=seed,
                    OPENBLAS_NUM_THREADS=threads, OMP_NUM_THREADS=threads)
            for k, (seed, threads) in enumerate([("2", "2"), ("12345", "1")])]
    for name in OUTPUTS:
        assert first[name] == runs[0][name] == runs[1][name], name


def test_reports_are_byte_identical_across_read_block_sizes(tmp_path):
    """The file read whole, and read in blocks of about 66 and 133 KB (a budget holds 24
    blocks): a unit's rows always land in one block, so the panel and every figure
    built from it are the same bits."""
    path = _panel_file(tmp_path, n_units=1500)
    assert path.stat().st_size > 3 * 66_000          # several blocks at the smallest budget
    runs = [_screen(path, tmp_path / f"run{k}", *budget)
            for k, budget in enumerate([[], ["--max-memory", "1.6MB"], ["--max-memory", "3.2MB"]])]
    for name in OUTPUTS:
        assert all(run[name] == runs[0][name] for run in runs), name


def test_reports_agree_across_summary_chunk_sizes(baseline, tmp_path):
    """Summaries built in chunks of 1 or 64 units (or all at once) and merged: the
    appendix and the LaTeX tables are byte-identical, and so is every figure of the
    JSON report up to its last bits.

    The last bits differ because the chunks' sums are added in another order (and
    chunk moments merged by the update of Chan, Golub and LeVeque 1983): making them
    identical would need sums exact in any order (a superaccumulator in every summary
    kind, matrix products included), a cost out of proportion to figures that agree to
    1e-13. So the JSON is compared figure by figure to 1e-10 relative (absolute below
    1, for figures that are 0 up to rounding): summation in another order moves a
    figure by a few units in the 16th digit, times the condition of what follows (the
    fits stop at a relative change of 1e-13). The correlation-decay fit is the one
    exception, compared to 1e-6: it minimises its sum of squares over rho, and the
    minimum of a smooth function is located only to about the square root of the
    rounding in its values (1e-8), which its interval ends inherit."""
    import json
    import math

    path, first_run = baseline
    runs = [first_run] + [_screen(path, tmp_path / f"run{k}", "--chunk-units", str(chunk))
                          for k, chunk in enumerate([1, 64])]
    for name in ("appendix.md", "appendix.html", "tables.tex"):
        assert all(run[name] == runs[0][name] for run in runs), name

    first = dict(json_leaves(json.loads(runs[0]["report.json"])))
    for run in runs[1:]:
        other = dict(json_leaves(json.loads(run["report.json"])))
        assert first.keys() == other.keys()
        for key, value in first.items():
            if search_steps(key):
                continue
            if isinstance(value, float):
                tolerance = 1e-6 if key.startswith(".decay_fit.") else 1e-10
                assert math.isclose(value, other[key], rel_tol=tolerance,
                                    abs_tol=tolerance), key
            else:
                assert value == other[key], key


def test_work_on_a_second_thread_gives_the_serial_bytes(tmp_path):
    # the dropout model and the rank moments started ahead on a worker thread
    # (paneldiag.ahead) against the same screen run serially, with groups so that each
    # group's screen starts its own work too, and with weights and scores on a grid of
    # two decimals so that the weighted dropout model is fitted on cells; simulated
    # growth + carry-over panel with dropout (known truth; the property checked is the
    # program's own)
    values = family_values("growth_autoregressive", 240, 5, 0.8, "dependent",
                           np.random.default_rng(9), "none")
    frame = pd.DataFrame(np.round(values, 2))
    frame.insert(0, "id", [f"u{i}" for i in range(len(frame))])
    frame.insert(1, "district", np.where(np.arange(len(frame)) % 3 == 0, "North", "South"))
    frame.insert(2, "weight", np.resize([0.5, 1.0, 2.0, 1.5], len(frame)))
    long = frame.melt(id_vars=["id", "district", "weight"], var_name="wave",
                      value_name="y").dropna()
    path = tmp_path / "panel.csv"
    long.to_csv(path, index=False)
    options = ("--group", "district", "--weight", "weight")
    serial = _screen(path, tmp_path / "serial", *options, PANELDIAG_WORKERS="1")
    threaded = _screen(path, tmp_path / "threaded", *options, PANELDIAG_WORKERS="2")
    assert b'"groups"' in serial["report.json"] and b'"weighting"' in serial["report.json"]
    for name in OUTPUTS:
        assert serial[name] == threaded[name], name


def test_both_threads_take_items_and_results_keep_their_order():
    # the mechanism itself: a barrier of two can only be passed when the worker thread
    # has taken an item beside the calling thread (a property of the program)
    import threading

    from paneldiag import ahead
    barrier = threading.Barrier(2, timeout=60)
    names = {}

    def square(i):
        if i < 2:
            barrier.wait()
        names[i] = threading.current_thread().name
        return i * i

    with ahead.threads(2):
        assert ahead.share(square, range(10)) == [i * i for i in range(10)]
    assert len({names[0], names[1]}) == 2
    with ahead.threads(1):   # serial: everything on the calling thread
        assert ahead.share(lambda i: threading.current_thread().name, range(3)) == \
            [threading.current_thread().name] * 3


def test_threads_by_default_only_for_large_panels(monkeypatch):
    # a program property: the default follows the panel's unit-waves and the cores; the
    # environment variable overrides it (the reasons: paneldiag/ahead.py)
    from paneldiag import ahead
    monkeypatch.delenv(ahead.WORKERS_VARIABLE, raising=False)
    monkeypatch.setattr(ahead.os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    assert ahead.workers(ahead.THREADED_UNIT_WAVES - 1) == 1
    assert ahead.workers(ahead.THREADED_UNIT_WAVES) == 2
    monkeypatch.setattr(ahead.os, "sched_getaffinity", lambda pid: {0}, raising=False)
    assert ahead.workers(ahead.THREADED_UNIT_WAVES) == 1   # one core: serial
    monkeypatch.setenv(ahead.WORKERS_VARIABLE, "2")
    assert ahead.workers(10) == 2


def test_threaded_screen_of_many_chunks_equals_the_serial_one():
    # every shared list at once (chunks of the summaries, the structures' fits, the EM
    # copies) and the work started ahead, on a panel cut into 7 chunks; simulated
    # trait + carry-over with dependent dropout (the property checked is the program's)
    from dataclasses import replace

    from paneldiag.io.ledger import Ledger
    from paneldiag.panel import Panel
    from paneldiag.pipeline import ScreenOptions, screen
    from paneldiag.render.json import report_json
    y = family_values("trait_autoregressive", 700, 5, 0.7, "dependent",
                      np.random.default_rng(12), "none")
    panel = Panel(unit_ids=np.arange(len(y)), wave_labels=("1", "2", "3", "4", "5"),
                  wave_times=np.arange(5.0), values={"y": y})
    ledgers = {"y": Ledger(rows_read=int(np.isfinite(y).sum()),
                           rows_used=int(np.isfinite(y).sum()))}
    serial = ScreenOptions(workers=1, chunk_units=100)
    one = report_json(screen(panel, ledgers, {"path": "memory"}, serial))
    two = report_json(screen(panel, ledgers, {"path": "memory"}, replace(serial, workers=2)))
    assert '"families"' in one
    assert one == two
