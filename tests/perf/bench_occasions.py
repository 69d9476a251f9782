"""Cost in occasions: `paneldiag screen` at an equal number of rows, from few to many
waves, measured here.

    python tests/perf/bench_occasions.py [--rows 300000] [--waves 20,50,100,150] [--repeat 3]

For each number of waves T, a panel of rows / T units (the synthetic panel of
bench_screen.py: trait, slope, carry-over and noise, monotone dropout and skips) is
written as long CSV under bench-data/ and screened as a separate process
(`paneldiag screen FILE --id person --wave wave --value score --json OUT --quiet`).
Prints the median wall time, peak memory and JSON size of each, and each one's ratio to
the fewest-waves run: the target is 2,000 units x 150 waves within 3 x the time of
15,000 x 20 (the same rows), with a JSON report of at most 5 MB. The runs of the sizes
are interleaved, so a busy machine slows all of them alike. A script for reading, not a
test (pytest does not collect it).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_screen import ID, VALUE, WAVE, data_files, machine, measure  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=300_000)
    parser.add_argument("--waves", default="20,50,100,150")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)
    waves = [int(w) for w in args.waves.split(",")]
    print("machine:", machine())
    with tempfile.TemporaryDirectory() as tmp:
        commands, outputs = {}, {}
        for t in waves:
            n = args.rows // t
            outputs[t] = os.path.join(tmp, f"report_{t}.json")
            commands[f"{n:,} x {t}"] = [sys.executable, "-m", "paneldiag", "screen",
                                        str(data_files(n, t)["csv"]), "--id", ID, "--wave",
                                        WAVE, "--value", VALUE, "--json", outputs[t],
                                        "--quiet"]
        print(f"paneldiag screen at {args.rows:,} rows (median of {args.repeat} runs):")
        rows = measure(commands, args.repeat)
        base_name = next(iter(commands))
        base = rows[base_name]
        print(f"\nratios to {base_name}:")
        for (name, row), t in zip(rows.items(), waves):
            size = os.path.getsize(outputs[t]) / 1e6
            print(f"  {name:<14} wall x{row['wall'] / base['wall']:5.2f}   peak memory "
                  f"x{row['peak'] / base['peak']:5.2f}   JSON {size:6.2f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
