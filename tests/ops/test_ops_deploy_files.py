"""docker-compose.yml, Dockerfile, .env.example, systemd units and deploy/README.md agree with each other.

Docker is not available where these tests run, so this checks what can be checked without it.
"""

from __future__ import annotations

import re
from importlib import metadata
from pathlib import Path

import yaml

from dyadcast.cli import main

ROOT = Path(__file__).resolve().parents[2]
COMPOSE = yaml.safe_load((ROOT / "docker-compose.yml").read_text(encoding="utf-8"))
SERVICES = COMPOSE["services"]
DOCKERFILE = (ROOT / "Dockerfile").read_text(encoding="utf-8")
ENV_EXAMPLE = dict(
    line.split("=", 1) for line in (ROOT / ".env.example").read_text(encoding="utf-8").splitlines()
    if line.strip() and not line.startswith("#")
)
README = (ROOT / "deploy" / "README.md").read_text(encoding="utf-8")


def _env(service: str) -> dict[str, str]:
    return {k: str(v) for k, v in SERVICES[service].get("environment", {}).items()}


def _dockerfile_env() -> dict[str, str]:
    block = re.search(r"^ENV (.+?)(?=^\S)", DOCKERFILE, re.M | re.S).group(1)
    return dict(re.findall(r"(\w+)=(\S+)", block))


def test_services_and_healthchecks() -> None:
    assert {"postgres", "prefect-server", "scheduler"} <= set(SERVICES)
    for name, service in SERVICES.items():
        assert "healthcheck" in service or name == "dask-worker", f"{name} has no healthcheck"
        for dependency, rule in service.get("depends_on", {}).items():
            assert dependency in SERVICES and rule["condition"] == "service_healthy"
            assert "healthcheck" in SERVICES[dependency], f"{name} waits for {dependency}, which has no healthcheck"


def test_only_the_ui_is_published_and_only_on_localhost() -> None:
    published = {name: s["ports"] for name, s in SERVICES.items() if s.get("ports")}
    assert published == {"prefect-server": ["127.0.0.1:4200:4200"]}
    assert all("expose" not in s or all(str(p) != "0.0.0.0" for p in s["expose"]) for s in SERVICES.values())


def test_env_names_match_env_example_and_hold_no_secrets() -> None:
    text = (ROOT / "docker-compose.yml").read_text(encoding="utf-8")
    used = set(re.findall(r"(?<!\$)\$\{(\w+)", text))
    assert used == set(ENV_EXAMPLE), f"compose uses {sorted(used)}, .env.example defines {sorted(ENV_EXAMPLE)}"
    assert "replace" in ENV_EXAMPLE["POSTGRES_PASSWORD"], "the example password must be an obvious placeholder"
    assert ENV_EXAMPLE["DYADCAST_WEBHOOK_URL"] == ""
    assert re.fullmatch(r"[A-Za-z0-9-]+", ENV_EXAMPLE["POSTGRES_PASSWORD"]), "it goes into a URL: no symbols"
    assert ".env" in (ROOT / ".gitignore").read_text(encoding="utf-8").split()


def test_database_url_points_at_the_postgres_service_with_asyncpg() -> None:
    url = _env("prefect-server")["PREFECT_API_DATABASE_CONNECTION_URL"]
    assert url.startswith("postgresql+asyncpg://")  # Prefect needs the async driver (prefect.md §3)
    assert "@postgres:5432/" in url and "postgres" in SERVICES
    assert _env("prefect-server")["PREFECT_UI_API_URL"] == "http://localhost:4200/api"


def test_prefect_image_matches_the_installed_prefect() -> None:
    tag = ENV_EXAMPLE["PREFECT_IMAGE"].split(":", 1)[1]
    assert tag.startswith(metadata.version("prefect") + "-python")
    assert SERVICES["prefect-server"]["image"].endswith(f":-{ENV_EXAMPLE['PREFECT_IMAGE']}}}")
    base_python = re.search(r"^FROM python:(\d+\.\d+)", DOCKERFILE, re.M).group(1)
    assert tag.endswith(f"python{base_python}"), "server and scheduler should run the same Python"


def test_scheduler_workspace_volume_and_api_url() -> None:
    scheduler = SERVICES["scheduler"]
    assert scheduler["build"] == "." and (ROOT / "Dockerfile").is_file()
    workspace = _env("scheduler")["DYADCAST_WORKSPACE"]
    mounts = dict(v.split(":", 1) for v in scheduler["volumes"])
    assert mounts["workspace"] == workspace == _dockerfile_env()["DYADCAST_WORKSPACE"]
    assert f'VOLUME ["{workspace}"]' in DOCKERFILE
    named = {v.split(":", 1)[0] for s in SERVICES.values() for v in s.get("volumes", [])}
    assert named == set(COMPOSE["volumes"]), "every named volume is declared, and every declared one is used"
    server_port = SERVICES["prefect-server"]["command"][SERVICES["prefect-server"]["command"].index("--port") + 1]
    for service in ("scheduler", "dask-worker"):
        assert _env(service)["PREFECT_API_URL"] == f"http://prefect-server:{server_port}/api"
    assert "dyadcast schedule" in " ".join(scheduler["command"])
    assert {"init", "schedule"} <= set(main.commands)


def test_dask_profile_is_consistent() -> None:
    assert SERVICES["dask-scheduler"]["profiles"] == SERVICES["dask-worker"]["profiles"] == ["dask"]
    assert "tcp://dask-scheduler:8786" in SERVICES["dask-worker"]["command"]
    assert "8786" in SERVICES["dask-scheduler"]["command"]
    assert "tcp://dask-scheduler:8786" in (ROOT / ".env.example").read_text(encoding="utf-8")


def test_dockerfile_ships_sql_and_installs_the_project() -> None:
    copies = dict(re.findall(r"^COPY (\S+) (\S+)", DOCKERFILE, re.M))
    for source in ("src", "flows", "sql"):
        assert source in copies and (ROOT / source).is_dir()
    sql_target = Path("/opt/dyadcast") / copies["sql"].removeprefix("./")
    assert _dockerfile_env()["DYADCAST_SQL_DIR"] == str(sql_target)  # dyadcast.warehouse.sql_dir() reads it
    assert re.search(r"^WORKDIR /opt/dyadcast$", DOCKERFILE, re.M)
    assert re.search(r'^RUN pip install "\.\[dask\]"$', DOCKERFILE, re.M)
    assert "pyproject.toml" in DOCKERFILE and (ROOT / "pyproject.toml").is_file()
    assert re.search(r"^USER (?!root)\w+", DOCKERFILE, re.M), "run as an unprivileged user"


def test_systemd_unit_runs_the_schedule() -> None:
    unit = (ROOT / "deploy" / "dyadcast-schedule.service").read_text(encoding="utf-8")
    keys = re.findall(r"^(\w+)=(.*)$", unit, re.M)
    assert any(k == "ExecStart" and v.endswith("dyadcast schedule") for k, v in keys)
    assert ("Environment", "PREFECT_API_URL=http://127.0.0.1:4200/api") in keys
    assert ("Restart", "on-failure") in keys and ("WantedBy", "multi-user.target") in keys
    server = (ROOT / "deploy" / "prefect-server.service").read_text(encoding="utf-8")
    assert "--host 127.0.0.1 --port 4200" in server


def test_readme_covers_services_variables_and_commands() -> None:
    for word in [*SERVICES, *ENV_EXAMPLE, "dyadcast-schedule.service", "prefect deployment run",
                 "dyadcast schedule --print-only", "run_failed", "files_rejected", "docker compose up"]:
        assert word in README, f"deploy/README.md does not mention {word}"
