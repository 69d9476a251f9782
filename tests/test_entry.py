"""Entry-aware attrition through the CLI, on panels of our own making whose entry
design is known (fixtures/entry/make_panels.py): a cohort-sequential school-like panel,
a refreshment-sample panel, and single-cohort panels; expected values from plain pandas
on the same files."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from paneldiag.diagnostics.attrition import classify_entry
from conftest import FIXTURES, run_cli

ENTRY = FIXTURES / "entry"


def _screen(tmp_path, name, *args):
    out = tmp_path / f"{name}.json"
    done = run_cli("screen", ENTRY / f"{name}.csv", *args, "--json", out, "--details")
    assert done.returncode == 0, done.stderr.decode()
    return json.loads(out.read_text()), done.stdout.decode(), tmp_path


def _seen(name, id_col, wave_col, value):
    frame = pd.read_csv(ENTRY / f"{name}.csv")
    wide = frame.pivot(index=id_col, columns=wave_col, values=value)
    return wide.reindex(columns=sorted(wide.columns)).notna().to_numpy()


@pytest.fixture(scope="module")
def school(tmp_path_factory):
    return _screen(tmp_path_factory.mktemp("school"), "school_cohorts", "--id", "pupil",
                   "--wave", "year", "--value", "reading")


def test_school_panel_is_cohort_sequential_without_a_heavy_dropout_caveat(school):
    """Simulation with known truth: a new intake at each of six waves (8% at the first),
    each pupil due at four waves, about 4% leaving at each wave."""
    report, text, _ = school
    entry = report["attrition"]["entry"]
    assert entry["design"] == "cohort_sequential"
    assert entry["first_wave_share"] == pytest.approx(32 / 400)
    assert entry["follow_up_waves"] == 4
    # pandas: each pupil kept to min(entry + 3, last wave), among pupils due beyond entry
    seen = _seen("school_cohorts", "pupil", "year", "reading")
    first = seen.argmax(axis=1)
    end = np.minimum(first + 3, seen.shape[1] - 1)
    due = first < end
    kept = seen[np.arange(len(seen)), end] & due
    assert entry["retained_share"] == pytest.approx(kept.sum() / due.sum())
    assert entry["retained_share"] > 0.8
    # measured from the first wave only, almost no first-wave pupil reaches the last wave
    assert seen[first == 0, -1].mean() < 0.5
    caveats = " ".join(c for f in report["families"] for c in f["caveats"])
    assert "Heavy dropout" not in caveats
    assert "entry: cohort-sequential entry" in text
    # the end of the planned follow-up is not a dropout event in the model
    model = report["attrition"]["selective"]["model"]
    true_events = int(sum(((np.flatnonzero(row)[-1] < e) for row, e in zip(seen, end)
                           if row[:-1].any())))
    assert model["n_events"] == true_events


def test_school_panel_prose_names_waves_by_their_labels(school):
    from paneldiag.render.prose import wave_name
    assert wave_name("2.5", "year") == "the wave at 2.5 years"
    assert wave_name("-2.5", "year") == "wave -2.5"
    assert wave_name("3") == "wave 3" and wave_name("2023", "year") == "the 2023 wave"
    assert wave_name("baseline") == "the baseline wave" and wave_name("T1") == "wave T1"
    from paneldiag.render import prose
    report, cite = school[0], prose.Citations()
    appendix = " ".join(prose.wave_profile(report, cite) + prose.attrition(report, cite))
    assert "design was cohort-sequential" in appendix
    assert "retained to" not in appendix
    assert "(wave 2.5)" in appendix and "lowest at wave -2.5 (" in appendix


def test_refreshment_panel(tmp_path):
    """Simulation with known truth: 300 households at 2015, refreshment samples of 60
    in 2018 and 2021, about 6% leaving each year."""
    done = run_cli("screen", ENTRY / "refreshment.csv", "--id", "household", "--wave", "year",
                   "--value", "trust", "--audit-only", "--json", tmp_path / "r.json",
                   "--details")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads((tmp_path / "r.json").read_text())
    entry = report["attrition"]["entry"]
    assert entry["design"] == "refreshment"
    assert entry["entry_waves"] == ["2018", "2021"]
    assert entry["follow_up_waves"] == 8
    assert [w["n"] for w in entry["by_wave"]] == [300, None, None, 60, None, None,
                                                          60, None]   # zeros are null too
    seen = _seen("refreshment", "household", "year", "trust")
    first = seen.argmax(axis=1)
    for t, row in enumerate(report["attrition"]["retention"]):
        before = first < t
        if t:   # pandas: of the households that entered before the wave
            assert row["retained_share"] == pytest.approx(seen[before, t].mean())
    assert "blocks of new units at 2018, 2021" in done.stdout.decode()


@pytest.mark.parametrize("shares, design", [
    # source: the classification rule of docs/design.md ("Entry designs"), by hand
    ([0.95, 0.03, 0.02], "single_cohort"),
    ([0.70, 0.0, 0.30, 0.0], "refreshment"),
    ([0.08, 0.22, 0.24, 0.22, 0.16, 0.08], "cohort_sequential"),
    ([0.85, 0.03, 0.03, 0.03, 0.03, 0.03], "mixed_entry"),
    ([0.40, 0.60], "mixed_entry"),
])
def test_entry_classification_rule(shares, design):
    assert classify_entry(np.array(shares) * 1000) == design
