"""The model registry: specs registered under a name as immutable, numbered, hashed versions.

Versions are numbered 1, 2, ... per name and tenant. A version's content hash is the SHA-256 of
the spec's canonical JSON (service/canonical.py); registering a spec whose hash a version of the
name already has returns that version instead of making a new one, so a pipeline can register on
every run without growing the list.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.exc import IntegrityError

from service.access.tenancy import current_key_id, current_tenant
from service.canonical import sha256_of_json
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.store.engine import transaction
from service.store.models import ModelVersion, utc_now
from service.timestamps import rfc3339
from worker.problems import Problem

NAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
NAME_RULE = "1 to 64 letters, digits, '_', '.' or '-', starting with a letter or digit"
# A registration racing another one for the same next number tries again this often.
NUMBERING_ATTEMPTS = 5


@dataclass(frozen=True)
class Registered:
    version: ModelVersion
    created: bool  # False when an identical spec was already registered under the name


def _tenant() -> str:
    # Open mode (no keys) has no tenant; the store keeps "" so unique constraints still apply.
    return current_tenant() or ""


def check_name(name: str) -> None:
    if not NAME_PATTERN.match(name):
        raise ApiProblem(
            400,
            "invalid-model-name",
            "The model name is not valid",
            f"A model name is {NAME_RULE}; got {name!r}.",
        )


def spec_problems(spec: Any) -> list[Problem]:
    """The engine's checks of a spec on its own: every problem except those about missing data."""
    from worker.modeling import check_model

    if not isinstance(spec, dict):
        return [Problem("/model", "The model spec must be a JSON object.")]
    return [p for p in check_model(spec, {}) if not p.pointer.startswith("/data")]


def register(runtime: Runtime, name: str, spec: Any) -> Registered:
    """Store ``spec`` as the next version of ``name``, or return the version that already has it."""
    check_name(name)
    problems = spec_problems(spec)
    if problems:
        count = len(problems)
        raise ApiProblem(
            422,
            "invalid-model",
            "The model spec is not valid",
            f"{count} problem{'s' if count != 1 else ''} found; nothing was registered.",
            problems,
        )
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
            # Another registration took this number, or stored the same spec first: look again.
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
    if spec_sha256 is not None:
        query = query.where(ModelVersion.spec_sha256 == spec_sha256)
    with runtime.sessions() as session:
        return session.scalars(query).one_or_none()


def model_not_found(name: str, version: int | None = None) -> ApiProblem:
    what = f"model {name!r}" if version is None else f"version {version} of model {name!r}"
    return ApiProblem(404, "model-not-found", "No such model", f"There is no {what}.")


def get_version(runtime: Runtime, name: str, version: int) -> ModelVersion:
    check_name(name)
    row = _find(runtime, _tenant(), name, version=version)
    if row is None:
        raise model_not_found(name, version)
    return row


def list_versions(runtime: Runtime, name: str) -> list[ModelVersion]:
    check_name(name)
    with runtime.sessions() as session:
        rows = session.scalars(
            select(ModelVersion)
            .where(ModelVersion.tenant == _tenant(), ModelVersion.name == name)
            .order_by(ModelVersion.version)
        ).all()
    if not rows:
        raise model_not_found(name)
    return list(rows)


def list_models(runtime: Runtime) -> list[dict[str, Any]]:
    """Every registered name with its latest version, its hash and when it was registered."""
    latest = (
        select(ModelVersion.name, func.max(ModelVersion.version).label("latest"))
        .where(ModelVersion.tenant == _tenant())
        .group_by(ModelVersion.name)
        .subquery()
    )
    with runtime.sessions() as session:
        rows = session.scalars(
            select(ModelVersion)
            .join(
                latest,
                (ModelVersion.name == latest.c.name) & (ModelVersion.version == latest.c.latest),
            )
            .where(ModelVersion.tenant == _tenant())
            .order_by(ModelVersion.name)
        ).all()
    return [
        {
            "name": row.name,
            "latest_version": row.version,
            "latest_sha256": row.spec_sha256,
            "updated_at": rfc3339(row.created_at),
            "links": {"versions": f"/v1/models/{row.name}/versions"},
        }
        for row in rows
    ]


def version_resource(row: ModelVersion, with_spec: bool = False) -> dict[str, Any]:
    resource: dict[str, Any] = {
        "name": row.name,
        "version": row.version,
        "sha256": row.spec_sha256,
        "created_at": rfc3339(row.created_at),
        "links": {"self": f"/v1/models/{row.name}/versions/{row.version}"},
    }
    if with_spec:
        resource["model"] = row.spec
    return resource


@dataclass(frozen=True)
class ModelReference:
    name: str
    version: int
    sha256: str


def reference_problems(ref: Any) -> list[Problem]:
    if not isinstance(ref, dict):
        return [Problem("/model_ref", "The model reference is an object with name and version.")]
    problems = [
        Problem(f"/model_ref/{key}", f"Unknown member '{key}' of the model reference.")
        for key in ref
        if key not in ("name", "version")
    ]
    name, version = ref.get("name"), ref.get("version")
    if not isinstance(name, str) or not NAME_PATTERN.match(name):
        problems.append(Problem("/model_ref/name", f"The model name is {NAME_RULE}."))
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        problems.append(Problem("/model_ref/version", "The version is a whole number from 1."))
    return problems


def resolve_reference(runtime: Runtime, ref: dict[str, Any]) -> tuple[dict, ModelReference]:
    """The registered spec a submission's ``model_ref`` names; a 422 problem when there is none."""
    row = _find(runtime, _tenant(), ref["name"], version=ref["version"])
    if row is None:
        raise ApiProblem(
            422,
            "invalid-submission",
            "The submission is not valid",
            "1 problem found; nothing was stored or queued.",
            [
                Problem(
                    "/model_ref",
                    f"There is no version {ref['version']} of model {ref['name']!r} registered.",
                )
            ],
        )
    return row.spec, ModelReference(row.name, row.version, row.spec_sha256)
