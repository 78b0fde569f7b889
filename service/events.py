"""Appending to a job's event log (rows are only ever inserted)."""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from service.store.models import Event, utc_now


def record(
    session: Session,
    job_id: str,
    kind: str,
    state: str | None = None,
    chain_index: int | None = None,
    detail: dict[str, Any] | None = None,
) -> None:
    session.add(
        Event(
            job_id=job_id,
            at=utc_now(),
            kind=kind,
            state=state,
            chain_index=chain_index,
            detail=detail,
        )
    )
