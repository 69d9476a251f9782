"""The command line as a user runs it: subprocesses of ``python -m paneldiag``."""

from __future__ import annotations

import hashlib
import json
import os
import pty
import re
import subprocess
import sys

import pytest

from conftest import ROOT, run_cli
from test_bad_input import run_forked

DOCS = ROOT / "docs" / "json-report.md"
LONG = ["--id", "household", "--wave", "year", "--missing-codes", "-9,-8"]


@pytest.fixture(scope="module")
def demo_bytes() -> bytes:
    result = run_cli("demo", "--households", "100", "-")
    assert result.returncode == 0, result.stderr
    return result.stdout


@pytest.fixture(scope="module")
def demo_file(tmp_path_factory, demo_bytes):
    path = tmp_path_factory.mktemp("demo") / "tenants.csv"
    path.write_bytes(demo_bytes)
    return path


@pytest.fixture(scope="module")
def quiet_run(demo_file, tmp_path_factory):
    folder = tmp_path_factory.mktemp("quiet")
    out = folder / "report.json"
    result = run_forked(["screen", demo_file, *LONG, "--value", "trust", "--json", out,
                         "--quiet"], folder)
    return result, out


@pytest.fixture(scope="module")
def terminal_run(demo_file, tmp_path_factory):
    """The same screen as quiet_run without --quiet, its stderr on a pseudo-terminal."""
    out = tmp_path_factory.mktemp("terminal") / "report.json"
    leader, follower = pty.openpty()
    try:
        result = subprocess.run([sys.executable, "-m", "paneldiag", "screen", str(demo_file),
                                 *LONG, "--value", "trust", "--json", str(out)],
                                stdout=subprocess.PIPE, stderr=follower,
                                env=dict(os.environ, NO_COLOR="1"))
        os.close(follower)
        follower = None
        shown = b""
        while True:
            try:
                block = os.read(leader, 4096)
            except OSError:
                break
            if not block:
                break
            shown += block
    finally:
        if follower is not None:
            os.close(follower)
        os.close(leader)
    return result, shown, out


@pytest.fixture(scope="module")
def piped_run(demo_bytes, tmp_path_factory):
    """`paneldiag demo - | paneldiag screen - ...` with two measures."""
    out = tmp_path_factory.mktemp("piped") / "report.json"
    demo = subprocess.Popen([sys.executable, "-m", "paneldiag", "demo", "--households", "100",
                             "-"], stdout=subprocess.PIPE)
    screen = subprocess.run([sys.executable, "-m", "paneldiag", "screen", "-", *LONG,
                             "--value", "energy_use", "--value", "trust", "--weight", "weight",
                             "--json", str(out)],
                            stdin=demo.stdout, capture_output=True)
    demo.stdout.close()
    assert demo.wait() == 0
    return screen, out


def documented_top_level_keys() -> list[str]:
    text = DOCS.read_text(encoding="utf-8")
    table = text.split("## Top level", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"^\| `([a-z_]+)` \|", table, flags=re.M)


def test_quiet_prints_nothing(quiet_run):
    result, out = quiet_run
    assert result.returncode == 0, result.stderr
    assert result.stdout == b"" and result.stderr == b""
    assert out.exists()


def test_progress_and_summary_on_a_terminal(terminal_run):
    result, shown, _ = terminal_run
    assert result.returncode == 0
    assert b"reading" in shown                       # stage messages go to the terminal
    text = result.stdout.decode("utf-8")
    assert text.startswith("paneldiag ") and "trust" in text
    assert "reading" not in text                     # and never to standard output


def test_same_input_twice_gives_identical_json(quiet_run, terminal_run):
    assert quiet_run[1].read_bytes() == terminal_run[2].read_bytes()


def test_report_foundation_keys(quiet_run, demo_file, demo_bytes):
    report = json.loads(quiet_run[1].read_text(encoding="utf-8"))
    assert list(report)[:7] == ["schema_version", "tool", "input", "measure", "ledger",
                                "panel", "wave_profile"]
    assert list(report)[-1] == "cautions"
    from paneldiag import SCHEMA_VERSION, __version__
    assert report["schema_version"] == SCHEMA_VERSION
    assert report["tool"] == {"name": "paneldiag", "version": __version__}
    assert list(report["input"]) == ["path", "sha256", "format", "options"]
    assert report["input"]["path"] == str(demo_file)
    assert report["input"]["sha256"] == hashlib.sha256(demo_bytes).hexdigest()
    assert report["input"]["format"] == "csv"
    assert report["input"]["options"]["missing_codes"] == "-9,-8"
    ledger = report["ledger"]
    assert list(ledger) == ["rows_read", "rows_used", "rows_dropped", "dropped_by_reason",
                            "units", "waves", "layout"]
    assert ledger["rows_read"] == demo_bytes.count(b"\n") - 1
    assert ledger["rows_read"] == ledger["rows_used"] + ledger["rows_dropped"]
    assert ledger["rows_dropped"] == sum(ledger["dropped_by_reason"].values())
    panel = report["panel"]
    assert list(panel) == ["n_units", "n_waves", "waves", "times", "time_unit", "wave_reading"]
    # the demo's years: 2015-2023 without 2020 (paneldiag/demo.py)
    assert panel["waves"] == ["2015", "2016", "2017", "2018", "2019", "2021", "2022", "2023"]
    assert panel["times"] == [2015, 2016, 2017, 2018, 2019, 2021, 2022, 2023]
    assert panel["time_unit"] == "year" and panel["wave_reading"] == {"read_as": "numbers"}
    assert panel["n_units"] == ledger["units"] == 100 and panel["n_waves"] == 8
    rows = report["wave_profile"]
    assert [r["wave"] for r in rows] == panel["waves"]
    for row in rows:
        assert list(row) == ["wave", "n", "mean", "sd", "min", "max", "skewness",
                             "floor_share", "ceiling_share", "distinct"]
    assert isinstance(report["cautions"], list) and report["cautions"]


def test_every_top_level_key_is_documented(quiet_run, piped_run):
    documented = documented_top_level_keys()
    report = json.loads(quiet_run[1].read_text(encoding="utf-8"))
    undocumented = [k for k in report if k not in documented]
    assert not undocumented, f"keys missing from docs/json-report.md: {undocumented}"
    # and in the documented order
    assert [k for k in documented if k in report] == list(report)
    several = json.loads(piped_run[1].read_text(encoding="utf-8"))
    assert list(several)[:4] == ["schema_version", "tool", "input", "measures"]
    text = DOCS.read_text(encoding="utf-8")
    for key in several:
        assert f"`{key}`" in text


def test_piped_demo_with_several_measures(piped_run):
    result, out = piped_run
    assert result.returncode == 0, result.stderr
    assert result.stderr == b""      # not --quiet, but stderr is a pipe: no progress
    report = json.loads(out.read_text(encoding="utf-8"))
    assert report["input"]["path"] == "-"
    assert list(report["measures"]) == ["energy_use", "trust"]
    for name, measure in report["measures"].items():
        assert measure["measure"] == name
        assert measure["ledger"]["rows_read"] == \
            measure["ledger"]["rows_used"] + measure["ledger"]["rows_dropped"]
        assert measure["weighting"]["sections"]["wave_profile"] is True   # --weight given
        assert measure["attrition"]["weighted"] is True and \
            measure["panel"]["weighted"] is False
    # energy_use has no refusal codes; the 0-10 trust scale does (paneldiag/demo.py)
    reasons = {n: m["ledger"]["dropped_by_reason"] for n, m in report["measures"].items()}
    assert "declared_missing_code" not in reasons["energy_use"]
    assert reasons["trust"]["declared_missing_code"] > 0
    text = result.stdout.decode("utf-8")
    assert all(name in text for name in report["measures"])


def test_nan_is_written_as_null(tmp_path):
    # wave 2018 has a single value: its SD (and skewness) is undefined
    lines = ["household,year,trust"]
    for h in range(40):
        for year, value in ((2015, h % 7), (2016, (h * 3) % 8), (2017, (h * 5) % 9)):
            lines.append(f"H{h:03d},{year},{value}")
    lines.append("H000,2018,4")
    source = tmp_path / "tenants.csv"
    source.write_text("\n".join(lines) + "\n")
    out = tmp_path / "report.json"
    result = run_forked(["screen", source, "--id", "household", "--wave", "year", "--value",
                     "trust", "--json", out, "--quiet"], tmp_path)
    assert result.returncode == 0, result.stderr
    text = out.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    last = json.loads(text)["wave_profile"][-1]
    # one respondent: a count under --min-cell, withheld by the disclosure audit
    assert last["wave"] == "2018" and last["n"] is None
    assert last["sd"] is None and last["skewness"] is None and last["mean"] == 4


def test_wide_layout(tmp_path):
    lines = ["household,trust_a,trust_b,trust_c"]
    for h in range(30):
        cells = [str((h * k) % 11) if (h + k) % 9 else "" for k in (1, 2, 3)]
        lines.append(f"H{h:03d}," + ",".join(cells))
    source = tmp_path / "tenants.tsv"
    source.write_text("\n".join(lines).replace(",", "\t") + "\n")
    out = tmp_path / "report.json"
    result = run_forked(["screen", source, "--id", "household", "--wide",
                     "trust=trust_a,trust_b,trust_c", "--wave-labels", "2019,2020,2022",
                     "--json", out, "--quiet"], tmp_path)
    assert result.returncode == 0, result.stderr
    report = json.loads(out.read_text(encoding="utf-8"))
    assert report["input"]["format"] == "tsv"
    assert report["panel"]["waves"] == ["2019", "2020", "2022"]
    assert report["panel"]["times"] == [2019, 2020, 2022]
    ledger = report["ledger"]
    assert ledger["layout"] == "wide" and ledger["rows_read"] == 30
    assert sum(ledger["cells"].values()) == 90
    assert ledger["cells"]["missing_value"] == sum(1 for h in range(30) for k in (1, 2, 3)
                                                   if (h + k) % 9 == 0)


def test_a_bug_exits_1_with_one_line(monkeypatch, capsys):
    """Anything but an InputProblem is a bug: status 1, one line, no traceback."""
    import paneldiag.io.readers as readers
    from paneldiag.cli import main

    def broken(*args, **kwargs):
        raise ZeroDivisionError("simulated fault")

    monkeypatch.setattr(readers, "read_table", broken)
    with pytest.raises(SystemExit) as done:
        main(["screen", "x.csv", "--id", "a", "--wave", "b", "--value", "c"])
    assert done.value.code == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert err.startswith("paneldiag: internal error: ZeroDivisionError")


def test_usage_errors_exit_2(tmp_path):
    result = run_cli("screen", tmp_path / "x.csv", "--duplicates", "sometimes")
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert lines[0].startswith("paneldiag: error: ")


def test_quiet_means_silent_even_for_degenerate_data(tmp_path):
    # every value equal: correlations and slopes are undefined; no numeric warning may
    # reach the terminal, and the report still gets written
    source = tmp_path / "tenants.csv"
    source.write_text("household,year,trust\n" + "".join(
        f"H{h},{year},5\n" for h in range(6) for year in (2015, 2016)) + "H6,2015,5\n")
    result = run_forked(["screen", source, "--id", "household", "--wave", "year", "--value",
                         "trust", "--json", tmp_path / "r.json", "--quiet"], tmp_path)
    assert result.returncode == 0, result.stderr
    assert result.stdout == b"" and result.stderr == b""
    assert json.loads((tmp_path / "r.json").read_text())["wave_profile"][0]["sd"] == 0


def test_degenerate_data_over_three_waves_is_screened(tmp_path):
    # every value equal over three waves, and every wave constant but differing across
    # waves: standardised change is undefined, which the report says with nulls
    for name, value in (("same.csv", lambda year: 5), ("by_wave.csv", lambda year: year)):
        source = tmp_path / name
        source.write_text("household,year,trust\n" + "".join(
            f"H{h},{year},{value(year)}\n" for h in range(8) for year in (2015, 2016, 2017)))
        result = run_forked(["screen", source, "--id", "household", "--wave", "year",
                             "--value", "trust", "--json", tmp_path / "r.json", "--quiet"],
                            tmp_path)
        assert result.returncode == 0, result.stderr
        report = json.loads((tmp_path / "r.json").read_text())
        assert all(f["verdict"] != "supported" for f in report["families"])


def test_audit_only_keeps_the_audit_and_says_what_it_left_out(demo_file, quiet_run, tmp_path):
    """--audit-only: the same audit figures as the full screen, nothing beyond them."""
    out = tmp_path / "audit.json"
    result = run_forked(["screen", demo_file, *LONG, "--value", "trust", "--json", out,
                         "--audit-only"], tmp_path)
    assert result.returncode == 0, result.stderr
    audit = json.loads(out.read_text())
    full = json.loads(quiet_run[1].read_text())
    assert set(audit) == {"schema_version", "tool", "input", "measure", "ledger", "panel",
                          "wave_profile", "attrition", "missingness", "disclosure",
                          "cautions"}
    # the full report releases more counts, so the disclosure audit may withhold more of
    # the shared sections there: compare them with what either withheld withheld in both
    from paneldiag.disclosure_audit import _withhold
    for path in audit["disclosure"]["secondary_suppressions"] + \
            full["disclosure"]["secondary_suppressions"]:
        keys = tuple(int(k) if k.isdigit() else k for k in path.split("."))
        if keys[0] in ("ledger", "panel", "wave_profile", "attrition", "missingness"):
            _withhold(audit, keys)
            _withhold(full, keys)
    for key in ("ledger", "panel", "wave_profile", "attrition", "missingness"):
        assert audit[key] == full[key], key
    assert audit["input"]["options"]["audit_only"] is True
    assert any("Audit only" in c for c in audit["cautions"])
    assert "Audit only" in result.stdout.decode()
