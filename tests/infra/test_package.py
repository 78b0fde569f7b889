"""The installed package (what service/Dockerfile's `pip install .` puts in the image) is complete.

The editable install used for development reads files straight from the checkout, so a file left
out of the package data would only show in production. This builds the wheel, then runs the
migrations and the app factory from the unpacked wheel alone. What a wheel holds is defined by the
binary distribution format (PEP 427); that an unpacked wheel on sys.path imports like an installed
one follows from it being a plain zip of the importable tree (from memory).
"""

import subprocess
import sys
import textwrap
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
# Files in the package folders that are not needed at run time.
BUILD_ONLY = {"service/Dockerfile", "service/migrations/script.py.mako"}


@pytest.fixture(scope="module")
def unpacked_wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "-w", str(out), str(REPO)],
        capture_output=True, text=True, timeout=600,
    )
    assert build.returncode == 0, build.stderr
    (wheel,) = out.glob("drawyard-*.whl")
    target = out / "unpacked"
    with zipfile.ZipFile(wheel) as archive:
        archive.extractall(target)
    return target


@pytest.mark.slow
def test_wheel_holds_every_tracked_package_file(unpacked_wheel: Path) -> None:
    tracked = subprocess.run(
        ["git", "ls-files", "service", "worker", "schemas"],
        cwd=REPO, capture_output=True, text=True, check=True,
    ).stdout.split()
    missing = [
        name for name in tracked
        if name not in BUILD_ONLY and not (unpacked_wheel / name).is_file()
    ]
    assert not missing, f"left out of the installed package: {missing}"


@pytest.mark.slow
def test_installed_package_migrates_and_builds_the_app(
    unpacked_wheel: Path, tmp_path: Path
) -> None:
    script = textwrap.dedent(
        f"""
        import service, worker
        assert service.__file__.startswith({str(unpacked_wheel)!r}), service.__file__
        from service.store import migrate
        from service.app import create_app
        url = "sqlite:///{tmp_path / 'installed.sqlite'}"
        migrate(url)
        app = create_app({{"database_url": url}})
        client = app.test_client()
        assert client.get("/v1/health/live").status_code == 200
        assert client.get("/v1/openapi.json").status_code == 200
        from worker.celery_app import celery_app
        celery_app.loader.import_default_modules()
        assert {{"drawyard.run_chain", "drawyard.finish_job"}} <= set(celery_app.tasks)
        """
    )
    # Run outside the checkout, with only the unpacked wheel ahead of the installed dependencies.
    run = subprocess.run(
        [sys.executable, "-c", script], cwd=tmp_path, capture_output=True, text=True,
        timeout=300, env={"PYTHONPATH": str(unpacked_wheel), "PATH": "/usr/bin:/bin"},
    )
    assert run.returncode == 0, run.stdout + run.stderr
