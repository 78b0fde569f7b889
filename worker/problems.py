"""Problem records: where a submission is wrong and why, in one sentence each."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a submission.

    ``pointer`` is an RFC 6901 JSON pointer into the submission body (``/model/...``, ``/data/...``,
    ``/sampler/...``, ``/checks/...``); ``message`` is a sentence a statistician understands.
    """

    pointer: str
    message: str

    def as_dict(self) -> dict[str, str]:
        return {"pointer": self.pointer, "message": self.message}


class InvalidSubmission(ValueError):
    """Raised with every problem found, never only the first."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("; ".join(f"{p.pointer}: {p.message}" for p in self.problems))


def escape_token(token: str | int) -> str:
    """Escape one reference token for a JSON pointer (RFC 6901 section 3)."""
    return str(token).replace("~", "~0").replace("/", "~1")


def pointer(*tokens: str | int) -> str:
    """Build a JSON pointer from raw tokens."""
    return "".join("/" + escape_token(t) for t in tokens)
