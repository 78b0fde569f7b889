"""The model registry: specs registered under a name as immutable, numbered, hashed versions.

Versions are numbered 1, 2, ... per name and tenant. A version's content hash is the SHA-256 of
the spec's canonical JSON (service/canonical.py, the same digest a job's spec_sha256 is), so a job
run from a registered model and one that sent the same spec inline share their model hash.
Registering a spec whose hash a version of the name already has returns that version instead of
making a new one, so a pipeline can register on every run without growing the list.
"""

from __future__ import annotations

import base64
import binascii
import re
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.exc import IntegrityError

from service.access.limits import unknown_count_problems
from service.access.tenancy import current_key_id, current_tenant
from service.canonical import NOT_JSON_NUMBER, non_finite_pointers, sha256_of_json
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.schemas import schema_problems
from service.store.engine import transaction
from service.store.models import ModelVersion, utc_now
from service.timestamps import rfc3339
from worker.problems import Problem

# Used with fullmatch: re.match with a "$" anchor would also accept a trailing newline.
NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}")
NAME_RULE = "1 to 64 letters, digits, '_', '.' or '-', starting with a letter or digit"
# Version numbers are stored as 32-bit integers; a larger number in a URL simply names no version.
MAX_VERSION = 2**31 - 1
# A registration racing another for the same next number tries again this often; each retry sees
# the other's row, so more than a handful of rounds means something else is wrong.
NUMBERING_ATTEMPTS = 8


@dataclass(frozen=True)
class Registered:
    version: ModelVersion
    created: bool  # False when an identical spec was already registered under the name


@dataclass(frozen=True)
class ModelReference:
    """What a job records about the registered model it ran."""

    name: str
    version: int
    sha256: str


def _tenant() -> str:
    # Open mode (no keys) has no tenant; the store keeps "" so the unique constraints still apply.
    return current_tenant() or ""


def valid_name(name: Any) -> bool:
    return isinstance(name, str) and NAME_PATTERN.fullmatch(name) is not None


def model_not_found(name: str, version: int | None = None) -> ApiProblem:
    what = f"model {name!r}" if version is None else f"version {version} of model {name!r}"
    return ApiProblem(404, "model-not-found", "No such model", f"There is no {what}.")


def invalid_model(problems: list[Problem]) -> ApiProblem:
    count = len(problems)
    return ApiProblem(
        422,
        "invalid-model",
        "The model spec is not valid",
        f"{count} problem{'s' if count != 1 else ''} found; nothing was registered.",
        problems,
    )


def registration_problems(body: Any, settings: Any) -> list[Problem]:
    """Every problem with a registration body ``{"model": spec}``, pointers as in a submission.

    The engine's own check of a model (worker.modeling.check_model) is run without data; the
    problems it reports about the missing data are the only ones dropped, so a spec that
    registers is one a job's model check accepts once its data comes.
    """
    from worker.modeling import check_model

    problems = schema_problems("model_registration", body)
    if not isinstance(body, dict):
        return problems
    # The spec itself is the engine's to check (its messages are the ones a job would get), and
    # a missing spec is reported at /model rather than at the root.
    problems = [p for p in problems if p.pointer != "" and not p.pointer.startswith("/model")]
    if "model" not in body:
        return problems + [Problem("/model", "The registration has no model spec.")]
    too_big = unknown_count_problems(body, settings)
    if too_big:
        return problems + too_big
    found = [p for p in check_model(body["model"], {}) if not p.pointer.startswith("/data")]
    # The engine does not look at every number (bounds, for one); the version hash needs all of
    # them to be JSON numbers.
    reported = {p.pointer for p in found}
    found += [
        Problem(where, NOT_JSON_NUMBER)
        for where in non_finite_pointers(body["model"], "/model")
        if where not in reported
    ]
    return problems + found


def register(runtime: Runtime, name: str, body: Any) -> Registered:
    """Store ``body["model"]`` as the next version of ``name``, or return the one that has it."""
    if not valid_name(name):
        raise ApiProblem(
            400,
            "invalid-model-name",
            "The model name is not valid",
            f"A model name is {NAME_RULE}.",
            [{"parameter": "name", "message": f"A model name is {NAME_RULE}."}],
        )
    problems = registration_problems(body, runtime.settings)
    if problems:
        raise invalid_model(problems)
    spec = body["model"]
    digest = sha256_of_json(spec)
    tenant = _tenant()
    for _ in range(NUMBERING_ATTEMPTS):
        existing = _find(runtime, tenant, name, spec_sha256=digest)
        if existing is not None:
            return Registered(existing, created=False)
        try:
            with transaction(runtime.sessions) as session:
                latest = session.scalar(
                    select(func.max(ModelVersion.version)).where(
                        ModelVersion.tenant == tenant, ModelVersion.name == name
                    )
                )
                row = ModelVersion(
                    tenant=tenant,
                    name=name,
                    version=int(latest or 0) + 1,
                    spec_sha256=digest,
                    spec=spec,
                    created_at=utc_now(),
                    created_by=current_key_id(),
                )
                session.add(row)
            return Registered(row, created=True)
        except IntegrityError:
            # Another registration took this number, or stored the same spec first: the
            # unique constraints refused ours; look again with its row in view.
            continue
    raise ApiProblem(
        503,
        "registry-busy",
        "The registry is busy",
        f"Could not number a new version of {name!r}; try again shortly.",
        headers={"Retry-After": "1"},
    )


def _find(
    runtime: Runtime,
    tenant: str,
    name: str,
    version: int | None = None,
    spec_sha256: str | None = None,
) -> ModelVersion | None:
    query = select(ModelVersion).where(ModelVersion.tenant == tenant, ModelVersion.name == name)
    if version is not None:
        query = query.where(ModelVersion.version == version)
    elif spec_sha256 is not None:
        query = query.where(ModelVersion.spec_sha256 == spec_sha256)
    else:
        query = query.order_by(ModelVersion.version.desc()).limit(1)
    with runtime.sessions() as session:
        return session.scalars(query).first()


def get_version(runtime: Runtime, name: str, version: int) -> ModelVersion:
    row = None
    if valid_name(name) and 1 <= version <= MAX_VERSION:
        row = _find(runtime, _tenant(), name, version=version)
    if row is None:
        raise model_not_found(name, version)
    return row


# ---- listings, paginated like the jobs list: an opaque cursor, newest version first -----------


def _encode(prefix: str, value: str) -> str:
    return base64.urlsafe_b64encode(f"{prefix}{value}".encode()).decode().rstrip("=")


def _decode(prefix: str, cursor: str, shape: re.Pattern[str]) -> str:
    """The value a cursor of ours carries; 400 unless it has the ``shape`` we give out.

    Checking the shape, not just the prefix, keeps a forged value (a NUL, which PostgreSQL
    refuses in a text parameter; a non-ASCII digit, which ``int`` refuses) from the database.
    """
    from service.job_queries import bad_parameter

    try:
        text = base64.urlsafe_b64decode((cursor + "=" * (-len(cursor) % 4)).encode()).decode()
    except (ValueError, binascii.Error, UnicodeDecodeError) as error:
        raise bad_parameter("cursor", "The cursor is not one this service gave out.") from error
    value = text.removeprefix(prefix)
    if not text.startswith(prefix) or shape.fullmatch(value) is None:
        raise bad_parameter("cursor", "The cursor is not one this service gave out.")
    return value


VERSIONS_CURSOR = "versions-before:"
NAMES_CURSOR = "models-after:"
# A versions cursor holds a version number (ASCII digits: str.isdigit also accepts "²").
VERSION_NUMBER = re.compile(r"[0-9]{1,10}")


def list_versions(
    runtime: Runtime, name: str, limit: int, cursor: str | None
) -> tuple[list[ModelVersion], str | None]:
    """A page of a name's versions, newest first, and the next page's cursor (None on the last)."""
    if not valid_name(name):
        raise model_not_found(name)
    query = (
        select(ModelVersion)
        .where(ModelVersion.tenant == _tenant(), ModelVersion.name == name)
        .order_by(ModelVersion.version.desc())
        .limit(limit + 1)
    )
    if cursor:
        before = int(_decode(VERSIONS_CURSOR, cursor, VERSION_NUMBER))
        if before > MAX_VERSION + 1:
            from service.job_queries import bad_parameter

            raise bad_parameter("cursor", "The cursor is not one this service gave out.")
        query = query.where(ModelVersion.version < before)
    with runtime.sessions() as session:
        rows = list(session.scalars(query).all())
        exists = bool(rows) or session.scalar(
            select(ModelVersion.id)
            .where(ModelVersion.tenant == _tenant(), ModelVersion.name == name)
            .limit(1)
        )
    if not exists:
        raise model_not_found(name)
    more = len(rows) > limit
    rows = rows[:limit]
    next_cursor = _encode(VERSIONS_CURSOR, str(rows[-1].version)) if more and rows else None
    return rows, next_cursor


def list_models(
    runtime: Runtime, limit: int, cursor: str | None
) -> tuple[list[ModelVersion], str | None]:
    """A page of registered names in name order, each as its latest version."""
    tenant = _tenant()
    latest = (
        select(ModelVersion.name, func.max(ModelVersion.version).label("latest"))
        .where(ModelVersion.tenant == tenant)
        .group_by(ModelVersion.name)
        .subquery()
    )
    query = (
        select(ModelVersion)
        .join(
            latest,
            (ModelVersion.name == latest.c.name) & (ModelVersion.version == latest.c.latest),
        )
        .where(ModelVersion.tenant == tenant)
        .order_by(ModelVersion.name)
        .limit(limit + 1)
    )
    if cursor:
        query = query.where(ModelVersion.name > _decode(NAMES_CURSOR, cursor, NAME_PATTERN))
    with runtime.sessions() as session:
        rows = list(session.scalars(query).all())
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, _encode(NAMES_CURSOR, rows[-1].name) if more and rows else None


def model_resource(row: ModelVersion) -> dict[str, Any]:
    """A registered name, described by its latest version."""
    return {
        "name": row.name,
        "latest_version": row.version,
        "latest_sha256": row.spec_sha256,
        "updated_at": rfc3339(row.created_at),
        "links": {
            "versions": f"/v1/models/{row.name}/versions",
            "latest": f"/v1/models/{row.name}/versions/{row.version}",
        },
    }


def version_resource(row: ModelVersion, with_spec: bool = False) -> dict[str, Any]:
    resource: dict[str, Any] = {
        "name": row.name,
        "version": row.version,
        "sha256": row.spec_sha256,
        "created_at": rfc3339(row.created_at),
        "created_by": row.created_by,
        "links": {"self": f"/v1/models/{row.name}/versions/{row.version}"},
    }
    if with_spec:
        resource["model"] = row.spec
    return resource


# ---- submissions that name a registered model -------------------------------------------------


def reference_problems(ref: Any) -> list[Problem]:
    """The shape of a submission's ``model_ref``: a name and, optionally, a version number."""
    if not isinstance(ref, dict):
        return [
            Problem("/model_ref", "The model reference is an object with a name and a version.")
        ]
    problems = [
        Problem(f"/model_ref/{key}", f"Unknown member '{key}' of the model reference.")
        for key in ref
        if key not in ("name", "version")
    ]
    if not valid_name(ref.get("name")):
        problems.append(Problem("/model_ref/name", f"The model name is {NAME_RULE}."))
    version = ref.get("version")
    if version is not None and (
        isinstance(version, bool) or not isinstance(version, int) or not 1 <= version <= MAX_VERSION
    ):
        problems.append(
            Problem(
                "/model_ref/version",
                "The version is a whole number from 1 (or left out for the latest).",
            )
        )
    return problems


def resolve_reference(
    runtime: Runtime, ref: dict[str, Any]
) -> tuple[dict, ModelReference] | Problem:
    """The registered spec ``model_ref`` names (the latest version when none is given).

    A problem at /model_ref/name or /model_ref/version when the caller's tenant has no such
    model; another tenant's model is simply not there.
    """
    tenant, name, version = _tenant(), ref["name"], ref.get("version")
    row = _find(runtime, tenant, name, version=version)
    if row is not None:
        return row.spec, ModelReference(row.name, row.version, row.spec_sha256)
    if version is None or _find(runtime, tenant, name) is None:
        return Problem("/model_ref/name", f"No model named {name!r} is registered.")
    return Problem("/model_ref/version", f"Model {name!r} has no version {version} registered.")
