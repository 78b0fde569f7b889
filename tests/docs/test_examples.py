"""Every example of the README and of docs/ runs as written against a live instance, and its
output is what the example's .expected file says: one regular expression per line, each matched
by an output line after the one the previous expression matched (# starts a comment).

The code blocks of docs/*.md that are shell or Python must each be a file of
docs/examples/ (the block's first line names it, and the block is that file's text), so what a
reader copies is what this test ran.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.harness.live_service import LiveService

REPO = Path(__file__).resolve().parents[2]
EXAMPLES = REPO / "docs" / "examples"
PAGES = [REPO / "README.md", *sorted((REPO / "docs").glob("*.md"))]
BLOCK = re.compile(r"^```(sh|bash|python)\n(.*?)^```", re.S | re.M)
NAMED = re.compile(r"^# (docs/examples/[\w.-]+)")
RUNNERS = {".sh": ["bash", "-eo", "pipefail"], ".py": [sys.executable]}


def code_blocks() -> list[tuple[Path, str]]:
    return [(page, match.group(2)) for page in PAGES
            for match in BLOCK.finditer(page.read_text())]  # fmt: skip


def runnable() -> list[Path]:
    return sorted(p for p in EXAMPLES.iterdir() if p.suffix in RUNNERS)


def test_every_shell_and_python_block_is_an_example_file() -> None:
    blocks = code_blocks()
    assert blocks, "no examples found"
    for page, text in blocks:
        named = NAMED.match(text)
        assert named, f"{page.name}: a block that is no example file:\n{text[:200]}"
        file = REPO / named.group(1)
        assert file.read_text() == text, f"{page.name}: the block differs from {file}"


JSON_BLOCK = re.compile(
    r"\(examples/([\w.-]+\.json)\)[^\n]*\n(?:[^\n]*\n)?```json\n(.*?)^```", re.S | re.M
)


def test_a_json_block_after_a_link_to_its_file_is_that_file() -> None:
    """A JSON example is shown after a link to its file (within two lines): the two agree."""
    shown = [(page, match) for page in PAGES for match in JSON_BLOCK.finditer(page.read_text())]
    assert shown, "no JSON example found"
    for page, match in shown:
        file = EXAMPLES / match.group(1)
        assert file.read_text() == match.group(2), f"{page.name}: the block differs from {file}"


def test_every_example_file_has_its_expected_output() -> None:
    for example in runnable():
        assert example.with_suffix(".expected").exists(), example


def test_every_example_file_is_shown_on_a_page() -> None:
    """An example no page shows is one nobody reads; a page shows it as a block of its text."""
    shown = {NAMED.match(text).group(1) for _, text in code_blocks() if NAMED.match(text)}
    for example in runnable():
        assert f"docs/examples/{example.name}" in shown, example


def _settings(example: Path) -> dict[str, str]:
    """The service settings an example needs (``<stem>.env``: NAME=VALUE lines, # comments)."""
    file = example.with_suffix(".env")
    if not file.exists():
        return {}
    lines = [line for line in file.read_text().splitlines() if line and not line.startswith("#")]
    return dict(line.split("=", 1) for line in lines)


def _expected(example: Path) -> list[re.Pattern]:
    lines = example.with_suffix(".expected").read_text().splitlines()
    return [re.compile(line) for line in lines if line and not line.startswith("#")]


@pytest.mark.parametrize("example", runnable(), ids=lambda p: p.name)
def test_the_example_runs_and_prints_what_it_says(
    example: Path, live_service, redis_url: str, tmp_path: Path
) -> None:
    """Each example gets a fresh instance (a new store, so that keys made by one leave the next
    open), started with the example's settings; the example sees the store's URL, as a local
    operator's shell would, and those settings."""
    from service.store import migrate

    url = f"sqlite:///{(tmp_path / 'store.sqlite').resolve()}"
    migrate(url)
    settings = _settings(example)
    instance: LiveService = live_service(url, redis_url, workers=1, env=settings)
    work = tmp_path / "examples"
    shutil.copytree(EXAMPLES, work)
    env = {k: v for k, v in os.environ.items() if not k.startswith("DRAWYARD_")}
    env.update(
        settings,
        DRAWYARD_URL=instance.base_url,
        DRAWYARD_DATABASE_URL=url,
        PATH=f"{Path(sys.executable).parent}{os.pathsep}{env.get('PATH', '')}",
        PYTHONPATH=str(REPO),
    )
    done = subprocess.run(
        [*RUNNERS[example.suffix], example.name], cwd=work, env=env, capture_output=True,
        text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr + instance.logs()
    output = iter(done.stdout.splitlines())
    for pattern in _expected(example):
        assert any(pattern.search(line) for line in output), (
            f"{example.name}: no line after the earlier matches matches {pattern.pattern!r}\n"
            + done.stdout
        )
