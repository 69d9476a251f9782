"""Peak memory and time of a streamed read (--max-memory) against the in-memory read,
measured here, in one run.

    python tests/perf/bench_stream.py [--units 400000] [--waves 10] [--budgets 150MB,300MB]

Uses the synthetic long panel of bench_screen.py (cached under bench-data/; person, wave,
score, mood; about 10% of unit-waves absent). Each run is a child process; its peak
resident memory is its own ru_maxrss (from wait4). A child that only imports what the
read imports gives the fixed part (interpreter and libraries); "data" is the peak less
that part. For each format it prints:

- memory:    read_table + build_panel (the whole long table, then the Panel)
- streamed:  stream_panel within each budget (two passes, the Panel allocated once)
- screen:    `paneldiag screen --audit-only` whole, and with --max-memory (the screen's
             own work after the read is not bounded by the budget: see docs/scale.md)

with the ratios data / budget and streamed / memory, and the Panel's matrices (N x T x 8
bytes per measure) that any read holds. The figures are for reading, not asserting.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HERE = Path(__file__).resolve().parent
ID, WAVE, VALUE = "person", "wave", "score"   # bench_screen.py's columns

IMPORTS = """
import numpy, pandas, pyarrow, pyarrow.csv, pyarrow.parquet, pyarrow.dataset
import paneldiag.io.stream, paneldiag.io.validate, paneldiag.io.readers
"""

MEMORY = IMPORTS + f"""
import sys
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, build_panel
spec = LayoutSpec(id="{ID}", wave="{WAVE}", values=("{VALUE}", "mood"))
panel, ledgers = build_panel(read_table(sys.argv[1], columns=spec.columns()), spec)
print(panel.n_units, panel.n_waves, ledgers["{VALUE}"].rows_read)
"""

STREAMED = IMPORTS + f"""
import sys
from paneldiag.io.stream import stream_panel
from paneldiag.io.validate import parse_size
from paneldiag.io.validate import LayoutSpec
spec = LayoutSpec(id="{ID}", wave="{WAVE}", values=("{VALUE}", "mood"))
panel, ledgers, _, _ = stream_panel(sys.argv[1], spec, None, None, parse_size(sys.argv[2]))
print(panel.n_units, panel.n_waves, ledgers["{VALUE}"].rows_read)
"""


def parse_size(text: str) -> int:
    """As paneldiag.io.validate.parse_size, for the sizes this script prints. The parent
    imports neither pandas nor pyarrow: a child's ru_maxrss counts the parent's memory
    copied at fork, so the parent stays small."""
    number = text.rstrip("KMGTBkmgtbi")
    unit = text[len(number):].upper()
    scale = {"": 1, "B": 1, "KB": 10**3, "MB": 10**6, "GB": 10**9, "K": 2**10, "M": 2**20,
             "G": 2**30, "KIB": 2**10, "MIB": 2**20, "GIB": 2**30}[unit]
    return int(float(number) * scale)


def data_files(n_units: int, n_waves: int) -> dict[str, str]:
    """bench_screen.py's cached files, generated in a child process."""
    code = (f"import sys, json; sys.path.insert(0, {str(HERE)!r}); "
            f"from bench_screen import data_files; "
            f"print(json.dumps({{k: str(v) for k, v in data_files({n_units}, {n_waves}).items()}}))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    return json.loads(out.stdout.strip().splitlines()[-1])


def child(args: list[str]) -> tuple[float, float, str]:
    """Wall seconds, peak resident MB and stdout of a child process."""
    env = dict(os.environ, PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1")
    with tempfile.TemporaryFile() as out:
        start = time.perf_counter()
        proc = subprocess.Popen(args, stdout=out, stderr=subprocess.PIPE, env=env)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - start
        err = proc.stderr.read().decode()
        proc.stderr.close()
        out.seek(0)
        text = out.read().decode()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"child failed: {' '.join(args)}\n{err}")
    return wall, usage.ru_maxrss / 1024, text.strip()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=400_000)
    parser.add_argument("--waves", type=int, default=10)
    parser.add_argument("--budgets", default="150MB,300MB")
    parser.add_argument("--formats", default="csv,parquet")
    parser.add_argument("--no-screen", action="store_true", help="skip the screen runs")
    options = parser.parse_args()
    files = data_files(options.units, options.waves)
    python = sys.executable
    _, fixed, _ = child([python, "-c", IMPORTS])
    matrices = options.units * options.waves * 8 * 2 / 2**20
    print(f"panel {options.units:,} units x {options.waves} waves, 2 measures: matrices "
          f"{matrices:.0f} MB; imports alone peak at {fixed:.0f} MB (subtracted: 'data')")
    rows = []
    for fmt in options.formats.split(","):
        path = str(files[fmt])
        size = os.path.getsize(path) / 2**20
        wall, peak, text = child([python, "-c", MEMORY, path])
        base = peak - fixed
        rows.append((fmt, f"memory ({size:.0f} MB file)", "-", wall, peak, base, "", ""))
        for budget in options.budgets.split(","):
            mb = parse_size(budget) / 2**20
            wall_s, peak_s, text_s = child([python, "-c", STREAMED, path, budget])
            assert text_s == text, (text_s, text)   # same units, waves and rows
            data = peak_s - fixed
            rows.append((fmt, "streamed", budget, wall_s, peak_s, data,
                         f"{data / mb:.2f}", f"{data / base:.2f}"))
        if not options.no_screen:
            screen = [python, "-m", "paneldiag", "screen", path, "--id", ID, "--wave", WAVE,
                      "--value", VALUE, "--value", "mood", "--audit-only", "--quiet"]
            with tempfile.TemporaryDirectory() as folder:
                wall, peak, _ = child(screen + ["--json", f"{folder}/a.json"])
                base_screen = peak - fixed
                rows.append((fmt, "screen --audit-only", "-", wall, peak, base_screen, "", ""))
                budget = options.budgets.split(",")[0]
                mb = parse_size(budget) / 2**20
                wall_s, peak_s, _ = child(screen + ["--json", f"{folder}/b.json",
                                                    "--max-memory", budget])
                same = json.load(open(f"{folder}/a.json")) == json.load(open(f"{folder}/b.json"))
                data = peak_s - fixed
                rows.append((fmt, f"screen --audit-only (same JSON: {same})", budget, wall_s,
                             peak_s, data, f"{data / mb:.2f}", f"{data / base_screen:.2f}"))
    print(f"{'format':8} {'run':42} {'budget':>7} {'wall s':>7} {'peak MB':>8} "
          f"{'data MB':>8} {'data/budget':>11} {'vs memory':>9}")
    for fmt, run, budget, wall, peak, data, ratio, versus in rows:
        print(f"{fmt:8} {run:42} {budget:>7} {wall:7.1f} {peak:8.0f} {data:8.0f} "
              f"{ratio:>11} {versus:>9}")


if __name__ == "__main__":
    main()
