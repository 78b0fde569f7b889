"""The reference tables of docs/ say what the code does: each is read from its page and compared
with the code it describes, so a changed default or a new distribution, function, option or
endpoint cannot leave the page behind. (The thresholds table: tests/service/
test_threshold_documents.py; the configuration table: tests/docs/test_config_page.py.)
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import re
from pathlib import Path

from service.cli import build_parser
from service.client import RetryPolicy
from service.openapi import OPERATION_IDS
from worker.modeling import expressions, work_budget
from worker.modeling.distributions import distribution_names, parameterisations
from worker.runner import resolve_sampler
from worker.samplers.settings import SamplerSettings

DOCS = Path(__file__).resolve().parents[2] / "docs"


def table_rows(page: str, heading: str, header: str = "|") -> list[list[str]]:
    """The cells of the first table after a heading whose header line starts with ``header``
    (backslash-escaped bars kept in cells)."""
    text = (DOCS / page).read_text()
    start = text.index(f"\n{header}", text.index(f"\n{heading}\n"))
    rows, seen = [], False
    for line in text[start:].splitlines()[1:]:
        if line.startswith("|"):
            seen = True
            cells = re.split(r"(?<!\\)\|", line.strip().strip("|"))
            rows.append([cell.strip() for cell in cells])
        elif seen:
            break
    return [row for row in rows[2:]]  # header and rule left out


def test_sampler_defaults_are_the_engines() -> None:
    defaults = resolve_sampler({})
    table = table_rows("samplers.md", "## Settings and defaults")
    rows = {row[0].strip("`"): row[1] for row in table}
    fields = {f.name for f in dataclasses.fields(SamplerSettings)}
    assert fields - {"target_acceptance"} <= rows.keys()
    for name, cell in rows.items():
        if name == "target_acceptance":
            assert defaults[name] is None and cell.startswith("0.8 (NUTS, HMC); 0.234")
            continue
        documented = json.loads(cell.strip("`"))
        assert defaults[name] == documented, (name, cell, defaults[name])


def test_every_distribution_is_in_the_table_with_its_arguments() -> None:
    rows = table_rows("model-spec.md", "## Format reference", "| distribution |")
    listed: dict[str, str] = {}
    for names, arguments in ((row[0], row[1]) for row in rows if len(row) == 2):
        for name in names.split(","):
            listed[name.strip()] = arguments
    assert set(listed) == set(distribution_names())
    for name, text in listed.items():
        words = set(re.findall(r"[a-z_]+", text))
        for form in parameterisations(name):
            assert set(form) <= words, (name, form, text)


def test_the_functions_of_the_expression_language() -> None:
    text = " ".join((DOCS / "expressions.md").read_text().split())
    documented = set(re.findall(r"`([a-z_0-9]+)(?:\(|`)", text)) | set(
        re.findall(r"\| elementwise functions \| `([^`]+)`", text)[0].split()
    )
    assert expressions.FUNCTIONS <= documented
    assert f"more than {expressions.MAX_DEPTH} levels of nesting" in text
    assert f"longer than {expressions.MAX_LENGTH:,} characters" in text
    assert f"at most {work_budget.MAX_GRAPH_NODES:,} graph nodes" in text
    assert f"at most {work_budget.MAX_ELEMENTS:,} elements" in text


def test_the_client_retry_defaults() -> None:
    text = (DOCS / "client.md").read_text()
    policy = RetryPolicy()
    shown = (f"RetryPolicy(retries={policy.retries}, base_seconds={policy.base_seconds:g}, "
             f"cap_seconds={policy.cap_seconds:g}, "
             f"max_retry_after_seconds={policy.max_retry_after_seconds:g})")  # fmt: skip
    assert shown in text


def _options(parser: argparse.ArgumentParser) -> set[str]:
    found = set(parser._option_string_actions)
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for sub in action.choices.values():
                found |= _options(sub)
    return found


def test_every_option_the_pages_name_exists() -> None:
    options = _options(build_parser())
    for page in ("cli.md", "registry.md", "approximations.md", "access.md", "deployment.md"):
        # Lines about the docker command name its options, not drawyard's.
        lines = [line for line in (DOCS / page).read_text().splitlines() if "docker" not in line]
        for named in set(re.findall(r"(?<![\w-])(--[a-z][a-z-]+)", "\n".join(lines))):
            assert named in options, f"{page}: drawyard has no option {named}"


def test_every_operation_is_documented() -> None:
    pages = "".join((DOCS / p).read_text() for p in ("api.md", "registry.md", "monitoring.md"))
    pages = pages.replace("/v1/", "/")
    for method, path in OPERATION_IDS:
        shown = path.removeprefix("/v1").replace("{job_id}", "{id}") or "/"
        assert f"{method.upper()} {shown}" in pages, (method, path)


def _backticked_names(text: str) -> set[str]:
    return set(re.findall(r"`([a-z_]+)`", text))


def test_the_summary_fields_and_the_sampler_report_members_are_what_a_job_gives() -> None:
    """A small job run in process (the service's engine interface): every member the page names
    is there, and every summary field is in the page's table."""
    from tests.service.bodies import normal_mean
    from worker.runner import run_in_process

    result = run_in_process(normal_mean(chains=2, warmup=100, draws=100, seed=5))
    table = table_rows("diagnostics.md", "## The summary: one record per reported quantity")
    fields = set().union(*(_backticked_names(row[0]) for row in table))
    assert set(result["summary"][0]) == fields
    text = (DOCS / "diagnostics.md").read_text()
    report = text[text.index("## The sampler report"):text.index("## The verdict")]
    named = _backticked_names(report.split("`{")[0])  # the members, before the counts' form
    assert named <= set(result["sampler"]), named - set(result["sampler"])
