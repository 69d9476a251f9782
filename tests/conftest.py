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
    """Run the console entry point in a subprocess, as a user would, with the package of
    this checkout first on the path (whatever the working folder)."""
    path = os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")]))
    env = dict(os.environ, NO_COLOR="1", PYTHONPATH=path)
    return subprocess.run([sys.executable, "-m", "paneldiag", *map(str, args)], input=stdin,
                          capture_output=True, cwd=cwd, env=env)


def search_steps(path: str) -> bool:
    """Whether a report path is the number of steps an iterative fit took (EM, the
    dropout model's Newton steps): it is decided by the last bits of the sums near the
    stopping rule, so where the order of the sums differs (units reordered, chunks,
    partitions) it may differ by a step or two while the estimates agree to rounding."""
    return path.endswith(".iterations")


def json_leaves(node, skip=(), path=""):
    """Every leaf of a JSON-ready report with its path ('.key', '[i]'), keys in ``skip``
    left out."""
    if isinstance(node, dict):
        for key, value in node.items():
            if key not in skip:
                yield from json_leaves(value, skip, f"{path}.{key}")
    elif isinstance(node, list):
        for i, value in enumerate(node):
            yield from json_leaves(value, skip, f"{path}[{i}]")
    else:
        yield path, node


@pytest.fixture(scope="session")
def demo_screen(tmp_path_factory):
    """The invented demo panel (paneldiag/demo.py) screened once for the whole session
    with the command the demo suggests, plus --details: (data file, JSON report,
    terminal text). Tests that read the demo's full screen share it."""
    import json

    from paneldiag.demo import SCREEN_HINT
    folder = tmp_path_factory.mktemp("demo_screen")
    data = folder / "t.csv"
    made = run_cli("demo", data)
    assert made.returncode == 0, made.stderr.decode()
    out = folder / "r.json"
    done = run_cli(*SCREEN_HINT.format(path=data).split()[1:], "--json", str(out), "--details")
    assert done.returncode == 0, done.stderr.decode()
    return data, json.loads(out.read_text()), done.stdout.decode()
