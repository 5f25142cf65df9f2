"""`dyadcast init`: create a workspace."""

from __future__ import annotations

import click

from dyadcast.workspace import SUBDIRS, init_workspace


@click.command("init")
@click.argument("directory", type=click.Path(file_okay=False))
def init_command(directory: str) -> None:
    """Create a workspace in DIRECTORY (folders and a commented dyadcast.toml)."""
    ws = init_workspace(directory)
    click.echo(f"workspace ready at {ws.root}")
    click.echo(f"  folders: {', '.join(SUBDIRS)}; configuration: {ws.config_path.name}")
    click.echo(f"  next: drop files into {ws.inbox} and run `dyadcast run --workspace {ws.root} --cutoff YYYY-MM`")


COMMANDS = [init_command]
