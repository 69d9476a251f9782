"""The benchmark scripts run (their figures are for reading: nothing about speed is
asserted here)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parent / "perf" / "bench_scale.py"


def _run(*options) -> str:
    done = subprocess.run([sys.executable, str(SCRIPT), "--quick", "--repeat", "1", *options],
                          capture_output=True, text=True, cwd=SCRIPT.parents[2])
    assert done.returncode == 0, done.stderr[-3000:]
    return done.stdout


def test_streaming_run_is_used_only_with_the_option():
    usage = subprocess.run([sys.executable, "-m", "paneldiag", "screen", "--help"],
                           capture_output=True, text=True, cwd=SCRIPT.parents[2]).stdout
    out = _run("--parts", "streaming")
    if "--max-memory" in usage:
        assert "peak memory" in out and "skipped" not in out
    else:
        assert "skipped: this paneldiag's screen has no --max-memory option" in out


@pytest.mark.slow
def test_quick_layouts_print_every_ratio():
    out = _run("--parts", "layouts")
    for layout in ("long CSV", "long Parquet", "wide CSV"):
        assert f"\n{layout}: 10,000 units x 20 waves" in out
    assert out.count("screen / pandas extended") == 3
