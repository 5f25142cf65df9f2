"""`dyadcast features`: build the feature frame of one cutoff, show what went into it, optionally save it."""

from __future__ import annotations

from datetime import date

import click
import duckdb

from dyadcast.cli.common import with_workspace
from dyadcast.months import parse_month
from dyadcast.workspace import Workspace


def _describe(metadata: dict) -> list[str]:
    lines = [
        f"cutoff {metadata['cutoff']} as of {metadata['as_of']}: {metadata['rows']} rows = {metadata['dyads']} dyads x "
        f"{metadata['anchor_months']} months from {metadata['first_anchor_month']}; "
        f"{metadata['rows_with_target_1']} rows with a known next month",
        f"push columns: {', '.join(metadata['push_columns']) or 'none'}",
        f"pull columns: {', '.join(metadata['pull_columns']) or 'none'}",
    ]
    for name, s in metadata["signals"].items():
        chosen = "n/a" if s["correlation"] is None else f"{s['correlation']:.3f}"
        raw = "n/a" if s["raw_correlation"] is None else f"{s['raw_correlation']:.3f}"
        lines.append(
            f"signal {name}: lead {s['lag_days']} days, window {s['window_days']} days "
            f"(correlation {chosen} vs {raw} for the signal as published; {s['n_pairs']} origin-months)"
        )
    if not metadata["signals"]:
        lines.append("signals: none published by the as-of date")
    lines.append(f"built in {metadata['build_seconds']:.1f} s")
    return lines


@click.command("features")
@with_workspace
@click.option("--cutoff", required=True, help="Last month whose arrivals are used (YYYY-MM).")
@click.option("--as-of", "as_of", help="Use only data published on or before this date (YYYY-MM-DD). Default: today.")
@click.option("--out", type=click.Path(dir_okay=False), help="Also write the frame to this Parquet file.")
def features_command(ws: Workspace, cutoff: str, as_of: str | None, out: str | None) -> None:
    """Build the feature frame for a cutoff and show its size and the organic-signal lead chosen."""
    from dyadcast.features import FeatureError, build_features
    from dyadcast.warehouse import open_warehouse

    try:
        cutoff_month = parse_month(cutoff)
        as_of_day = date.fromisoformat(as_of) if as_of else date.today()
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from exc
    config = ws.config()
    try:
        with open_warehouse(ws.warehouse_path) as con:
            fs = build_features(con, cutoff_month, as_of_day, horizon=config.horizon, signal_config=config.signals)
    except FeatureError as exc:
        raise click.ClickException(str(exc)) from exc
    except duckdb.IOException as exc:
        raise click.ClickException(
            f"{ws.warehouse_path} is in use by another dyadcast process ({exc}); retry when the run has finished"
        ) from exc
    for line in _describe(fs.metadata):
        click.echo(line)
    if out:
        fs.frame.to_parquet(out, index=False)
        click.echo(f"frame written to {out}")


COMMANDS = [features_command]
