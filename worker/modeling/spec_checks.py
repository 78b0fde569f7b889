"""Checking a submission's model and data: the JSON Schema first, then every semantic check."""

from __future__ import annotations

import json
from functools import cache
from importlib import resources
from typing import Any

from jsonschema import Draft202012Validator, ValidationError

from schemas.validation import SchemaValidator

from ..problems import InvalidSubmission, Problem, pointer
from .assembly import assemble
from .model import CompiledModel

_TYPE_WORDS = {"object": "an object", "array": "an array", "string": "a string",
               "number": "a number", "integer": "a whole number", "boolean": "true or false",
               "null": "null"}
_ALTERNATIVES = {
    "argument": "a number, an array of numbers or an expression string",
    "dimension": "a whole number of at least 1 or the name of an integer input",
    "bound": "a number or the name of an integer input",
}
_NAME_RULE = "names are letters, digits and underscores, starting with a letter, at most 64 long"


@cache
def model_schema() -> dict:
    """The spec's JSON Schema (schemas/model_spec.json), read once from the package."""
    return json.loads(resources.files("schemas").joinpath("model_spec.json").read_text())


@cache
def _validator() -> Draft202012Validator:
    return SchemaValidator(model_schema())


def _json_type(value: Any) -> str:
    if isinstance(value, bool):
        return "true or false"
    if isinstance(value, int | float):
        return "a number"
    return {dict: "an object", list: "an array", str: "a string", type(None): "null"}.get(
        type(value), "a value")


def _sentence(error: ValidationError) -> tuple[str, str]:
    """Pointer and one plain sentence for a schema error."""
    at = pointer("model", *error.absolute_path)
    v, value, schema = error.validator, error.instance, error.schema
    defs = model_schema()["$defs"]
    if v == "additionalProperties" and isinstance(value, dict):
        allowed = sorted(schema.get("properties", {}))
        extras = sorted(set(value) - set(allowed))
        field = extras[0] if extras else ""
        return (pointer("model", *error.absolute_path, field),
                f"'{field}' is not a recognised field here; expected one of: {', '.join(allowed)}")
    if v == "required":
        return at, error.message.replace("is a required property", "is required but missing")
    if v == "enum":
        return at, f"{value!r} is not one of: {', '.join(map(str, schema['enum']))}"
    if v == "type":
        return at, f"expected {_TYPE_WORDS.get(str(schema['type']), schema['type'])}, " \
                   f"got {_json_type(value)}"
    if v == "pattern":
        if "propertyNames" in error.absolute_schema_path:
            return pointer("model", *error.absolute_path, value), \
                f"{value!r} is not a valid name: {_NAME_RULE}"
        if schema is defs["distribution"]:
            return at, f"{value!r} is not a valid distribution name"
        return at, f"{value!r} is not a valid name: {_NAME_RULE}"
    if v == "oneOf":
        for key, words in _ALTERNATIVES.items():
            if schema is defs[key]:
                return at, f"expected {words}, got {_json_type(value)} {json.dumps(value)[:60]}"
    if v == "not" and schema is defs["unknown"]:
        return at, "an unknown takes either a structure or lower/upper bounds, not both"
    if v == "minProperties":
        return at, "at least one entry is needed here"
    if v == "maxLength" and isinstance(value, str):
        return at, f"the text is {len(value)} characters long; the limit is {schema['maxLength']}"
    if v == "minLength":
        return at, "an empty string is not allowed here"
    if v in ("maxItems", "minItems", "minimum", "uniqueItems"):
        shown = json.dumps(value)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        words = {"maxItems": f"at most {schema.get('maxItems')} entries are allowed",
                 "minItems": f"at least {schema.get('minItems')} entries are needed",
                 "minimum": f"the value must be at least {schema.get('minimum')}",
                 "uniqueItems": "entries must not repeat"}[v]
        return at, f"{words}, got {shown}"
    message = error.message if len(error.message) <= 200 else error.message[:197] + "..."
    return at, message


def schema_problems(spec: Any) -> list[Problem]:
    """Every place the spec breaks schemas/model_spec.json (JSON Schema 2020-12)."""
    if not isinstance(spec, dict):
        return [Problem("/model", "the model must be a JSON object")]
    errors = sorted(_validator().iter_errors(spec), key=lambda e: list(map(str, e.absolute_path)))
    problems: list[Problem] = []
    for error in errors:
        # a oneOf failure carries one sub-error per alternative; the summary sentence is enough
        at, message = _sentence(error)
        problem = Problem(at, message)
        if problem not in problems:
            problems.append(problem)
    return problems


def _build(spec: Any, data: Any) -> tuple[list[Problem], CompiledModel | None]:
    problems = schema_problems(spec)
    if problems:
        return problems, None
    problems, assembly = assemble(spec, {} if data is None else data)
    if problems:
        return problems, None
    try:
        return [], CompiledModel(assembly)
    except InvalidSubmission as error:
        return error.problems, None


def check_model(spec: dict, data: dict) -> list[Problem]:
    """Every problem with a model spec and its data; empty when it compiles."""
    return _build(spec, data)[0]


def compile_model(spec: dict, data: dict) -> CompiledModel:
    """The compiled model, or InvalidSubmission carrying every problem found."""
    problems, model = _build(spec, data)
    if model is None:
        raise InvalidSubmission(problems)
    return model
