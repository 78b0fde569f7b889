"""Typed views of the model registry's answers: versions, names, and pages of either."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class ModelVersion:
    name: str
    version: int
    sha256: str  # SHA-256 of the spec's canonical JSON, the same as a job's model hash
    created_at: str
    created_by: str | None
    spec: dict[str, Any] | None  # present in the answers about one version
    created: bool = False  # True when a registration made this version (201), not found it (200)
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, doc: dict[str, Any], created: bool = False) -> ModelVersion:
        return cls(
            name=str(doc["name"]),
            version=int(doc["version"]),
            sha256=str(doc["sha256"]),
            created_at=str(doc.get("created_at") or ""),
            created_by=doc.get("created_by"),
            spec=doc.get("model"),
            created=created,
            raw=doc,
        )


@dataclass(frozen=True)
class RegisteredModel:
    """A registered name with its latest version."""

    name: str
    latest_version: int
    latest_sha256: str
    updated_at: str
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> RegisteredModel:
        return cls(
            name=str(doc["name"]),
            latest_version=int(doc["latest_version"]),
            latest_sha256=str(doc["latest_sha256"]),
            updated_at=str(doc.get("updated_at") or ""),
            raw=doc,
        )


@dataclass(frozen=True)
class ModelPage:
    models: list[RegisteredModel]
    next_cursor: str | None

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> ModelPage:
        items = [RegisteredModel.from_json(m) for m in doc.get("models") or []]
        return cls(items, doc.get("next_cursor"))


@dataclass(frozen=True)
class VersionPage:
    name: str
    versions: list[ModelVersion]
    next_cursor: str | None

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> VersionPage:
        items = [ModelVersion.from_json(v) for v in doc.get("versions") or []]
        return cls(str(doc.get("name", "")), items, doc.get("next_cursor"))
