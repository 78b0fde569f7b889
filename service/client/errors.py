"""What the client raises: a problem document from the service, or no usable answer at all."""

from __future__ import annotations

from typing import Any, TypedDict


class FieldProblem(TypedDict):
    pointer: str
    message: str


class ClientError(Exception):
    """Base of everything the client raises on purpose."""


class ProblemError(ClientError):
    """The service answered with an error status; `problem` is its RFC 9457 problem document.

    Answers that are not problem documents (a proxy's HTML page, say) are wrapped in one with
    the status, the reason phrase as title and the start of the body as detail, so callers read
    one shape.
    """

    def __init__(self, status: int, problem: dict[str, Any], retry_after: float | None = None):
        self.status = status
        self.problem = problem
        self.retry_after = retry_after
        super().__init__(self._sentence())

    @property
    def title(self) -> str:
        return str(self.problem.get("title") or "")

    @property
    def detail(self) -> str:
        return str(self.problem.get("detail") or "")

    @property
    def type(self) -> str:
        return str(self.problem.get("type") or "about:blank")

    @property
    def errors(self) -> list[FieldProblem]:
        found = self.problem.get("errors") or []
        return [
            {"pointer": str(e.get("pointer", "")), "message": str(e.get("message", ""))}
            for e in found
            if isinstance(e, dict)
        ]

    @property
    def is_client_error(self) -> bool:
        return 400 <= self.status < 500

    def _sentence(self) -> str:
        parts = [f"{self.status} {self.title}".strip()]
        if self.detail:
            parts.append(self.detail)
        return ": ".join(parts)


class ServiceUnreachable(ClientError):
    """No answer: the connection failed or timed out (after the retries the call allows)."""
