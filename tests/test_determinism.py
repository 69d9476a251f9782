"""Reruns give the same bytes: the JSON report, the appendix (Markdown, HTML) and the
LaTeX tables do not depend on Python's hash seed or the BLAS library's thread count.
A property of the program itself (no outside reference is involved)."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pandas as pd

from paneldiag.simulate import family_values

OUTPUTS = ("report.json", "appendix.md", "appendix.html", "tables.tex")


def _screen(path, folder, **env):
    settings = dict(os.environ, NO_COLOR="1", **env)
    done = subprocess.run([sys.executable, "-m", "paneldiag", "screen", str(path), "--id", "id",
                           "--wave", "wave", "--value", "y", "--report", str(folder), "-q"],
                          capture_output=True, env=settings)
    assert done.returncode == 0, done.stderr.decode()
    return {name: (folder / name).read_bytes() for name in OUTPUTS}


def test_reports_are_byte_identical_across_hash_seeds_and_blas_threads(tmp_path):
    # a trait + carry-over panel with MCAR gaps (simulated, known truth): every area
    # runs, the EM and full-information fits included
    values = family_values("trait_autoregressive", 300, 6, 0.8, "mcar",
                           np.random.default_rng(4), "none")
    frame = pd.DataFrame(values)
    frame.insert(0, "id", [f"u{i}" for i in range(len(frame))])
    long = frame.melt(id_vars="id", var_name="wave", value_name="y").dropna()
    path = tmp_path / "panel.csv"
    long.to_csv(path, index=False)
    runs = [_screen(path, tmp_path / f"run{k}", PYTHONHASHSEED=seed,
                    OPENBLAS_NUM_THREADS=threads, OMP_NUM_THREADS=threads)
            for k, (seed, threads) in enumerate([("1", "1"), ("2", "2"), ("12345", "1")])]
    for name in OUTPUTS:
        assert runs[0][name] == runs[1][name] == runs[2][name], name
