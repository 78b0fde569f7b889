"""The JSON Schemas in schemas/: loading them, resolving references between them, validating."""

from __future__ import annotations

import json
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

from jsonschema import Draft202012Validator
from referencing import Registry, Resource
from referencing.jsonschema import DRAFT202012

from schemas.validation import SchemaValidator
from worker.problems import Problem, pointer

SCHEMA_FOLDER = Path(__file__).resolve().parent.parent / "schemas"
BASE_URI = "https://drawyard.invalid/schemas/"
# Stands in for the model spec's schema only while that file does not exist yet in a checkout.
PLACEHOLDER_MODEL_SPEC = {"type": "object", "title": "model spec (schema file missing)"}


@lru_cache(maxsize=1)
def load_schemas() -> dict[str, dict[str, Any]]:
    """Every schema file by its stem (``submission``, ``job``, ``model_spec``...)."""
    schemas = {
        path.stem: json.loads(path.read_text(encoding="utf-8"))
        for path in sorted(SCHEMA_FOLDER.glob("*.json"))
    }
    schemas.setdefault("model_spec", PLACEHOLDER_MODEL_SPEC)
    return schemas


@lru_cache(maxsize=1)
def registry() -> Registry:
    resources = []
    for stem, contents in load_schemas().items():
        resource = Resource.from_contents(contents, default_specification=DRAFT202012)
        # Registered under our base URI whatever $id a file declares, so "model_spec.json" resolves.
        resources.append((BASE_URI + stem + ".json", resource))
        if isinstance(contents.get("$id"), str):
            resources.append((contents["$id"], resource))
    return Registry().with_resources(resources)


@cache
def validator(stem: str) -> Draft202012Validator:
    schema = dict(load_schemas()[stem])
    schema.setdefault("$id", BASE_URI + stem + ".json")
    return SchemaValidator(
        schema, registry=registry(), format_checker=Draft202012Validator.FORMAT_CHECKER
    )


def _where(path: Any) -> str:
    return pointer(*path)


def schema_problems(stem: str, document: Any) -> list[Problem]:
    """Every place ``document`` breaks schema ``stem``, as problems with JSON pointers."""
    problems = []
    for error in sorted(validator(stem).iter_errors(document), key=lambda e: list(e.absolute_path)):
        where = _where(error.absolute_path)
        if error.validator == "additionalProperties" and isinstance(error.instance, dict):
            allowed = set(error.schema.get("properties", {}))
            extras = sorted(k for k in error.instance if k not in allowed)
            problems.extend(
                Problem(where + pointer(name), f"Unknown member '{name}'.") for name in extras
            )
        elif error.validator == "required":
            problems.append(Problem(where, _sentence(error.message)))
        else:
            problems.append(Problem(where, _sentence(error.message)))
    return problems


def _sentence(text: str) -> str:
    text = text.strip()
    return text[:1].upper() + text[1:] + ("" if text.endswith(".") else ".")
