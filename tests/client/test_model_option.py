"""`drawyard submit --model NAME:VERSION`: a version that is not ASCII digits is bad input (exit 5)
with a one-line reason, never a traceback. Python's str.isdigit() also accepts "²" and "٣", which
int() then refuses. Run as a subprocess of the installed command, against a closed port: the
option is refused before any request is made.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.job_commands import EXIT_BAD_INPUT, InputProblem, parse_model_ref
from tests.client.test_client_cli import closed_port_url, drawyard


@pytest.mark.parametrize("text", ["demand:\u00b2", "demand:\u0663", "demand:1\u00b2", "demand:-1"])
def test_a_version_that_is_not_ascii_digits_is_bad_input(text: str, tmp_path: Path) -> None:
    with pytest.raises(InputProblem, match="whole number"):
        parse_model_ref(text)
    data = tmp_path / "data.json"
    data.write_text(json.dumps({"n": 1, "y": [1.0]}))
    refused = drawyard("submit", "--model", text, str(data), url=closed_port_url())
    assert refused.returncode == EXIT_BAD_INPUT, refused.stderr
    assert "Traceback" not in refused.stderr and "whole number" in refused.stderr


def test_name_and_version_are_read_as_before() -> None:
    assert parse_model_ref("demand") == {"name": "demand"}
    assert parse_model_ref("demand:12") == {"name": "demand", "version": 12}
