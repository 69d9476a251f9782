"""The command line: parse options, call the library, print. Nothing else lives here.

Exit status: 0 done, 2 bad input or usage (one line on stderr), 1 a bug in paneldiag.
"""

from __future__ import annotations

import os
import sys
import warnings

import click

from paneldiag import __version__
from paneldiag.errors import InputProblem


class Progress:
    """Stage messages on stderr, shown only on a terminal and without --quiet."""

    def __init__(self, quiet: bool):
        self.enabled = not quiet and sys.stderr.isatty()

    def stage(self, text: str) -> None:
        if self.enabled:
            sys.stderr.write(f"\r\033[K{text}…")
            sys.stderr.flush()

    def done(self) -> None:
        if self.enabled:
            sys.stderr.write("\r\033[K")
            sys.stderr.flush()


HEAP_TOP_PAD = 256 << 20   # bytes of freed heap memory the allocator keeps mapped


def keep_freed_memory() -> None:
    """Ask the C library's allocator (glibc's mallopt M_TOP_PAD) to keep up to
    ``HEAP_TOP_PAD`` of freed heap memory mapped instead of returning it at once.

    A screen allocates and frees many arrays of a few MiB; returned memory has to be
    mapped again page by page when the next array comes, and on a virtual machine a
    fresh page can cost more than the arithmetic done on it. With the pad the screen
    takes about half the page faults and runs 10-20 % faster on the benchmark machine
    (docs/performance.md). A no-op where there is no such allocator."""
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes
        ctypes.CDLL(None).mallopt(-2, HEAP_TOP_PAD)   # -2: M_TOP_PAD
    except (OSError, AttributeError):
        pass


def use_color(quiet: bool = False) -> bool:
    return sys.stdout.isatty() and "NO_COLOR" not in os.environ


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="paneldiag")
@click.option("--debug", is_flag=True, help="Show a full traceback on errors.")
@click.pass_context
def cli(ctx: click.Context, debug: bool) -> None:
    """Screen multi-wave panel data before fitting longitudinal models."""
    ctx.obj = {"debug": debug}


def _register() -> None:
    from paneldiag.cli import check_verdicts, demo, screen
    cli.add_command(screen.command)
    cli.add_command(demo.command)
    cli.add_command(check_verdicts.command)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the exit status."""
    keep_freed_memory()
    _register()
    args = sys.argv[1:] if argv is None else argv
    debug = "--debug" in args
    if not debug:  # numeric warnings of libraries are not for the user's terminal
        warnings.simplefilter("ignore")
    try:
        cli.main(args=args, prog_name="paneldiag", standalone_mode=False)
    except InputProblem as problem:
        _fail(f"paneldiag: error: {problem}", 2, debug, problem.listing)
    except click.exceptions.Exit as done:
        return done.exit_code
    except click.Abort:
        _fail("paneldiag: error: interrupted", 2, False)
    except click.ClickException as usage:
        _fail(f"paneldiag: error: {usage.format_message()}", 2, debug)
    except BrokenPipeError:
        return 0
    except Exception as bug:  # anything else is a bug in paneldiag
        _fail(f"paneldiag: internal error: {type(bug).__name__}: {bug} "
              "(please report it; --debug shows the traceback)", 1, debug)
    return 0


def _fail(message: str, status: int, debug: bool, listing=None) -> None:
    if debug:
        import traceback
        traceback.print_exc()
    sys.stderr.write(" ".join(message.split("\n")) + "\n")
    if listing:
        import shutil
        title, items = listing
        width = shutil.get_terminal_size((80, 24)).columns
        sys.stderr.write("".join(line + "\n" for line in wrap_items(f"{title}:", items, width)))
    sys.exit(status)


def wrap_items(title: str, items, width: int, indent: str = "  ") -> list[str]:
    """``title`` and the items, comma-separated, in lines of at most ``width`` characters
    (an item longer than a line gets a line of its own), never breaking inside an item."""
    lines, line = [], indent + title
    for i, item in enumerate(items):
        piece = f"{item}," if i < len(items) - 1 else str(item)
        if len(line) + 1 + len(piece) > width and line.strip():
            lines.append(line)
            line = indent * 2 + piece
        else:
            line += " " + piece
    lines.append(line)
    return lines
