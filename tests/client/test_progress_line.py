"""The progress line a terminal sees while `drawyard watch` waits (service/client/waiting.py)."""

from __future__ import annotations

from service.client.records import Job
from service.client.waiting import progress_line


def job_with(chain_states: list[str], job_state: str) -> Job:
    return Job.from_json(
        {
            "id": "ab" * 16,
            "state": job_state,
            "progress": 0.5,
            "chains": [
                {"chain": i + 1, "state": s, "phase": "sampling", "iteration": 10,
                 "iterations_total": 20, "divergences": i}
                for i, s in enumerate(chain_states)
            ],
        }
    )


def test_chains_that_stopped_count_as_done_whatever_their_final_state() -> None:
    line = progress_line(job_with(["timed_out", "succeeded", "running"], "running"))
    assert "chains 2/3 done" in line
    assert "divergences 3" in line


def test_a_job_whose_chains_all_timed_out_shows_every_chain_done() -> None:
    assert "chains 2/2 done" in progress_line(job_with(["timed_out", "timed_out"], "timed_out"))
