"""An on-disk cache of rendered plots, keyed by job id, plot kind and plot parameters.

Only succeeded jobs are plotted and their draws never change, so an entry never goes stale; the
renderer's version is part of the key so that a change to the figures makes new entries. Files
are written to a temporary name and renamed, so processes sharing the folder never read half a
file (rename is atomic within one file system: POSIX rename(2)).
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from collections.abc import Callable, Mapping
from pathlib import Path

# Bump when a figure changes, so old cached files are not served for the new look.
RENDER_VERSION = 1


def cache_key(job_id: str, kind: str, parameters: Mapping[str, object]) -> str:
    text = json.dumps(
        {"version": RENDER_VERSION, "job": job_id, "kind": kind, "parameters": dict(parameters)},
        sort_keys=True,
        separators=(",", ":"),
    )
    return hashlib.sha256(text.encode()).hexdigest()


class PlotCache:
    def __init__(self, folder: Path):
        self.folder = folder

    def path(self, job_id: str, key: str) -> Path:
        # job ids are 32 hex digits (schemas/common.json), safe as a folder name
        return self.folder / job_id / f"{key}.svg"

    def get_or_render(
        self, job_id: str, kind: str, parameters: Mapping[str, object],
        render: Callable[[], bytes],
    ) -> tuple[bytes, str]:
        """The cached SVG (rendering and storing it on a miss) and its key, for an ETag."""
        key = cache_key(job_id, kind, parameters)
        target = self.path(job_id, key)
        try:
            return target.read_bytes(), key
        except FileNotFoundError:
            pass
        content = render()
        target.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=target.parent, suffix=".part")
        try:
            with os.fdopen(handle, "wb") as stream:
                stream.write(content)
            os.replace(temporary, target)
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        return content, key
