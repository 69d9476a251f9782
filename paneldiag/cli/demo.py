"""paneldiag demo [PATH]: write the invented demo panel (Ostervale Tenant Panel).

    paneldiag demo tenants.csv            # then screen it with the command it prints
    paneldiag demo - | paneldiag screen - --id household --wave year --value trust
The data are generated from a fixed seed: the same command always writes the same bytes.
"""

from __future__ import annotations

import io
import sys

import click

from paneldiag.demo import LABEL, SCREEN_HINT, write_demo
from paneldiag.io.output import write_atomic


@click.command("demo")
@click.argument("path", default="-", required=False)
@click.option("--format", "fmt", type=click.Choice(["csv", "tsv", "parquet"]), default=None,
              help="Output format (default: from the extension, else csv).")
@click.option("--households", type=click.IntRange(10), default=2400, show_default=True,
              help="Number of households.")
def command(path, fmt, households):
    """Write the invented demo panel to PATH ('-' for standard output)."""
    if fmt is None:
        fmt = "parquet" if path.endswith((".parquet", ".pq")) else \
            "tsv" if path.endswith(".tsv") else "csv"
    buffer = io.BytesIO() if fmt == "parquet" else io.StringIO()
    rows = write_demo(buffer, fmt, households)
    payload = buffer.getvalue()
    if path == "-":
        if isinstance(payload, str):
            sys.stdout.write(payload)
        else:
            sys.stdout.buffer.write(payload)
        return
    write_atomic(path, payload)
    click.echo(f"wrote {rows:,} rows of the {LABEL} to {path}", err=True)
    click.echo("screen it with:\n  " + SCREEN_HINT.format(path=path), err=True)
