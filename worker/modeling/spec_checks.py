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
from .distributions import distribution_names
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


# Where distribution terms live in a spec: priors, likelihood terms, per-draw predictions.
_TERM_LISTS = (("priors",), ("likelihood",), ("per_draw", "predictions"))


def _unknown_distributions(spec: dict) -> list[Problem]:
    """A term naming a distribution that does not exist, at its `distribution` member.

    Said before anything about the term's arguments: which arguments are right depends on the
    distribution, so a complaint about them alone (an empty object, say) would send the user to
    the wrong field.
    """
    known = distribution_names()
    problems: list[Problem] = []
    for path in _TERM_LISTS:
        items: Any = spec
        for key in path:
            items = items.get(key) if isinstance(items, dict) else None
        if not isinstance(items, list):
            continue
        for i, item in enumerate(items):
            name = item.get("distribution") if isinstance(item, dict) else None
            if isinstance(name, str) and name not in known:
                shown = name if len(name) <= 64 else name[:61] + "..."
                problems.append(Problem(pointer("model", *path, i, "distribution"),
                                        f"unknown distribution '{shown}'; known distributions: "
                                        f"{', '.join(known)}"))
    return problems


def schema_problems(spec: Any) -> list[Problem]:
    """Every place the spec breaks schemas/model_spec.json (JSON Schema 2020-12), and first of
    all every term whose distribution does not exist."""
    if not isinstance(spec, dict):
        return [Problem("/model", "the model must be a JSON object")]
    problems = _unknown_distributions(spec)
    # the term's other members are judged against a distribution it does not have: leave them
    silenced = tuple(p.pointer.removesuffix("/distribution") + "/" for p in problems)
    errors = sorted(_validator().iter_errors(spec), key=lambda e: list(map(str, e.absolute_path)))
    for error in errors:
        if silenced and pointer("model", *error.absolute_path).startswith(silenced):
            continue
        # a oneOf failure carries one sub-error per alternative; the summary sentence is enough
        at, message = _sentence(error)
        problem = Problem(at, message)
        if problem not in problems:
            problems.append(problem)
    return problems


def _only_unknown_names(spec: Any, problems: list[Problem]) -> bool:
    """Whether the schema's only objections are unknown distribution names, with at most an empty
    arguments object beside them: what the semantic checks can take as it is."""
    if not isinstance(spec, dict) or problems != _unknown_distributions(spec):
        return False
    flagged = {p.pointer.removesuffix("/distribution") for p in problems}
    for error in _validator().iter_errors(spec):
        at = pointer("model", *error.absolute_path)
        item, _, member = at.rpartition("/")
        if item not in flagged or (member, error.validator) not in (
                ("distribution", "pattern"), ("distribution", "maxLength"),
                ("arguments", "minProperties")):
            return False
    return True


def _build(spec: Any, data: Any, reparametrise: bool = True,
           ) -> tuple[list[Problem], CompiledModel | None]:
    problems = schema_problems(spec)
    if problems and not _only_unknown_names(spec, problems):
        return problems, None
    # Unknown distributions alone leave the spec's shape intact: the semantic checks still run,
    # so every other problem is reported too; they say the same about those terms, in context.
    problems, assembly = assemble(spec, {} if data is None else data, reparametrise)
    if problems:
        return problems, None
    try:
        return [], CompiledModel(assembly)
    except InvalidSubmission as error:
        return error.problems, None


def check_model(spec: dict, data: dict) -> list[Problem]:
    """Every problem with a model spec and its data; empty when it compiles."""
    return _build(spec, data)[0]


def compile_model(spec: dict, data: dict, reparametrise: bool = True) -> CompiledModel:
    """The compiled model, or InvalidSubmission carrying every problem found.

    `reparametrise` allows the automatic QR reparametrisation of linear predictors.
    """
    problems, model = _build(spec, data, reparametrise)
    if model is None:
        raise InvalidSubmission(problems)
    return model
