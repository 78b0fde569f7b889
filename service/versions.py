"""Versions of the software that touched a job, for its audit record."""

from __future__ import annotations

import platform
from functools import cache
from importlib import metadata


def _version(distribution: str) -> str:
    try:
        return metadata.version(distribution)
    except metadata.PackageNotFoundError:
        return "not installed"


@cache
def software_versions() -> dict[str, str]:
    return {
        "drawyard": _version("drawyard"),
        "numpy": _version("numpy"),
        "scipy": _version("scipy"),
        "python": platform.python_version(),
    }
