"""Shared test helpers."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
FIXTURES = ROOT / "fixtures"


def pytest_addoption(parser):
    parser.addoption("--full-grid", action="store_true",
                     help="run the full simulation grids (tests marked slow)")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--full-grid"):
        return
    skip = pytest.mark.skip(reason="full simulation grid: run with --full-grid")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


def run_cli(*args, stdin: bytes | None = None, cwd=None):
    """Run the installed console entry point in a subprocess, as a user would."""
    # this checkout's package, also when the run's folder is elsewhere
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH")) if p)
    env = dict(os.environ, NO_COLOR="1", PYTHONPATH=path)
    return subprocess.run([sys.executable, "-m", "paneldiag", *map(str, args)], input=stdin,
                          capture_output=True, cwd=cwd, env=env)
