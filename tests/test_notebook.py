"""The Python API as a notebook user meets it: a notebook is built with nbformat and
executed by nbclient in a fresh kernel, and its outputs are checked. The panel is
simulated from a process whose truth is known (a stable trait: paneldiag.simulate)."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = Path(__file__).resolve().parents[1]

CELLS = [
    """import numpy as np, pandas as pd
import paneldiag
from paneldiag.simulate import family_values
values = family_values("stable_trait", 800, 6, 1.0, "none", np.random.default_rng(3), "none")
frame = pd.DataFrame(values, columns=[2016, 2017, 2018, 2019, 2020, 2021])
frame.insert(0, "household", [f"H{i:04d}" for i in range(len(frame))])
long = frame.melt(id_vars="household", var_name="year", value_name="trust")""",
    """report = paneldiag.screen(long, id="household", wave="year", value="trust")
report""",
    """print(report.families.set_index("family").loc["stable_trait", "verdict"])""",
    """try:
    paneldiag.screen(long, id="household", wave="yaer", value="trust")
except paneldiag.InputProblem as problem:
    print(problem)""",
]


def test_a_notebook_screens_a_dataframe(tmp_path, monkeypatch):
    notebook = nbformat.v4.new_notebook()
    notebook.cells = [nbformat.v4.new_code_cell(source) for source in CELLS]
    # the kernel inherits this checkout's package, whatever its working folder
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(
        filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    client = nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()
    shown = notebook.cells[1].outputs[0]["data"]
    assert "process families" in shown["text/html"]       # the notebook view
    assert "stable_trait" in shown["text/html"]
    assert shown["text/plain"].startswith("<paneldiag report: 800 units x 6 waves")
    # the true family is supported (simulation with known truth)
    assert notebook.cells[2].outputs[0]["text"].strip() == "supported"
    # errors carry the command's message, with the near match
    message = notebook.cells[3].outputs[0]["text"]
    assert "column 'yaer' not found (did you mean 'year'?)" in message
    assert "(DataFrame" in message
    json.dumps(notebook)   # the executed notebook is valid JSON
