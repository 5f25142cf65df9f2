"""`dyadcast demo`: build an invented scenario, backfill its history, backtest, then replay monthly cycles."""

from __future__ import annotations

import shutil
import time
from pathlib import Path

import click
import duckdb

from dyadcast.months import add_months, format_month, parse_month
from dyadcast.prefect_env import configure_prefect
from dyadcast.workspace import init_workspace

DEMO_MARKER = ".dyadcast-demo"
DEMO_MODELS = ("persistence", "seasonal_persistence", "rolling_mean", "poisson_glm", "ppml_gravity",
               "negative_binomial", "zinb", "hurdle_nb", "tweedie_gbm", "ensemble")


def _prepare_folder(root: Path) -> None:
    """Rebuild a previous demo workspace; never delete a folder the demo did not make."""
    if root.exists() and any(root.iterdir()):
        if not (root / DEMO_MARKER).exists():
            raise click.ClickException(
                f"{root} exists and is not a demo workspace; choose another --workspace or remove it yourself"
            )
        shutil.rmtree(root)
    init_workspace(root)
    (root / DEMO_MARKER).write_text("made by `dyadcast demo`; safe to delete\n", encoding="utf-8")


def _write_demo_config(path: Path, models: tuple[str, ...], primary: str) -> None:
    text = path.read_text(encoding="utf-8")
    listed = ", ".join(f'"{m}"' for m in models)
    text = text.replace('models = ["persistence", "poisson_glm"]', f"models = [{listed}]")
    text = text.replace('primary_model = "poisson_glm"', f'primary_model = "{primary}"')
    path.write_text(text, encoding="utf-8")


@click.command("demo")
@click.option("--workspace", "-w", "workspace_dir", default="demo-workspace", show_default=True,
              type=click.Path(file_okay=False), help="Folder for the demo workspace (rebuilt on every demo).")
@click.option("--replay", default=12, show_default=True, help="Monthly cycles to replay after the backfill.")
@click.option("--backtest", "backtest_months", default=12, show_default=True,
              help="Past cutoffs to backtest before the replay.")
@click.option("--seed", default=7, show_default=True, help="Seed of the invented scenario.")
@click.option("--models", default=",".join(DEMO_MODELS), show_default=True, help="Comma-separated models.")
@click.option("--primary", default="tweedie_gbm", show_default=True, help="Model shown first in the report.")
def demo_command(workspace_dir: str, replay: int, backtest_months: int, seed: int, models: str, primary: str) -> None:
    """Run the whole job on an invented region: history, backtest, then monthly replays."""
    from dyadcast.demo.drops import publication_date, write_history_drop, write_monthly_drop
    from dyadcast.demo.scenario import generate_scenario, scenario_stats

    started = time.perf_counter()
    root = Path(workspace_dir).resolve()
    _prepare_folder(root)
    model_names = tuple(m.strip() for m in models.split(",") if m.strip())
    _write_demo_config(root / "dyadcast.toml", model_names, primary)
    configure_prefect(root / ".prefect")

    scenario = generate_scenario(seed=seed)
    stats = scenario_stats(scenario)
    last_month = parse_month(scenario.flows["month"].max())
    first_replay = add_months(last_month, -(replay - 1))
    history_end = add_months(first_replay, -1)
    click.echo(f"[demo] invented scenario: {stats}")
    written = write_history_drop(scenario, format_month(history_end), root / "inbox")
    click.echo(f"[demo] dropped history up to {format_month(history_end)}: {len(written)} files")

    from flows.backtest import backtest
    from flows.monthly_cycle import monthly_cycle

    click.echo("[demo] starting Prefect (a temporary local server; the first start takes 20-40 s) ...")
    cutoffs = []
    step = 0
    total_steps = 1 + (1 if backtest_months else 0) + replay
    step += 1
    click.echo(f"[demo {step}/{total_steps}] backfill ingest and cycle at {format_month(history_end)}")
    monthly_cycle(workspace=str(root), cutoff=format_month(history_end),
                  as_of=publication_date(format_month(history_end)).isoformat())
    cutoffs.append(format_month(history_end))
    if backtest_months:
        step += 1
        bt_start = add_months(history_end, -backtest_months)
        bt_end = add_months(history_end, -1)
        click.echo(f"[demo {step}/{total_steps}] backtest {format_month(bt_start)}..{format_month(bt_end)}")
        backtest(workspace=str(root), start=format_month(bt_start), end=format_month(bt_end))
    for k in range(replay):
        month = add_months(first_replay, k)
        step += 1
        files = write_monthly_drop(scenario, format_month(month), root / "inbox")
        click.echo(f"[demo {step}/{total_steps}] dropped {len(files)} files for {format_month(month)}; monthly cycle")
        monthly_cycle(workspace=str(root), cutoff=format_month(month),
                      as_of=publication_date(format_month(month)).isoformat())
        cutoffs.append(format_month(month))
    _summary(root, cutoffs, time.perf_counter() - started)


def _summary(root: Path, cutoffs: list[str], seconds: float) -> None:
    con = duckdb.connect(str(root / "warehouse.duckdb"), read_only=True)
    try:
        runs = con.execute(
            "SELECT run_kind, count(*), count(DISTINCT cutoff), count(DISTINCT model) FROM snapshot_runs GROUP BY 1"
        ).fetchall()
        scored = con.execute("SELECT count(*) FROM accuracy_rows").fetchone()[0]
    finally:
        con.close()
    click.echo("")
    click.echo(f"[demo] done in {seconds / 60:.1f} min. Monthly cutoffs run: {cutoffs[0]} .. {cutoffs[-1]}")
    for kind, n, n_cut, n_models in runs:
        click.echo(f"  {kind:<9} snapshots: {n} ({n_cut} cutoffs x {n_models} models)")
    click.echo(f"  accuracy rows scored: {scored:,}")
    click.echo(f"  report:    {root / 'reports' / 'accuracy.html'}")
    click.echo(f"  snapshots: {root / 'snapshots'}")
    click.echo(f"  query:     dyadcast sql --workspace {root} \"SELECT * FROM accuracy_overview LIMIT 20\"")


COMMANDS = [demo_command]
