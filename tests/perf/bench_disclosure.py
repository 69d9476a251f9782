"""CPU time and counts withheld of the whole-report disclosure audit on the demo panel,
against the screen without it, measured here, in one run.

    python tests/perf/bench_disclosure.py [--runs audit-one,full-one,full-all] [--repeat 3]

The demo panel (Ostervale Tenant Panel, 2,400 households, 8 waves, 4 districts) is
written to a temporary folder. For each run the screen is made with the audit off
(the baseline), then each measure's audit runs on a copy of its report; the CPU times
(time.process_time, best of --repeat) and their ratio are printed, with the counts
the audit withheld (distinct counts, and the report places holding them). Runs:
audit-one (--audit-only, satisfaction), full-one (the full screen, satisfaction),
full-all (the full screen, three measures). The figures are for reading, not asserting.
"""

from __future__ import annotations

import argparse
import copy
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

RUNS = {"audit-one": (("satisfaction",), True), "full-one": (("satisfaction",), False),
        "full-all": (("satisfaction", "energy_use", "trust"), False)}


def measure(path: str, values, audit_only: bool, repeat: int):
    from paneldiag.disclosure_audit import protect_report
    from paneldiag.request import ScreenRequest, run_screen
    request = ScreenRequest(id=("household",), wave="year", value=values,
                            missing_codes="-9,-8", weight="weight", group="district",
                            audit_only=audit_only, disclosure_audit=False)
    screen_cpu, audit_cpu = [], []
    for _ in range(repeat):   # interleaved: the machine's speed drifts
        start = time.process_time()
        report, panel = run_screen(path, request)
        screen_cpu.append(time.process_time() - start)
        reports = report.get("measures") or {values[0]: report}
        copies = {m: copy.deepcopy(r) for m, r in reports.items()}
        start = time.process_time()
        blocks = {m: protect_report(r, panel, m, request.min_cell) for m, r in copies.items()}
        audit_cpu.append(time.process_time() - start)
    return min(screen_cpu), min(audit_cpu), blocks


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", default=",".join(RUNS))
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    from paneldiag.demo import write_demo
    with tempfile.TemporaryDirectory() as folder:
        path = str(Path(folder) / "tenants.csv")
        write_demo(path)
        for name in args.runs.split(","):
            values, audit_only = RUNS[name]
            screen, audit, blocks = measure(path, values, audit_only, args.repeat)
            counts = sum(b["counts_withheld"] for b in blocks.values())
            places = sum(len(b["secondary_suppressions"]) for b in blocks.values())
            print(f"{name}: screen without the audit {screen:.2f} s CPU, audit {audit:.2f} s "
                  f"(audit / screen {audit / screen:.2f}); withheld {counts} counts in "
                  f"{places} places; unresolved "
                  f"{sum(len(b['unresolved']) for b in blocks.values())}")


if __name__ == "__main__":
    main()
