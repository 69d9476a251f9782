"""The bad-input corpus, run through the real command line in subprocesses.

Every file in fixtures/bad/ is one case; fixtures/bad/expected.txt gives the options, the
expected message fragment and the expected location. Each run must exit with status 2,
print one line on stderr (``paneldiag: error: WHAT (FILE:ROW:COLUMN)``), show no
traceback, write nothing and leave the input byte for byte as it was. Only a listing that
belongs to the message (the whole header of a file whose column is not found) may follow
that line, indented.

Each case runs in its own child process. To keep the corpus fast, the child is forked
from the test process (which has already imported paneldiag) and runs the command line's
``main`` with the case's arguments, its own working folder, no standard input, and stdout
and stderr on files, then exits with main's status. A few cases also go through the full
``python -m paneldiag`` start to cover the entry point itself.
"""

from __future__ import annotations

import hashlib
import io
import os
import shlex
import sys
import tempfile

import pytest

from conftest import FIXTURES, run_cli

BAD = FIXTURES / "bad"


def load_cases() -> list[tuple[str, list[str], str, str]]:
    cases = []
    for line in (BAD / "expected.txt").read_text(encoding="utf-8").splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        name, options, fragment, location = (part.strip() for part in line.split(" | "))
        cases.append((name, shlex.split(options), fragment, location))
    return cases


CASES = load_cases()


def load_limit_cases() -> list[tuple[str, list[str], str, str]]:
    """The resource-limit cases of fixtures/bad/expected-limits.txt (same format)."""
    cases = []
    for line in (BAD / "expected-limits.txt").read_text(encoding="utf-8").splitlines():
        if line.strip() and not line.startswith("#"):
            name, options, fragment, location = (part.strip() for part in line.split(" | "))
            cases.append((name, shlex.split(options), fragment, location))
    return cases


LIMIT_CASES = load_limit_cases()


def digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


class Outcome:
    def __init__(self, returncode: int, stdout: bytes, stderr: bytes):
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr


def run_forked(args: list[str], cwd) -> Outcome:
    """Run ``paneldiag.cli.main(args)`` in a forked child process, as the console would."""
    import pyarrow.csv, pyarrow.feather, pyarrow.parquet, pyreadr, pyreadstat  # noqa: F401
    import python_calamine  # noqa: F401  (the readers, imported once, here)

    import paneldiag.cli.demo, paneldiag.cli.screen  # noqa: F401
    import paneldiag.render.json, paneldiag.render.terminal, paneldiag.pipeline  # noqa: F401
    from paneldiag.cli import main

    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        pid = os.fork()
        if pid == 0:  # the child: never returns into pytest
            status = 1
            try:
                os.chdir(cwd)
                null = os.open(os.devnull, os.O_RDONLY)
                os.dup2(null, 0)
                os.dup2(out.fileno(), 1)
                os.dup2(err.fileno(), 2)
                sys.stdin = io.TextIOWrapper(io.FileIO(0, "r", closefd=False))
                sys.stdout = io.TextIOWrapper(io.FileIO(1, "w", closefd=False), "utf-8")
                sys.stderr = io.TextIOWrapper(io.FileIO(2, "w", closefd=False), "utf-8")
                try:
                    status = main([str(a) for a in args]) or 0
                except SystemExit as done:
                    status = done.code if isinstance(done.code, int) else 1
            finally:
                for stream in (sys.stdout, sys.stderr):
                    try:
                        stream.flush()
                    except Exception:
                        pass
                os._exit(status)
        _, wait_status = os.waitpid(pid, 0)
        out.seek(0)
        err.seek(0)
        return Outcome(os.waitstatus_to_exitcode(wait_status), out.read(), err.read())


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory):
    """Run every case once, recording what it did."""
    results = {}
    for name, options, _, _ in CASES:
        out = tmp_path_factory.mktemp(name.replace(".", "_"))
        source = BAD / name
        before = digest(source)
        result = run_forked(["screen", source, *options, "--json", out / "report.json"], out)
        results[name] = (result, before, digest(source), sorted(p.name for p in out.iterdir()))
    return results


ENTRY_POINT_CASES = ["semicolons.csv", "duplicate_unit_wave.csv", "several_frames.RData",
                     "title_row_text_cell.xlsx"]


@pytest.mark.parametrize("name", ENTRY_POINT_CASES)
def test_entry_point_agrees(outcomes, tmp_path, name):
    """The full ``python -m paneldiag`` start prints the same line as the forked run."""
    case = next(c for c in CASES if c[0] == name)
    result = run_cli("screen", BAD / name, *case[1], "--json", tmp_path / "report.json")
    assert result.returncode == 2
    assert result.stderr == outcomes[name][0].stderr
    assert not (tmp_path / "report.json").exists()


def test_corpus_is_complete():
    listed = {case[0] for case in CASES + LIMIT_CASES}
    present = {p.name for p in BAD.iterdir() if not p.name.startswith("expected")}
    assert listed == present
    assert len(listed) >= 60


@pytest.mark.parametrize("name,options,fragment,location", CASES, ids=[c[0] for c in CASES])
def test_bad_input(outcomes, name, options, fragment, location):
    result, before, after, written = outcomes[name]
    stderr = result.stderr.decode("utf-8")
    assert result.returncode == 2, stderr
    assert "Traceback" not in stderr
    lines = stderr.splitlines()
    assert all(extra.startswith("  ") for extra in lines[1:]), stderr
    assert len(lines) == 1 or "listed below" in lines[0], stderr
    line = lines[0]
    assert line.startswith("paneldiag: error: ")
    assert fragment in line
    source = str(BAD / name)
    if location == "none":
        assert source not in line
    elif location == "-":
        assert line.endswith(f"({source})")
    else:
        assert line.endswith(f"({source}:{location})")
    assert result.stdout == b""
    assert written == []            # no report, no stray temporary file
    assert before == after          # the input is untouched


def test_output_path_equal_to_input_is_refused(tmp_path):
    source = tmp_path / "tenants.csv"
    source.write_text("household,year,trust\nH1,2015,5\nH1,2016,6\nH2,2015,4\nH2,2016,4\n")
    before = digest(source)
    result = run_cli("screen", source, "--id", "household", "--wave", "year", "--value",
                     "trust", "--json", source)
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert "the output path is the input file" in lines[0]
    assert digest(source) == before
    # the same file reached through another name is refused as well
    link = tmp_path / "alias.csv"
    link.symlink_to(source)
    result = run_forked(["screen", source, "--id", "household", "--wave", "year", "--value",
                         "trust", "--json", link], tmp_path)
    assert result.returncode == 2 and digest(source) == before


def test_output_folder_missing(tmp_path):
    source = tmp_path / "tenants.csv"
    source.write_text("household,year,trust\n" + "".join(
        f"H{u},{2015 + w},{(u * 7 + w * 3) % 10}\n" for u in range(12) for w in range(3)))
    result = run_cli("screen", source, "--id", "household", "--wave", "year", "--value",
                     "trust", "--json", tmp_path / "no" / "such" / "report.json")
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert "output folder does not exist" in lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["tenants.csv"]


@pytest.mark.parametrize("target,fragment", [("no-such-file.csv", "file not found"),
                                             (".", "is a folder, not a file")])
def test_paths_that_are_not_files(tmp_path, target, fragment):
    result = run_forked(["screen", target, "--format", "csv", "--id", "household", "--wave",
                         "year", "--value", "trust", "--json", "report.json"], tmp_path)
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert fragment in lines[0] and lines[0].endswith(f"({target})")
    assert not (tmp_path / "report.json").exists()


def test_empty_standard_input(tmp_path):
    result = run_cli("screen", "-", "--id", "household", "--wave", "year", "--value", "trust",
                     stdin=b"")
    assert result.returncode == 2
    assert result.stderr.decode() == "paneldiag: error: file is empty (-)\n"


# ------------------------------------------------------------------- resource limits
# Inputs beyond a limit (waves, memory) or a measure that is text stop with one line
# naming the limit and how to raise it, before the units x waves matrices are made.

@pytest.mark.parametrize("name,options,fragment,location", LIMIT_CASES,
                         ids=[f"{c[0]}:{c[1][-2]}" for c in LIMIT_CASES])
def test_resource_limit(tmp_path, name, options, fragment, location):
    source = BAD / name
    before = digest(source)
    result = run_forked(["screen", source, *options, "--json", tmp_path / "report.json"],
                        tmp_path)
    lines = result.stderr.decode("utf-8").splitlines()
    assert result.returncode == 2 and len(lines) == 1, lines
    assert lines[0].startswith("paneldiag: error: ") and fragment in lines[0]
    assert "limit" in lines[0] or "text, not numbers" in lines[0]
    if location == "none":
        assert str(source) not in lines[0]
    else:
        suffix = "" if location == "-" else f":{location}"
        assert lines[0].endswith(f"({source}{suffix})")
    assert result.stdout == b"" and list(tmp_path.iterdir()) == []
    assert digest(source) == before


def test_memory_limit_raised_as_the_message_says(tmp_path):
    # the remedy the message offers (--memory-limit 188KiB) lets the same screen run
    result = run_forked(["screen", BAD / "limits_memory.csv", "--id", "household", "--wave",
                         "year", "--value", "trust", "--memory-limit", "188KiB", "--audit-only",
                         "--json", tmp_path / "report.json"], tmp_path)
    assert result.returncode == 0, result.stderr.decode()
    assert (tmp_path / "report.json").exists()


def test_memory_limit_must_be_a_size(tmp_path):
    result = run_forked(["screen", BAD / "limits_memory.csv", "--id", "household", "--wave",
                         "year", "--value", "trust", "--memory-limit", "lots"], tmp_path)
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert "--memory-limit takes a size such as 2GB, 500MB or 8G, got 'lots'" in lines[0]


def test_millions_of_wave_labels_stop_before_the_labels_are_read(tmp_path):
    # a million distinct visit labels: the count is checked on the factorised column,
    # before the labels are parsed one by one and before any matrix is made; the child's
    # peak memory stays near that of reading the file (checked loosely: within 1 GiB)
    import resource
    rows = 1_000_000
    data = tmp_path / "visits.csv"
    with open(data, "w") as f:
        f.write("household,visit,energy_use\n")
        f.writelines(f"H{i // 2},v{i},1.5\n" for i in range(rows))
    result = run_forked(["screen", data, "--id", "household", "--wave", "visit", "--value",
                         "energy_use"], tmp_path)
    lines = result.stderr.decode().splitlines()
    assert result.returncode == 2 and len(lines) == 1
    assert "has 1,000,000 distinct values, more than the 500 waves" in lines[0]
    peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    assert peak_kib < 1024 * 1024, peak_kib
