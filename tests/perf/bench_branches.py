"""The whole screen of two checkouts of paneldiag against pandas extended, interleaved.

    python tests/perf/bench_branches.py OTHER_CHECKOUT [--formats csv,parquet] [--repeat 3]

Compares this checkout's `paneldiag screen` (threaded, and serial with
PANELDIAG_WORKERS=1) with another checkout's (say, the main branch exported with
``git archive``) on bench_screen's 1M x 20 panel, beside the pandas extended pipeline,
each run its own process, runs interleaved and medians printed with the load average.
A script for reading, not a test: nothing is asserted.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_screen import BASELINE, ID, ROOT, VALUE, WAVE, data_files, machine, measure  # noqa: E402


def load() -> str:
    return "load average " + " / ".join(f"{x:.1f}" for x in os.getloadavg()) + \
        " (1 / 5 / 15 min)"


def screen(checkout: Path, path: str, out: str, workers: str | None = None) -> list[str]:
    # -P: the checkout on PYTHONPATH is imported, not the working folder's paneldiag
    env = ["env", f"PYTHONPATH={checkout}"] + ([f"PANELDIAG_WORKERS={workers}"]
                                                 if workers else [])
    return env + [sys.executable, "-P", "-m", "paneldiag", "screen", path, "--id", ID,
                  "--wave", WAVE, "--value", VALUE, "--json", out, "--quiet"]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("other", type=Path)
    parser.add_argument("--units", type=int, default=1_000_000)
    parser.add_argument("--formats", default="csv,parquet")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-serial", action="store_true",
                        help="leave out this checkout's serial run")
    args = parser.parse_args(argv)
    print("machine: " + ", ".join(f"{k} {v}" for k, v in machine().items()))
    files = data_files(args.units, 20)
    with tempfile.TemporaryDirectory() as tmp:
        out = os.path.join(tmp, "out.json")
        for fmt in args.formats.split(","):
            path = str(files[fmt])
            print(f"\n{fmt}, {args.units:,} x 20: median of {args.repeat}; {load()}")
            commands = {"this screen": screen(ROOT, path, out),
                        "other screen": screen(args.other.resolve(), path, out),
                        "pandas extended": [sys.executable, "-c", BASELINE, path, fmt,
                                            out, "1"]}
            if not args.no_serial:
                commands["this serial"] = screen(ROOT, path, out, "1")
            rows = measure(commands, args.repeat)
            base = rows["pandas extended"]
            for name in commands:
                row = rows[name]
                print(f"  {name:<16} / pandas extended: time x{row['wall'] / base['wall']:5.2f}"
                      f"  memory x{row['peak'] / base['peak']:5.2f}"
                      f"  CPU x{row['cpu'] / base['cpu']:5.2f}")
            print(f"  {load()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
