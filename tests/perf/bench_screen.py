"""Speed and memory of `paneldiag screen` against plain pandas pipelines, measured here.

    python tests/perf/bench_screen.py [--units 1000000] [--waves 20] [--repeat 3]

Generates (once, then cached under bench-data/) a synthetic long panel: one row per unit
and wave it took part in, about 10% of unit-waves absent (mostly monotone dropout,
some intermittent skips), columns person, wave, score, mood; written as CSV and as
Parquet. Then, for each format, runs as separate processes (median of --repeat runs):

- paneldiag:  paneldiag screen FILE --id person --wave wave --value score --json OUT --quiet
- audit:      the same with --audit-only (wave profile, attrition, missingness)
- core:       read + validation + ledger + Panel + wave profile + JSON, in one script
- plain:      pandas read (same columns) + pivot to units x waves + per-wave mean and SD
- extended:   plain + the pairwise-complete correlation matrix (DataFrame.corr)

and prints wall time, peak resident memory (the child's own ru_maxrss from wait4) and
the ratios paneldiag / baseline. Last, an in-process run of paneldiag prints the time
and peak memory after each stage (read, build panel, each summary kind, each report
section, JSON), so bottlenecks are visible. The figures are for reading, not asserting:
this is a script, not a test (pytest does not collect it: its name does not start
with test_).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
DATA_DIR = ROOT / "bench-data"
GENERATOR_VERSION = 1
SEED = 20261201
ID, WAVE, VALUE = "person", "wave", "score"


# ----------------------------------------------------------------------------- data

def panel_arrays(n_units: int, n_waves: int, seed: int = SEED) -> dict[str, np.ndarray]:
    """Long columns of a synthetic panel (neutral data, fixed seed).

    score_it = trait_i + slope_i * t + carry-over a_it + noise, rounded to 2 decimals;
    mood is a second, noisier measure. A unit leaves for good after wave t with a
    probability that rises when its score was low (monotone dropout, about 8% of
    unit-waves), and skips a wave now and then (intermittent, about 2%).
    """
    rng = np.random.default_rng(seed)
    n, t = n_units, n_waves
    trait = rng.normal(50.0, 8.0, n)
    slope = rng.normal(0.4, 0.3, n)
    score = np.empty((n, t))
    carry = rng.normal(0.0, 4.0, n)
    for w in range(t):  # a loop over waves
        if w:
            carry = 0.6 * carry + rng.normal(0.0, 4.0 * np.sqrt(1 - 0.36), n)
        score[:, w] = trait + slope * w + carry + rng.normal(0.0, 3.0, n)
    mood = 0.3 * (score - 50.0) / 8.0 + rng.normal(0.0, 1.0, (n, t))
    present = np.ones((n, t), dtype=bool)
    alive = np.ones(n, dtype=bool)
    z = (score - 50.0) / 9.0
    for w in range(1, t):  # dropout after wave w-1 depends on the score seen there
        hazard = 1.0 / (1.0 + np.exp(-(-4.75 - 0.5 * z[:, w - 1])))
        alive &= rng.random(n) >= hazard
        present[:, w] = alive
    skip = rng.random((n, t)) < 0.022
    skip[:, 0] = False
    present &= ~skip
    unit, wave = np.nonzero(present)
    return {ID: (unit + 1).astype(np.int64), WAVE: (wave + 1).astype(np.int64),
            VALUE: np.round(score[unit, wave], 2), "mood": np.round(mood[unit, wave], 3)}


def data_files(n_units: int, n_waves: int) -> dict[str, Path]:
    """The cached CSV and Parquet files, generated on first use in a process of its
    own: a child inherits its parent's peak memory as its own starting peak
    (ru_maxrss), so generating them here would set a floor under every figure."""
    stem = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}"
    files = {"csv": stem.with_suffix(".csv"), "parquet": stem.with_suffix(".parquet")}
    if not all(p.exists() for p in files.values()):
        print(f"generating {n_units:,} units x {n_waves} waves ...", flush=True)
        code = (f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
                f"import bench_screen; bench_screen._write_files({n_units}, {n_waves})")
        subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=True)
    return files


def _write_files(n_units: int, n_waves: int) -> None:
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    DATA_DIR.mkdir(exist_ok=True)
    stem = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}"
    files = {"csv": stem.with_suffix(".csv"), "parquet": stem.with_suffix(".parquet")}
    table = pa.table(panel_arrays(n_units, n_waves))
    for fmt, path in files.items():
        part = path.with_suffix(path.suffix + ".part")
        if fmt == "csv":
            pacsv.write_csv(table, part,
                            pacsv.WriteOptions(quoting_style="none", include_header=True))
        else:
            pq.write_table(table, part, row_group_size=1 << 20)
        part.rename(path)
    return files


# ----------------------------------------------------------------------------- runs

BASELINE = r"""
import json, sys, time
import pandas as pd
path, fmt, out, extended = sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4] == "1"
cols = ["{id}", "{wave}", "{value}"]
t0 = time.perf_counter()
frame = pd.read_csv(path, usecols=cols) if fmt == "csv" else pd.read_parquet(path, columns=cols)
t1 = time.perf_counter()
wide = frame.pivot(index="{id}", columns="{wave}", values="{value}")
t2 = time.perf_counter()
result = {{"mean": wide.mean().tolist(), "sd": wide.std().tolist(),
          "n": wide.count().tolist()}}
if extended:
    result["corr"] = wide.corr().to_numpy().tolist()
t3 = time.perf_counter()
with open(out, "w") as handle:
    json.dump(result, handle)
json.dump({{"read": t1 - t0, "pivot": t2 - t1, "stats": t3 - t2}}, sys.stdout)
""".format(id=ID, wave=WAVE, value=VALUE)


CORE = r"""
import sys
from paneldiag.diagnostics.profile import wave_profile
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, build_panel
from paneldiag.render.json import report_json
from paneldiag.summaries import summarise
from paneldiag.summaries.moments import WaveMoments
spec = LayoutSpec(id="{id}", wave="{wave}", values=("{value}",))
raw = read_table(sys.argv[1], None, columns=spec.columns())
panel, ledgers = build_panel(raw, spec)
del raw
moments = summarise(panel, "{value}", [WaveMoments])[WaveMoments]
report = {{"sha256": "", "ledger": ledgers["{value}"].to_dict(),
          "wave_profile": wave_profile(moments, panel.wave_labels)}}
with open(sys.argv[2], "w") as handle:
    handle.write(report_json(report))
""".format(id=ID, wave=WAVE, value=VALUE)


def run_child(argv: list[str]) -> tuple[float, float, float, str]:
    """Wall seconds, peak RSS in MiB and CPU seconds (this child's own, via wait4), and
    its standard output."""
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        child = subprocess.Popen(argv, stdout=out, stderr=err, cwd=ROOT)
        _, status, usage = os.wait4(child.pid, 0)
        wall = time.perf_counter() - start
        child.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0), err.seek(0)
        if child.returncode != 0:
            raise SystemExit(f"{argv[:4]} failed ({child.returncode}):\n"
                             + err.read().decode(errors="replace")[-3000:])
        cpu = usage.ru_utime + usage.ru_stime
        return wall, usage.ru_maxrss / 1024.0, cpu, out.read().decode()


def measure(commands: dict[str, list[str]], repeat: int) -> dict[str, dict]:
    """Median wall time, peak memory and CPU time of each command; the runs of the
    commands are interleaved, so a busy machine slows all of them alike."""
    runs = {name: [] for name in commands}
    for _ in range(repeat):
        for name, argv in commands.items():
            runs[name].append(run_child(argv)[:3])
    rows = {}
    for name, found in runs.items():
        walls, peaks, cpus = zip(*found)
        rows[name] = {"wall": statistics.median(walls), "peak": statistics.median(peaks),
                      "cpu": statistics.median(cpus), "walls": walls}
        print(f"  {name:<18} {rows[name]['wall']:7.2f} s  {rows[name]['peak']:7.0f} MiB  "
              f"{rows[name]['cpu']:7.2f} s CPU   (wall of runs: "
              f"{', '.join(f'{w:.2f}' for w in walls)})", flush=True)
    return rows


# ----------------------------------------------------------------------------- stages

def stage_profile(path: Path) -> list[tuple[str, float, float]]:
    """Seconds and peak RSS (MiB, so far) after each stage of an in-process screen."""
    from paneldiag import pipeline as screen_module
    from paneldiag.io.readers import read_table
    from paneldiag.io.validate import LayoutSpec, build_panel
    from paneldiag.render.json import report_json
    from paneldiag.results import plain
    from paneldiag.summaries import summarise

    def peak():
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    stages = []

    clock = [time.process_time()]

    def mark(name, start):
        cpu = time.process_time()
        stages.append((name, time.perf_counter() - start, cpu - clock[0], peak()))
        clock[0] = cpu
        return time.perf_counter()

    spec = LayoutSpec(id=ID, wave=WAVE, values=(VALUE,))
    t = time.perf_counter()
    raw = read_table(str(path), None, columns=spec.columns())
    t = mark("read", t)
    panel, ledgers = build_panel(raw, spec)
    del raw
    t = mark("build panel", t)
    limit = screen_module.one_blas_thread()   # as pipeline.screen does
    limit.__enter__()
    options = screen_module.ScreenOptions(workers=1)   # serial: stage by stage
    ctx = screen_module.MeasureContext(panel=panel, measure=VALUE, options=options,
                                       ledger=ledgers[VALUE])
    summaries = {}
    for kind in screen_module.SUMMARY_KINDS:
        summaries.update(summarise(panel, VALUE, [kind], chunk_units=options.chunk_units,
                                   n_replicates=options.n_replicates))
        t = mark(f"summary {kind.__name__}", t)
    ctx.__dict__["summaries"] = summaries  # the cached_property, filled stage by stage
    report = {}
    for key, section in screen_module.sections():
        result = section(ctx)
        ctx.results[key] = result
        if result is not None:
            report[key] = plain(result)
        t = mark(f"section {key}", t)
    report_json(report)
    mark("JSON text", t)
    limit.__exit__(None, None, None)
    return stages


# ----------------------------------------------------------------------------- main

def machine() -> dict:
    import numpy
    import pandas
    import pyarrow
    with open("/proc/meminfo") as handle:
        mem_kib = int(handle.readline().split()[1])
    return {"cpus": os.cpu_count(), "memory_gib": round(mem_kib / 2 ** 20, 1),
            "python": platform.python_version(), "numpy": numpy.__version__,
            "pandas": pandas.__version__, "pyarrow": pyarrow.__version__,
            "platform": platform.platform()}


RUNS = ("screen", "audit", "core", "plain", "extended")
# (paneldiag run, pandas baseline): the wall-time target of the ratio, or None (shown only)
TARGETS = {("core", "plain"): 1.3, ("audit", "plain"): 1.6, ("screen", "plain"): None,
           ("screen", "extended"): 1.0}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=1_000_000)
    parser.add_argument("--waves", type=int, default=20)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--formats", default="csv,parquet")
    parser.add_argument("--no-stages", action="store_true", help="skip the in-process stages")
    parser.add_argument("--runs", default=",".join(RUNS),
                        help="which runs, comma-separated (default: all of them)")
    args = parser.parse_args(argv)

    info = machine()
    print("machine: " + ", ".join(f"{k} {v}" for k, v in info.items()))
    print(f"load average {', '.join(f'{x:.1f}' for x in os.getloadavg())} (1, 5, 15 min)")
    files = data_files(args.units, args.waves)
    for fmt, path in files.items():
        print(f"{fmt:<8} {path.name}  {path.stat().st_size / 2 ** 20:,.0f} MiB")
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        out = os.path.join(tmp, "out.json")
        for fmt in args.formats.split(","):
            path = str(files[fmt])
            print(f"\n{fmt}: median of {args.repeat} interleaved runs: wall time, peak "
                  "memory, CPU time")
            screen = [sys.executable, "-m", "paneldiag", "screen", path, "--id", ID,
                      "--wave", WAVE, "--value", VALUE, "--json", out, "--quiet"]
            commands = {
                "paneldiag screen": screen,
                "paneldiag audit": screen + ["--audit-only"],
                "paneldiag core": [sys.executable, "-c", CORE, path, out],
                "pandas plain": [sys.executable, "-c", BASELINE, path, fmt, out, "0"],
                "pandas extended": [sys.executable, "-c", BASELINE, path, fmt, out, "1"],
            }
            chosen = args.runs.split(",")
            results[fmt] = measure({name: argv for name, argv in commands.items()
                                    if name.split()[1] in chosen}, args.repeat)
    print("\nratios paneldiag / pandas (wall time, peak memory, CPU time)")
    print("  core = read + ledger + panel + wave profile; audit = screen --audit-only; "
          "screen = the whole screen command")
    print(f"  {'format':<8} {'run':<7} {'baseline':<9} {'time':>6} {'memory':>7} {'CPU':>6}"
          "  target")
    for fmt, rows in results.items():
        for (run, base), target in TARGETS.items():
            p, b = rows.get(f"paneldiag {run}"), rows.get(f"pandas {base}")
            if p is None or b is None:
                continue
            ratio = p["wall"] / b["wall"]
            verdict = "" if target is None else \
                f"  <= {target} time: {'met' if ratio <= target else 'missed'}"
            print(f"  {fmt:<8} {run:<7} {base:<9} {ratio:6.2f} {p['peak'] / b['peak']:7.2f} "
                  f"{p['cpu'] / b['cpu']:6.2f}{verdict}")
    print("  memory target: screen / extended <= 1.0")
    print(f"  load average {', '.join(f'{x:.1f}' for x in os.getloadavg())} (1, 5, 15 min)")
    if not args.no_stages:
        for fmt in args.formats.split(","):
            print(f"\nstages of paneldiag, in process ({fmt}): wall, CPU, peak memory so far")
            code = ("import json, sys; sys.path.insert(0, %r); import bench_screen as b; "
                    "print(json.dumps(b.stage_profile(%r)))" % (str(Path(__file__).parent),
                                                                 str(files[fmt])))
            text = run_child([sys.executable, "-c", code])[3]
            stages = json.loads(text.strip().splitlines()[-1])
            for name, seconds, cpu, peak_mib in stages:
                print(f"  {name:<32} {seconds:7.2f} s  {cpu:7.2f} s CPU  {peak_mib:7.0f} MiB")
            print(f"  {'total':<32} {sum(s[1] for s in stages):7.2f} s  "
                  f"{sum(s[2] for s in stages):7.2f} s CPU")
    return 0


if __name__ == "__main__":
    sys.exit(main())
