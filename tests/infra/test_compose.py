"""docker-compose.yml names entry points and settings that really exist in this tree.

No container runtime is needed: the file is parsed (PyYAML), then every name it relies on is looked
up in the code. What a compose file's keys mean (services, healthcheck, depends_on conditions,
volumes, `$$` escaping) is from the Compose Specification (compose-spec.io, "Services top-level
elements"), read from memory; the rest is checked against our own modules.
"""

import re
import shlex
import tomllib
from dataclasses import fields
from pathlib import Path
from urllib.parse import urlsplit

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
COMPOSE = yaml.safe_load((REPO / "docker-compose.yml").read_text())
SERVICES = COMPOSE["services"]


def command_words(service: dict) -> list[str]:
    command = service["command"]
    return shlex.split(command) if isinstance(command, str) else [str(w) for w in command]


def option_value(words: list[str], *names: str) -> str:
    for i, word in enumerate(words):
        if word in names:
            return words[i + 1]
    raise AssertionError(f"none of {names} in {words}")


def healthcheck_text(service: dict) -> str:
    test = service["healthcheck"]["test"]
    return " ".join(test) if isinstance(test, list) else test


def test_production_shape() -> None:
    assert {"api", "worker", "redis", "postgres"} <= SERVICES.keys()
    for name in ("api", "worker", "redis", "postgres"):
        assert "healthcheck" in SERVICES[name], f"{name} has no health check"
    # The store's data survives container replacement: a named volume, declared at the top level.
    mounts = [m.split(":")[0] for m in SERVICES["postgres"]["volumes"]]
    assert any(m in COMPOSE["volumes"] for m in mounts)
    assert SERVICES["postgres"]["image"].startswith("postgres:")
    assert SERVICES["redis"]["image"].startswith("redis:")


def test_api_runs_the_app_factory_under_gunicorn(tmp_path: Path) -> None:
    words = command_words(SERVICES["api"])
    assert words[0] == "gunicorn"
    target = words[-1]
    module_name, _, call = target.partition(":")
    assert call.endswith("()"), "gunicorn must call the factory, not import a global app"
    module = __import__(module_name, fromlist=["_"])
    factory = getattr(module, call[:-2])
    app = factory({"database_url": f"sqlite:///{tmp_path / 'compose.sqlite'}"})
    assert callable(app.wsgi_app)
    config_module = option_value(words, "--config", "-c").removeprefix("python:")
    gunicorn_conf = __import__(config_module, fromlist=["_"])
    assert gunicorn_conf.worker_class


def test_worker_runs_the_celery_app() -> None:
    from celery import Celery

    words = command_words(SERVICES["worker"])
    assert words[:1] == ["celery"] and "worker" in words
    module_name, _, attribute = option_value(words, "-A", "--app").partition(":")
    app = getattr(__import__(module_name, fromlist=["_"]), attribute)
    assert isinstance(app, Celery)
    # One chain in flight per process: a prefetched chain would wait behind a long one.
    assert option_value(words, "--prefetch-multiplier") == "1"
    assert option_value(words, "-A", "--app") in healthcheck_text(SERVICES["worker"])


def test_migration_step_uses_the_console_command() -> None:
    scripts = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["scripts"]
    words = command_words(SERVICES["migrate"])
    assert words[0] in scripts and words[1] == "migrate"
    from service import cli

    assert cli.build_parser().parse_args(words[1:]).run is cli.run_migrate
    for dependant in ("api", "worker"):
        condition = SERVICES[dependant]["depends_on"]["migrate"]["condition"]
        assert condition == "service_completed_successfully"


def test_health_check_urls_are_routes_of_the_app(tmp_path: Path) -> None:
    from service.app import create_app

    app = create_app({"database_url": f"sqlite:///{tmp_path / 'routes.sqlite'}"})
    adapter = app.url_map.bind("localhost")
    urls = re.findall(r"https?://[^\s'\"]+", healthcheck_text(SERVICES["api"]))
    assert urls, "the API's health check requests no URL"
    port = option_value(command_words(SERVICES["api"]), "--bind", "-b").rsplit(":", 1)[1]
    for url in urls:
        parts = urlsplit(url)
        assert str(parts.port) == port, f"{url} is not the port gunicorn binds"
        endpoint, _ = adapter.match(parts.path, method="GET")
        assert endpoint


def compose_settings() -> dict[str, str]:
    seen: dict[str, str] = {}
    for service in SERVICES.values():
        for key, value in (service.get("environment") or {}).items():
            seen[key] = str(value)
    return seen


def test_every_drawyard_variable_is_read_by_the_config() -> None:
    from service.config import PREFIX, Settings, load_settings

    known = {PREFIX + f.name.upper() for f in fields(Settings)}
    ours = {k: v for k, v in compose_settings().items() if k.startswith("DRAWYARD_")}
    assert ours, "compose sets no DRAWYARD_* settings"
    unknown = sorted(set(ours) - known)
    assert not unknown, f"service/config.py reads none of {unknown}"
    # And each value is one the config accepts (types convert, URLs parse).
    settings = load_settings(environ=ours)
    assert urlsplit(settings.database_url).scheme == "postgresql+psycopg"
    assert urlsplit(settings.broker_url).scheme == "redis"


def test_urls_point_at_the_compose_services() -> None:
    settings = compose_settings()
    database = urlsplit(settings["DRAWYARD_DATABASE_URL"])
    broker = urlsplit(settings["DRAWYARD_BROKER_URL"])
    assert database.hostname == "postgres" and broker.hostname == "redis"
    pg_env = SERVICES["postgres"]["environment"]
    assert database.username == pg_env["POSTGRES_USER"]
    assert database.password == pg_env["POSTGRES_PASSWORD"]
    assert database.path.lstrip("/") == pg_env["POSTGRES_DB"]


@pytest.mark.parametrize("name", ["api", "worker", "migrate"])
def test_images_build_from_the_service_dockerfile(name: str) -> None:
    build = SERVICES[name]["build"]
    dockerfile = REPO / build["context"] / build["dockerfile"]
    assert dockerfile.is_file()
    text = dockerfile.read_text()
    # Every top-level folder the installed package needs is copied into the image.
    packages = tomllib.loads((REPO / "pyproject.toml").read_text())["tool"]["setuptools"]
    for include in packages["packages"]["find"]["include"]:
        folder = include.rstrip("*")
        assert re.search(rf"^COPY\s+{folder}\b", text, re.MULTILINE), f"{folder}/ not copied"
    assert re.search(r"^USER\s+(?!root)\S+", text, re.MULTILINE), "image runs as root"
