"""schemas/model_spec.json against the JSON Schema 2020-12 meta-schema, and examples against it.

External check: the jsonschema package's Draft 2020-12 meta-schema validation (JSON Schema
2020-12, json-schema.org).
"""

import json
from pathlib import Path

import pytest
from jsonschema import Draft202012Validator
from jsonschema.exceptions import SchemaError

from worker.modeling.spec_checks import model_schema, schema_problems

from .test_compiled_models import EIGHT_SCHOOLS, FEATURES, STRUCTURED
from .test_spec_problems import BASE

SCHEMA_FILE = Path(__file__).resolve().parents[2] / "schemas" / "model_spec.json"


def test_schema_is_valid_2020_12():
    schema = json.loads(SCHEMA_FILE.read_text())
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    Draft202012Validator.check_schema(schema)
    assert model_schema() == schema


def test_meta_schema_check_can_fail():
    """The meta-schema check is not vacuous: a broken schema is refused."""
    with pytest.raises(SchemaError):
        Draft202012Validator.check_schema({"type": "no-such-type"})


@pytest.mark.parametrize("spec", [EIGHT_SCHOOLS, FEATURES, STRUCTURED, BASE])
def test_examples_validate(spec):
    Draft202012Validator(model_schema()).validate(spec)
    assert schema_problems(spec) == []


def test_contract_example_validates():
    """The spec example in DEVELOPERS.md ("The model spec") passes the schema."""
    text = (Path(__file__).resolve().parents[2] / "DEVELOPERS.md").read_text()
    start = text.index("```json", text.index("### The model spec")) + len("```json")
    example = json.loads(text[start:text.index("```", start)])
    assert schema_problems(example) == []


def test_readme_example_validates():
    """The worked example of docs/model-spec.md (docs/examples/cooling-units.json, which
    tests/docs holds equal to the page's block) passes the schema and compiles."""
    from worker.modeling import compile_model

    example = Path(__file__).resolve().parents[2] / "docs" / "examples" / "cooling-units.json"
    body = json.loads(example.read_text())
    model = compile_model(body["model"], body["data"])
    assert model.dimension == 7
    names = model.quantity_names
    # the column order the page states
    assert names[:3] == ["baseline", "heat", "spread"]
    assert names[19:22] == ["failures_per_100_unit_months", "hot_month_failures",
                            "replicate.monthly_failures[1]"]
    assert names[-1] == "pointwise.monthly_failures[8]"


def test_not_an_object():
    assert schema_problems([1, 2])[0].pointer == "/model"
