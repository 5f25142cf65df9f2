"""The `dyadcast` command. Each `*_cmd.py` module in this package contributes commands via `COMMANDS`.

Commands that start Prefect flows import them lazily, so `dyadcast --help` stays fast.
"""

from __future__ import annotations

import importlib
import pkgutil
import sys

import click

from dyadcast import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="dyadcast")
def main() -> None:
    """Monthly forecasts of arrivals per origin→destination pair, with an accuracy log."""


def _register() -> None:
    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        if info.name.endswith("_cmd"):
            module = importlib.import_module(f"{__name__}.{info.name}")
            for command in getattr(module, "COMMANDS", ()):
                main.add_command(command)


_register()

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
