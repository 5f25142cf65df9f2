"""Options and error handling shared by every command."""

from __future__ import annotations

import functools
from collections.abc import Callable
from typing import Any

import click

from dyadcast.config import ConfigError
from dyadcast.workspace import Workspace, WorkspaceError, open_workspace

workspace_option = click.option(
    "--workspace",
    "-w",
    "workspace_dir",
    type=click.Path(file_okay=False),
    default=None,
    help="Workspace folder (default: $DYADCAST_WORKSPACE, else the current folder).",
)


def with_workspace(func: Callable[..., Any]) -> Callable[..., Any]:
    """Open the workspace named by --workspace and pass it as `ws`; friendly errors instead of tracebacks."""

    @workspace_option
    @functools.wraps(func)
    def wrapper(*args: Any, workspace_dir: str | None = None, **kwargs: Any) -> Any:
        try:
            ws: Workspace = open_workspace(workspace_dir)
            ws.config()
        except (WorkspaceError, ConfigError) as exc:
            raise click.ClickException(str(exc)) from exc
        return func(*args, ws=ws, **kwargs)

    return wrapper
