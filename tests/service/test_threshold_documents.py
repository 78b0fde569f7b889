"""Every verdict threshold is documented where a user meets it: the web page's advice, the JSON
schemas of a submission's checks and of a verdict, and docs/diagnostics.md's thresholds table
(with its default). The source of truth is worker.diagnostics.thresholds.DEFAULT_THRESHOLDS."""

from __future__ import annotations

import json
from pathlib import Path

from service.web.advice import ADVICE
from worker.diagnostics import DEFAULT_THRESHOLDS

ROOT = Path(__file__).resolve().parents[2]


def test_every_threshold_has_advice_a_schema_entry_and_a_readme_row() -> None:
    names = set(DEFAULT_THRESHOLDS)
    assert names <= set(ADVICE)
    common = json.loads((ROOT / "schemas" / "common.json").read_text())
    assert set(common["$defs"]["thresholds"]["properties"]) == names
    submission = json.loads((ROOT / "schemas" / "submission.json").read_text())
    assert submission["properties"]["checks"] == {"$ref": "common.json#/$defs/thresholds"}
    readme = (ROOT / "docs" / "diagnostics.md").read_text()
    for name, default in DEFAULT_THRESHOLDS.items():
        assert f"| `{name}` | {default:g} |" in readme, name
