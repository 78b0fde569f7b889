"""The submit page's form: its fields to a submission body, and problems back to its fields.

A problem's JSON pointer (RFC 6901) says which part of the body it is about; the form shows it
beside the field that holds that part, and, for the spec and the data, beside the line.
"""

from __future__ import annotations

import json
import secrets
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from werkzeug.datastructures import FileStorage

from service.client.data_files import DataFileError, csv_columns
from service.json_body import parse_json_body
from service.problem_details import ApiProblem
from service.web.json_lines import layout, line_of

# The sampler settings the form has fields for, and how to read each one; other settings take
# their defaults (docs/samplers.md lists them).
SAMPLER_FIELDS: dict[str, type] = {
    "method": str,
    "chains": int,
    "warmup_iterations": int,
    "draws": int,
    "seed": int,
    "target_acceptance": float,
}
METHODS = ("nuts", "hmc", "metropolis", "laplace", "grid")
GENERAL = "general"
# Lines of context shown around a flagged line in the spec or data excerpt.
CONTEXT_LINES = 2
MAX_SHOWN_LINE = 160


@dataclass
class FieldProblem:
    pointer: str
    message: str
    line: int | None = None


@dataclass
class FormState:
    """What the analyst typed (or uploaded), kept as text so a refused form comes back intact."""

    model_text: str = ""
    data_text: str = ""
    sampler: dict[str, str] = field(default_factory=dict)
    labels_text: str = ""
    token: str = field(default_factory=lambda: secrets.token_hex(16))
    problems: dict[str, list[FieldProblem]] = field(default_factory=dict)
    general: list[str] = field(default_factory=list)

    def add(self, name: str, problem: FieldProblem) -> None:
        self.problems.setdefault(name, []).append(problem)


def _uploaded_or_typed(files: Mapping[str, FileStorage], name: str, typed: str) -> str:
    upload = files.get(f"{name}_file")
    if upload is not None and upload.filename:
        return upload.read().decode("utf-8", errors="replace")
    return typed


def _is_csv(upload: FileStorage | None) -> bool:
    return bool(upload and upload.filename and upload.filename.lower().endswith(".csv"))


def _data_text(state: FormState, files: Mapping[str, FileStorage], typed: str) -> str:
    """The data as JSON text. A CSV upload is read as the CLI reads one (its header names the
    inputs, each column a vector, whole-number columns integers) and merged with a JSON object
    typed in the box, such as the sizes, as the CLI merges several data files."""
    upload = files.get("data_file")
    if not _is_csv(upload):
        return _uploaded_or_typed(files, "data", typed)
    text = upload.read().decode("utf-8-sig", errors="replace")
    try:
        columns = csv_columns(text, f"CSV file {upload.filename}")
    except DataFileError as error:
        state.add("data", FieldProblem("/data", str(error)))
        return typed
    merged: dict[str, Any] = {}
    if typed.strip():
        try:
            merged = json.loads(typed)
        except ValueError:
            merged = None
        if not isinstance(merged, dict):
            state.add("data", FieldProblem(
                "/data", "Beside a CSV file, the box may hold only a JSON object (such as sizes)."))
            return typed
    for name in sorted(set(merged) & set(columns)):
        state.add("data", FieldProblem(
            f"/data/{name}", f"'{name}' is both a CSV column and in the box; keep one."))
    return layout({**merged, **columns})[0]


def read_form(form: Mapping[str, str], files: Mapping[str, FileStorage]) -> FormState:
    state = FormState(
        model_text=_uploaded_or_typed(files, "model", form.get("model_text", "")),
        sampler={name: form.get(name, "").strip() for name in SAMPLER_FIELDS},
        labels_text=form.get("labels_text", ""),
        token=form.get("token") or secrets.token_hex(16),
    )
    state.data_text = _data_text(state, files, form.get("data_text", ""))
    return state


def from_submission(body: Mapping[str, Any]) -> FormState:
    """A form filled in from a submission body (the demo)."""
    sampler = body.get("sampler") or {}
    return FormState(
        model_text=layout(body.get("model"))[0],
        data_text=layout(body.get("data") or {})[0],
        sampler={name: "" if sampler.get(name) is None else str(sampler[name])
                 for name in SAMPLER_FIELDS},
        labels_text="".join(f"{k}={v}\n" for k, v in (body.get("labels") or {}).items()),
    )


def _parse_json(state: FormState, name: str, text: str, what: str) -> Any:
    if not text.strip():
        state.add(name, FieldProblem(f"/{name}", f"Paste or upload the {what} (a JSON object)."))
        return None
    try:
        json.loads(text)
    except json.JSONDecodeError as error:
        state.add(name, FieldProblem(
            f"/{name}", f"This is not valid JSON: {error.msg} at line {error.lineno}, column "
            f"{error.colno}.", error.lineno))
        return None
    except RecursionError:
        pass  # reported below, as the API reports it
    try:
        # The API's own reading: repeated keys, too deep a nesting, numbers beyond range.
        return parse_json_body(text)
    except ApiProblem as problem:
        for error in problem.errors:
            state.add(name, FieldProblem(f"/{name}{error['pointer']}", error["message"]))
        return None


def _sampler_value(kind: type, raw: str) -> Any:
    # A value that does not read as its type is sent as typed, so the service's own check
    # reports it (with its pointer) in the words it uses for the API.
    try:
        return kind(raw)
    except ValueError:
        return raw


def _labels(state: FormState) -> dict[str, str]:
    labels = {}
    for number, line in enumerate(state.labels_text.splitlines(), start=1):
        if not line.strip():
            continue
        key, sep, value = line.partition("=")
        if not sep or not key.strip():
            state.add("labels", FieldProblem(
                "/labels", f"Line {number} of the labels is {line.strip()!r}; write one "
                "key=value per line.", number))
            continue
        labels[key.strip()] = value.strip()
    return labels


def build_body(state: FormState) -> dict[str, Any] | None:
    """The submission body, or None when the spec or data is not JSON (problems added).

    Malformed label lines are added to the problems but leave the body (without them), so the
    caller can still have the service check the rest and show every problem at once.
    """
    model = _parse_json(state, "model", state.model_text, "model spec")
    data = _parse_json(state, "data", state.data_text, "data")
    sampler = {name: _sampler_value(SAMPLER_FIELDS[name], raw)
               for name, raw in state.sampler.items() if raw}
    if state.problems:
        return None
    labels = _labels(state)
    # Lay the spec and data out afresh so the line numbers shown with problems match the text.
    state.model_text = layout(model)[0]
    state.data_text = layout(data)[0]
    return {"model": model, "data": data, "sampler": sampler, "labels": labels}


def field_for(pointer: str) -> str:
    """Which field of the form holds the part of the body a pointer names."""
    parts = pointer.split("/")
    top = parts[1] if len(parts) > 1 else ""
    if top in ("model", "data", "labels"):
        return top
    if top == "sampler":
        if len(parts) > 2 and parts[2] in SAMPLER_FIELDS:
            return f"sampler.{parts[2]}"
        return "sampler"
    return GENERAL


def place_problems(state: FormState, body: Mapping[str, Any],
                   problems: Iterable[Mapping[str, str]]) -> None:
    """Attach the service's problems to the form fields, with the spec or data line of each."""
    lines = {name: layout(body.get(name))[1] for name in ("model", "data")}
    for problem in problems:
        pointer = problem.get("pointer", "")
        name = field_for(pointer)
        line = None
        if name in lines:
            line = line_of(lines[name], pointer.removeprefix(f"/{name}"))
        if name == GENERAL:
            state.general.append(f"{pointer or 'submission'}: {problem.get('message', '')}")
        else:
            state.add(name, FieldProblem(pointer, problem.get("message", ""), line))


def excerpt(text: str, problems: list[FieldProblem]) -> list[dict[str, Any]]:
    """The flagged lines of ``text`` with a little context, each with its problems.

    Gaps between the shown stretches are marked by an entry with ``gap`` set.
    """
    lines = text.splitlines()
    flagged: dict[int, list[str]] = {}
    for problem in problems:
        if problem.line is not None and 1 <= problem.line <= len(lines):
            flagged.setdefault(problem.line, []).append(problem.message)
    shown = sorted({n for line in flagged
                    for n in range(line - CONTEXT_LINES, line + CONTEXT_LINES + 1)
                    if 1 <= n <= len(lines)})
    rows: list[dict[str, Any]] = []
    previous = 0
    for number in shown:
        if number > previous + 1:
            rows.append({"gap": True})
        content = lines[number - 1]
        if len(content) > MAX_SHOWN_LINE:
            content = content[:MAX_SHOWN_LINE] + " …"
        rows.append({"number": number, "text": content, "messages": flagged.get(number, [])})
        previous = number
    return rows


FIELD_TITLES = {"model": "Model spec", "data": "Data", "labels": "Labels",
                "sampler": "Sampler settings"}
FIELD_ANCHORS = {"model": "model_text", "data": "data_text", "labels": "labels_text",
                 "sampler": "field-sampler"}


def problem_summary(state: FormState) -> list[dict[str, Any]]:
    """One entry per field with problems: where to jump to, its name, and how many."""
    entries = []
    for name, found in state.problems.items():
        setting = name.removeprefix("sampler.")
        entries.append({
            "anchor": FIELD_ANCHORS.get(name, setting),
            "title": FIELD_TITLES.get(name, f"Sampler setting {setting}"),
            "count": len(found),
        })
    return entries
