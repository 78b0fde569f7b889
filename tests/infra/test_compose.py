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
COMPOSE_TEXT = (REPO / "docker-compose.yml").read_text()
COMPOSE = yaml.safe_load(COMPOSE_TEXT)
SERVICES = COMPOSE["services"]
# ${NAME:-default} and ${NAME:?message}: the Compose Specification, "Interpolation".
INTERPOLATION = re.compile(r"\$\{([A-Z_][A-Z0-9_]*)(?::?-([^}]*)|:?\?[^}]*)?\}")


def interpolated(value: str, env: dict[str, str] | None = None) -> str:
    """A value as compose reads it with ``env`` as the .env file (none: the defaults)."""
    env = env or {}
    return INTERPOLATION.sub(lambda m: env.get(m.group(1), m.group(2) or ""), value)


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
    assert {"api", "worker", "sweeper", "redis", "postgres"} <= SERVICES.keys()
    for name in ("api", "worker", "sweeper", "redis", "postgres"):
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


def compose_settings(env: dict[str, str] | None = None) -> dict[str, str]:
    seen: dict[str, str] = {}
    for service in SERVICES.values():
        for key, value in (service.get("environment") or {}).items():
            seen[key] = interpolated(str(value), env)
    return seen


def drawyard_env(folder: Path, env: dict[str, str] | None = None) -> dict[str, str]:
    """The DRAWYARD_* settings with each secret as a file in ``folder`` (as compose mounts it)."""
    for name in COMPOSE["secrets"]:
        (folder / name).write_text(f"{name}-value\n")
    return {k: v.replace("/run/secrets", str(folder)) for k, v in compose_settings(env).items()
            if k.startswith("DRAWYARD_")}


def test_every_drawyard_variable_is_read_by_the_config(tmp_path: Path) -> None:
    from service.config import PREFIX, Settings, load_settings

    known = {PREFIX + f.name.upper() + end for f in fields(Settings) for end in ("", "_FILE")}
    ours = drawyard_env(tmp_path)
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
    assert database.path.lstrip("/") == pg_env["POSTGRES_DB"]
    # One password, in one secret file, read by PostgreSQL and by drawyard alike.
    assert database.password is None
    assert settings["DRAWYARD_DATABASE_PASSWORD_FILE"] == pg_env["POSTGRES_PASSWORD_FILE"]


def secret_mounts(service: dict) -> set[str]:
    """Where compose mounts a service's secrets: /run/secrets/<name> (Compose Specification)."""
    return {f"/run/secrets/{name}" for name in service.get("secrets", [])}


def test_secrets_are_files_outside_the_repository_history(tmp_path: Path) -> None:
    from service.config import load_settings

    for key in compose_settings():
        assert "PASSWORD" not in key or key.endswith("_FILE"), f"{key} is written into the file"
        assert "SECRET" not in key or key.endswith("_FILE"), f"{key} is written into the file"
    for name, service in SERVICES.items():
        for key, value in (service.get("environment") or {}).items():
            if key.endswith("_FILE"):
                assert value in secret_mounts(service), f"{name}: {key} names no mounted secret"
    ignored = (REPO / ".gitignore").read_text().split()
    for secret in COMPOSE["secrets"].values():
        path = Path(secret["file"])
        assert f"/{path.parts[-2]}/" in ignored, f"{path} could be committed"
    assert "/.env" in ignored and (REPO / ".env.example").is_file()
    # And the settings really come out of such files: the password is put into the URL.
    (tmp_path / "postgres_password").write_text("p@ss/word\n")
    (tmp_path / "session_secret").write_text("s" * 64 + "\n")
    env = {k: v.replace("/run/secrets", str(tmp_path)) for k, v in compose_settings().items()
           if k.startswith("DRAWYARD_")}
    settings = load_settings(environ=env)
    assert urlsplit(settings.database_url).password == "p%40ss%2Fword"
    assert settings.session_secret == "s" * 64


def test_closed_by_default_and_published_on_loopback(tmp_path: Path) -> None:
    from service.config import load_settings

    assert load_settings(environ=drawyard_env(tmp_path)).require_keys == 1
    # Opening it takes an explicit line in .env, and .env.example keeps it closed.
    opened = drawyard_env(tmp_path, {"DRAWYARD_REQUIRE_KEYS": "0"})
    assert load_settings(environ=opened).require_keys == 0
    assert "DRAWYARD_REQUIRE_KEYS=1" in (REPO / ".env.example").read_text().splitlines()
    published = [interpolated(str(p)) for p in SERVICES["api"]["ports"]]
    assert published and all(p.startswith("127.0.0.1:") for p in published)
    # The first key: the documented one-shot step is a real command line of the console script.
    step = re.search(r"docker compose run --rm (\w+) (drawyard keys create [^\n]*)", COMPOSE_TEXT)
    assert step is not None and step.group(1) in SERVICES
    from service import cli

    args = cli.build_parser().parse_args(shlex.split(step.group(2))[1:])
    assert args.run.__name__ == "run_create"


def test_images_are_pinned() -> None:
    version = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["version"]
    for name, service in SERVICES.items():
        image = service["image"]
        repository, _, tag = image.partition(":")
        assert tag and tag != "latest" and re.match(r"\d+\.\d+", tag), f"{name}: {image}"
        if "build" in service:
            assert tag == version, f"{name} is tagged {tag}, the package is {version}"
    base = re.search(r"^FROM\s+(\S+)", (REPO / "service/Dockerfile").read_text(), re.M)
    assert base is not None and re.search(r":\d+\.\d+\.\d+", base.group(1))


def test_workers_have_cpu_and_memory_limits() -> None:
    limits = SERVICES["worker"]["deploy"]["resources"]["limits"]
    concurrency = int(option_value(command_words(SERVICES["worker"]), "--concurrency"))
    # One chain per pool process needs one core each; more would only share the limit.
    assert float(limits["cpus"]) == concurrency
    assert re.fullmatch(r"\d+[MG]", limits["memory"])


def test_services_run_what_drawyard_serve_starts() -> None:
    """Every long-running part `drawyard serve` starts (service/local_stack.py) is a compose
    service running the same command, and compose runs nothing else of ours."""
    from service import local_stack

    ours = {name for name, s in SERVICES.items() if "build" in s and s.get("restart") != "no"}
    assert ours == {"api", "worker", "closing-worker", "sweeper"}
    api = command_words(SERVICES["api"])
    host, port = option_value(api, "--bind").rsplit(":", 1)
    processes = int(option_value(api, "--workers"))
    assert api == local_stack.api_command(host, int(port), processes)
    worker = command_words(SERVICES["worker"])
    name = option_value(worker, "-n")
    concurrency = int(option_value(worker, "--concurrency"))
    assert worker == local_stack.worker_command(name, concurrency)
    closing = command_words(SERVICES["closing-worker"])
    assert closing == local_stack.closing_worker_command(
        option_value(closing, "-n"), option_value(closing, "-Q"),
        int(option_value(closing, "--concurrency")))
    from service.config import load_settings

    assert option_value(closing, "-Q") == load_settings(environ={}).closing_queue
    scripts = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["scripts"]
    module, *words = local_stack.SWEEPER_COMMAND
    assert scripts["drawyard"] == f"{module}:main"
    assert command_words(SERVICES["sweeper"]) == ["drawyard", *words]



def test_drawyard_serve_starts_those_four_and_nothing_else(tmp_path: Path) -> None:
    """A real local stack (`drawyard serve` is LocalStack.running) on the filesystem broker: the
    processes it launches are the API, the workers, the closing worker and the sweeper, with the
    commands above."""
    from service import local_stack

    stack = local_stack.LocalStack(tmp_path / "var", broker="filesystem", workers=1)
    with stack.running(timeout=120):
        launched = {child.name.split()[0]: list(child.popen.args) for child in stack.children()}
    assert set(launched) == {"api", "worker", "closing", "sweeper"}
    assert launched["api"][2:] == local_stack.api_command("127.0.0.1", stack.port, 1)
    assert launched["worker"][2:][:len(local_stack.worker_command("w0@%h", 1))] == (
        local_stack.worker_command("w0@%h", 1))
    assert launched["sweeper"][2:] == local_stack.SWEEPER_COMMAND
    closing = local_stack.closing_worker_command("closing@%h", "drawyard.closing", 4)
    assert launched["closing"][2:][:len(closing)] == closing


def test_sweeper_health_check_is_its_own_check_command(tmp_path: Path) -> None:
    from service import cli, sweeper
    from service.config import load_settings

    test = SERVICES["sweeper"]["healthcheck"]["test"]
    assert test[0] == "CMD" and test[1] == "drawyard"
    args = cli.build_parser().parse_args(test[2:])
    assert args.check
    env = drawyard_env(tmp_path)
    beat = tmp_path / "alive"
    settings = load_settings({"sweeper_heartbeat": str(beat)}, environ=env)
    assert not sweeper.healthy(settings)  # no sweep yet
    sweeper.beat(settings)
    assert sweeper.healthy(settings)
    # Stale after three missed intervals: the store unreachable, or the loop stuck.
    later = beat.stat().st_mtime + 3 * settings.sweep_interval + 6
    assert not sweeper.healthy(settings, now=later)


@pytest.mark.parametrize("name", ["api", "worker", "sweeper", "migrate"])
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
