"""A write-only byte sink that hands over what was written so far, for streamed responses."""

from __future__ import annotations

import io


class Spool(io.RawIOBase):
    """Collects writes; ``take()`` returns and forgets them, so only one part is ever held."""

    def __init__(self) -> None:
        super().__init__()
        self._parts: list[bytes] = []
        self._position = 0

    def writable(self) -> bool:
        return True

    def write(self, data) -> int:  # type: ignore[override]
        chunk = bytes(data)
        self._parts.append(chunk)
        self._position += len(chunk)
        return len(chunk)

    def tell(self) -> int:
        # Writers that are told the stream cannot seek still ask where they are.
        return self._position

    def seekable(self) -> bool:
        return False

    def take(self) -> bytes:
        out = b"".join(self._parts)
        self._parts.clear()
        return out
