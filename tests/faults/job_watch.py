"""Helpers of the fault tests: submit over HTTP, watch the store, and run the reference in process.

The reference for every "nothing changed" claim is the engine's own uninterrupted run
(worker.runner.run_in_process) in a fresh Python process, compared bit for bit.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import requests
from sqlalchemy import create_engine, func, select
from sqlalchemy.orm import Session

from service.store.models import Chain, ChainArray, CheckpointBlock, Event, Job
from tests.harness.in_process import in_process

TERMINAL = ("succeeded", "failed", "cancelled", "timed_out")
REPO_ROOT = Path(__file__).resolve().parents[2]


def submit(base_url: str, body: dict) -> str:
    """POST the body; the job's URL."""
    response = requests.post(base_url + "/v1/jobs", json=body, timeout=60)
    assert response.status_code == 202, response.text
    return base_url + response.headers["Location"]


def get_json(url: str, timeout: float = 30.0) -> Any:
    response = requests.get(url, timeout=timeout)
    assert response.status_code == 200, f"{url}: {response.status_code} {response.text}"
    return response.json()


def wait_until(check: Callable[[], Any], timeout: float, what: str, logs: Callable[[], str]) -> Any:
    """Poll check() until it returns something true; fail with the service's logs on timeout."""
    deadline = time.monotonic() + timeout
    while True:
        value = check()
        if value:
            return value
        assert time.monotonic() < deadline, f"gave up after {timeout:.0f} s on {what}\n{logs()}"
        time.sleep(0.2)


def job_ended(job_url: str, timeout: float, logs: Callable[[], str]) -> dict:
    def ended() -> dict | None:
        job = get_json(job_url)
        return job if job["state"] in TERMINAL else None

    return wait_until(ended, timeout, "the job to end", logs)


class StoreView:
    """Read-only look at the results store from the test process."""

    def __init__(self, database_url: str):
        self.engine = create_engine(database_url)

    def close(self) -> None:
        self.engine.dispose()

    def chains(self, job_id: str) -> list[Chain]:
        with Session(self.engine) as session:
            return list(
                session.scalars(
                    select(Chain).where(Chain.job_id == job_id).order_by(Chain.chain_index)
                ).all()
            )

    def events(self, job_id: str) -> list[Event]:
        with Session(self.engine) as session:
            return list(
                session.scalars(select(Event).where(Event.job_id == job_id).order_by(Event.id))
            )

    def draws_rows(self, job_id: str) -> int:
        """Stored draws arrays of the job (one per succeeded chain when nothing is duplicated)."""
        with Session(self.engine) as session:
            chain_ids = select(Chain.id).where(Chain.job_id == job_id)
            return len(
                session.scalars(
                    select(ChainArray.id).where(
                        ChainArray.chain_id.in_(chain_ids), ChainArray.kind == "draws"
                    )
                ).all()
            )

    def checkpoint_parts(self, job_id: str, chain_index: int = 0) -> tuple[Any, list[Any]]:
        """A chain's stored checkpoint (state, iteration) and its blocks' (start, stop, bytes),
        read in one transaction, so they are what one checkpoint write left together."""
        with Session(self.engine) as session, session.begin():
            chain = session.execute(
                select(Chain.id, Chain.checkpoint, Chain.checkpoint_iteration).where(
                    Chain.job_id == job_id, Chain.chain_index == chain_index
                )
            ).one()
            blocks = session.execute(
                select(
                    CheckpointBlock.start_iteration,
                    CheckpointBlock.stop_iteration,
                    func.length(CheckpointBlock.data),
                )
                .where(CheckpointBlock.chain_id == chain.id)
                .order_by(CheckpointBlock.start_iteration)
            ).all()
        return chain, [tuple(b) for b in blocks]

    def job_states(self) -> dict[str, str]:
        with Session(self.engine) as session:
            return {job_id: state for job_id, state in session.execute(select(Job.id, Job.state))}


def in_process_draws(body: dict) -> np.ndarray:
    """worker.runner.run_in_process(body)["draws"], computed in a fresh Python process."""
    return in_process(body)["draws"]


def http_draws(job_url: str) -> tuple[dict, np.ndarray]:
    """The draws endpoint's JSON and its values as (chains, draws, quantities) float64."""
    payload = get_json(job_url + "/draws", timeout=120)
    special = {"NaN": np.nan, "Infinity": np.inf, "-Infinity": -np.inf}
    values = np.array(
        [
            [[special.get(v, v) if isinstance(v, str) else v for v in row] for row in c["draws"]]
            for c in payload["chains"]
        ],
        dtype=np.float64,
    )
    return payload, values


def bits(values: np.ndarray) -> np.ndarray:
    """The IEEE 754 bit patterns, so that equality means bitwise equality (NaNs included)."""
    return np.ascontiguousarray(values, dtype="<f8").view("<u8")
