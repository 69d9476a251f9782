"""Speed and memory of the whole `paneldiag screen` by file layout, number of units and
number of occasions, each against plain pipelines measured in the same run.

    python tests/perf/bench_scale.py [--quick] [--repeat 3] [--parts layouts,units,occasions,streaming]

Parts (the sizes in brackets are those of --quick, a smoke run of a few minutes):

- layouts: 1M (10k) units x 20 waves as long CSV, long Parquet and wide CSV; the screen
  against "pandas extended" (read the needed columns, pivot to units x waves, per-wave
  mean and SD, DataFrame.corr) and, when polars is importable, the same pipeline in
  polars. Prints wall time, peak memory and CPU time, and the ratios screen / pandas;
  target <= 1.0 x wall time and <= 1.0 x peak memory.
- units: 250k, 1M and 4M (2.5k, 10k, 40k) units x 20 waves, long Parquet; prints each
  size's time over the middle size's, beside pandas'; target 4M <= 4.4 x the 1M time.
- occasions: 10, 20, 50, 100 and 200 (10, 20, 50) occasions at an equal number of
  unit-waves, 4M (40k), long Parquet; prints each one's time over the 20-occasion run's.
- streaming: 10M (100k) units x 20 waves, long Parquet, screened with --max-memory;
  run only when the screen has that option, otherwise the script says it skipped it.

Every command runs as its own process; the runs within a part are interleaved (run 1
of each command, then run 2, ...) and the medians printed, so a busy machine slows all
of them alike. The load average is printed before each part: compare figures of one
part only, and prefer the CPU-time ratios when the machine is loaded. Data files are
generated once from a fixed seed and cached under bench-data/ (git-ignored). A script
for reading, not a test: nothing is asserted.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import subprocess
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_screen import (BASELINE, DATA_DIR, GENERATOR_VERSION, ID, ROOT, SEED,  # noqa: E402
                          VALUE, WAVE, machine, measure, panel_arrays)

BLOCK_UNITS = 500_000   # units generated at a time for the large files


# ----------------------------------------------------------------------------- data

def long_file(n_units: int, n_waves: int, fmt: str) -> Path:
    """A cached long panel file (the synthetic panel of bench_screen), written in
    blocks of units, so that files of ten million units need little memory. Files of
    at most one block are the same data as bench_screen's."""
    path = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}.{fmt}"
    return path if path.exists() else _in_child("_write_long", n_units, n_waves, fmt)


def wide_file(n_units: int, n_waves: int) -> Path:
    """The long panel's values as a wide CSV: person, score_1 .. score_T (empty where
    a wave is missing)."""
    path = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}_wide.csv"
    return path if path.exists() else _in_child("_write_wide", n_units, n_waves)


def _in_child(writer: str, *args) -> Path:
    """Run a writer in a process of its own: a child inherits its parent's peak
    memory as its own starting peak (ru_maxrss), so generating data here would set a
    floor under every figure measured after it."""
    code = (f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
            f"import bench_scale; print(bench_scale.{writer}(*{args!r}))")
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, text=True,
                          stdout=subprocess.PIPE)
    if done.returncode != 0:
        raise SystemExit(f"generating data failed ({writer}{args})")
    print(done.stdout.splitlines()[0], flush=True)   # the writer's own note
    return Path(done.stdout.strip().splitlines()[-1])


def _write_long(n_units: int, n_waves: int, fmt: str) -> Path:
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    DATA_DIR.mkdir(exist_ok=True)
    path = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}.{fmt}"
    print(f"  generating {n_units:,} units x {n_waves} waves ({fmt}) ...", flush=True)
    part = path.with_suffix(path.suffix + ".part")
    writer = None
    for block, start in enumerate(range(0, n_units, BLOCK_UNITS)):
        size = min(BLOCK_UNITS, n_units - start)
        columns = panel_arrays(size, n_waves, SEED + block)
        columns[ID] = columns[ID] + start
        table = pa.table(columns)
        if writer is None:
            writer = (pacsv.CSVWriter(part, table.schema,
                                      write_options=pacsv.WriteOptions(quoting_style="none"))
                      if fmt == "csv" else pq.ParquetWriter(part, table.schema))
        if fmt == "csv":
            writer.write_table(table)
        else:
            writer.write_table(table, row_group_size=1 << 20)
    writer.close()
    part.rename(path)
    return path


def _write_wide(n_units: int, n_waves: int) -> Path:
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    path = DATA_DIR / f"panel_{n_units}x{n_waves}_v{GENERATOR_VERSION}_wide.csv"
    DATA_DIR.mkdir(exist_ok=True)
    print(f"  generating {n_units:,} units x {n_waves} waves (wide csv) ...", flush=True)
    part = path.with_suffix(".part")
    writer = None
    for block, start in enumerate(range(0, n_units, BLOCK_UNITS)):
        size = min(BLOCK_UNITS, n_units - start)
        columns = panel_arrays(size, n_waves, SEED + block)
        grid = np.full((size, n_waves), np.nan)
        grid[columns[ID] - 1, columns[WAVE] - 1] = columns[VALUE]
        table = pa.table({ID: np.arange(start + 1, start + size + 1, dtype=np.int64),
                          **{f"{VALUE}_{t + 1}": pa.array(grid[:, t], from_pandas=True)
                             for t in range(n_waves)}})   # NaN -> null: an empty field
        if writer is None:
            writer = pacsv.CSVWriter(part, table.schema,
                                     write_options=pacsv.WriteOptions(quoting_style="none"))
        writer.write_table(table)
    writer.close()
    part.rename(path)
    return path


# ----------------------------------------------------------------------------- runs

WIDE_BASELINE = r"""
import json, sys
import pandas as pd
path, out, n_waves = sys.argv[1], sys.argv[2], int(sys.argv[3])
cols = ["{id}"] + [f"{value}_{{t}}" for t in range(1, n_waves + 1)]
wide = pd.read_csv(path, usecols=cols).set_index("{id}")
result = {{"mean": wide.mean().tolist(), "sd": wide.std().tolist(),
          "n": wide.count().tolist(), "corr": wide.corr().to_numpy().tolist()}}
with open(out, "w") as handle:
    json.dump(result, handle)
""".format(id=ID, value=VALUE)

# The pandas extended pipeline in polars: read, pivot, per-wave mean and SD, and the
# pairwise-complete correlations (each pair over the units seen at both waves).
POLARS_BASELINE = r"""
import json, sys
import polars as pl
path, fmt, out = sys.argv[1], sys.argv[2], sys.argv[3]
cols = ["{id}", "{wave}", "{value}"]
frame = pl.read_csv(path, columns=cols) if fmt == "csv" else pl.read_parquet(path, columns=cols)
wide = frame.pivot(on="{wave}", index="{id}", values="{value}")
waves = [c for c in wide.columns if c != "{id}"]
stats = wide.select([pl.col(c).mean().alias("m" + c) for c in waves] +
                    [pl.col(c).std().alias("s" + c) for c in waves]).row(0)
pairs = [pl.corr(pl.when(pl.col(b).is_not_null()).then(pl.col(a)),
                 pl.when(pl.col(a).is_not_null()).then(pl.col(b))).alias(a + "|" + b)
         for i, a in enumerate(waves) for b in waves[i + 1:]]
corr = wide.select(pairs).row(0)
with open(out, "w") as handle:
    json.dump({{"stats": list(stats), "corr": list(corr)}}, handle)
""".format(id=ID, wave=WAVE, value=VALUE)


def screen_command(path: Path, out: str, extra: list[str] | None = None) -> list[str]:
    return [sys.executable, "-m", "paneldiag", "screen", str(path), "--id", ID,
            "--wave", WAVE, "--value", VALUE, "--json", out, "--quiet", *(extra or [])]


def wide_screen_command(path: Path, out: str, n_waves: int) -> list[str]:
    columns = ",".join(f"{VALUE}_{t}" for t in range(1, n_waves + 1))
    return [sys.executable, "-m", "paneldiag", "screen", str(path), "--id", ID,
            "--wide", f"{VALUE}={columns}", "--json", out, "--quiet"]


def has_polars() -> bool:
    return importlib.util.find_spec("polars") is not None


def load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"load average {one:.1f} / {five:.1f} / {fifteen:.1f} (1 / 5 / 15 min), " \
           f"{os.cpu_count()} CPUs"


def ratio_line(name: str, row: dict, base: dict, target: float | None = None) -> str:
    wall, peak, cpu = (row[k] / base[k] for k in ("wall", "peak", "cpu"))
    verdict = "" if target is None else \
        f"   target <= {target}: time {'met' if wall <= target else 'missed'}, " \
        f"memory {'met' if peak <= target else 'missed'}"
    return f"  {name:<40} time x{wall:5.2f}  memory x{peak:5.2f}  CPU x{cpu:5.2f}{verdict}"


# ----------------------------------------------------------------------------- parts

def layouts(units: int, repeat: int, tmp: str) -> None:
    out = os.path.join(tmp, "out.json")
    files = {"long CSV": long_file(units, 20, "csv"),
             "long Parquet": long_file(units, 20, "parquet"),
             "wide CSV": wide_file(units, 20)}
    for layout, path in files.items():
        fmt = "parquet" if path.suffix == ".parquet" else "csv"
        print(f"\n{layout}: {units:,} units x 20 waves, {path.name} "
              f"({path.stat().st_size / 2 ** 20:,.0f} MiB); {load()}")
        if layout == "wide CSV":
            commands = {"paneldiag screen": wide_screen_command(path, out, 20),
                        "pandas extended": [sys.executable, "-c", WIDE_BASELINE, str(path),
                                            out, "20"]}
        else:
            commands = {"paneldiag screen": screen_command(path, out),
                        "pandas extended": [sys.executable, "-c", BASELINE, str(path), fmt,
                                            out, "1"]}
            if has_polars():
                commands["polars extended"] = [sys.executable, "-c", POLARS_BASELINE,
                                               str(path), fmt, out]
        rows = measure(commands, repeat)
        print(ratio_line("screen / pandas extended", rows["paneldiag screen"],
                         rows["pandas extended"], 1.0))
        if "polars extended" in rows:
            print(ratio_line("screen / polars extended", rows["paneldiag screen"],
                             rows["polars extended"]))
    if not has_polars():
        print("\n  polars is not installed here: no polars pipeline in this run")


def growth_in_units(sizes: list[int], repeat: int, tmp: str) -> None:
    out = os.path.join(tmp, "out.json")
    print(f"\ngrowth with units: long Parquet, 20 waves; {load()}")
    commands = {}
    for n in sizes:
        path = long_file(n, 20, "parquet")
        commands[f"paneldiag {n:,}"] = screen_command(path, out)
        commands[f"pandas {n:,}"] = [sys.executable, "-c", BASELINE, str(path), "parquet",
                                     out, "1"]
    rows = measure(commands, repeat)
    middle = sizes[len(sizes) // 2]
    print(f"  against {middle:,} units (target: {sizes[-1]:,} units within 4.4 x the "
          f"time of {middle:,}):")
    for n in sizes:
        mine, pandas = rows[f"paneldiag {n:,}"], rows[f"pandas {n:,}"]
        print(f"  {n:>10,} units x{n / middle:5.2f}: paneldiag time "
              f"x{mine['wall'] / rows[f'paneldiag {middle:,}']['wall']:5.2f} "
              f"(CPU x{mine['cpu'] / rows[f'paneldiag {middle:,}']['cpu']:5.2f}), "
              f"pandas time x{pandas['wall'] / rows[f'pandas {middle:,}']['wall']:5.2f}; "
              f"paneldiag / pandas x{mine['wall'] / pandas['wall']:5.2f}")


def growth_in_occasions(cells: int, waves: list[int], repeat: int, tmp: str) -> None:
    out = os.path.join(tmp, "out.json")
    print(f"\ngrowth with occasions: {cells:,} unit-waves, long Parquet; {load()}")
    commands = {}
    for t in waves:
        path = long_file(cells // t, t, "parquet")
        commands[f"{cells // t:,} x {t}"] = screen_command(path, out)
    rows = measure(commands, repeat)
    base_name = next(name for name, t in zip(commands, waves) if t == 20)
    base = rows[base_name]
    print(f"  against {base_name}:")
    for name in commands:
        print(f"  {name:<16} time x{rows[name]['wall'] / base['wall']:5.2f}  "
              f"memory x{rows[name]['peak'] / base['peak']:5.2f}  "
              f"CPU x{rows[name]['cpu'] / base['cpu']:5.2f}")


def streaming(units: int, budget: str, tmp: str) -> None:
    print(f"\nstreaming: {units:,} units x 20 waves, long Parquet, --max-memory {budget}")
    usage = subprocess.run([sys.executable, "-m", "paneldiag", "screen", "--help"],
                           capture_output=True, text=True, cwd=ROOT).stdout
    if "--max-memory" not in usage:
        print("  skipped: this paneldiag's screen has no --max-memory option (no streaming "
              "read), and the panel would not be screened within a memory budget")
        return
    path = long_file(units, 20, "parquet")
    print(f"  {load()}")
    out = os.path.join(tmp, "out.json")
    rows = measure({"paneldiag streaming": screen_command(path, out,
                                                          ["--max-memory", budget])}, 1)
    print(f"  peak memory {rows['paneldiag streaming']['peak']:,.0f} MiB against the "
          f"budget {budget}")


PARTS = ("layouts", "units", "occasions", "streaming")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes: a smoke run")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--parts", default=",".join(PARTS))
    parser.add_argument("--max-memory", default="2GB",
                        help="the budget of the streaming run (default 2GB)")
    args = parser.parse_args(argv)
    scale = 100 if args.quick else 1
    chosen = args.parts.split(",")
    print("machine: " + ", ".join(f"{k} {v}" for k, v in machine().items()))
    print(load())
    with tempfile.TemporaryDirectory() as tmp:
        if "layouts" in chosen:
            layouts(1_000_000 // scale, args.repeat, tmp)
        if "units" in chosen:
            growth_in_units([n // scale for n in (250_000, 1_000_000, 4_000_000)],
                            args.repeat, tmp)
        if "occasions" in chosen:   # the smoke run stops at 50 occasions
            growth_in_occasions(4_000_000 // scale,
                                [10, 20, 50] if args.quick else [10, 20, 50, 100, 200],
                                args.repeat, tmp)
        if "streaming" in chosen:
            streaming(10_000_000 // scale, args.max_memory, tmp)
    return 0


if __name__ == "__main__":
    sys.exit(main())
