"""`dyadcast ingest`: load the inbox on its own, without a forecast run."""

from __future__ import annotations

import sys

import click

from dyadcast.cli.common import with_workspace
from dyadcast.workspace import Workspace


@click.command("ingest")
@with_workspace
def ingest_command(ws: Workspace) -> None:
    """Validate and load every file in the inbox; exit status 1 if any file was rejected."""
    from dyadcast.ingest import ingest_inbox

    summary = ingest_inbox(ws, progress=click.echo)
    click.echo("")
    click.echo(summary.to_text())
    if not summary.ok:
        click.echo(f"rejected files and their reports are in {ws.quarantine}", err=True)
        sys.exit(1)


COMMANDS = [ingest_command]
