"""The progress line a terminal sees while `drawyard watch` waits (service/client/waiting.py)."""

from __future__ import annotations

from service.client.records import Job
from service.client.waiting import TimeLeft, clock_text, progress_line


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
    assert "divergences warm-up 0 sampling 3" in line


def test_a_job_whose_chains_all_timed_out_shows_every_chain_done() -> None:
    assert "chains 2/2 done" in progress_line(job_with(["timed_out", "timed_out"], "timed_out"))


def test_elapsed_and_time_left_follow_the_pace_seen_while_watching() -> None:
    """A quarter of the iterations in the first 30 s after the first look, with a quarter done
    then: half remains at that pace, so 60 s are left (arithmetic)."""
    pace = TimeLeft()
    assert pace.estimate(0.25, 100.0) is None  # one look tells no pace
    left = pace.estimate(0.5, 130.0)
    assert left == 60.0
    line = progress_line(job_with(["running", "running"], "running"), 30.0, left)
    assert "elapsed 0:30 left ~1:00" in line
    assert clock_text(3725) == "1:02:05"


def test_a_finished_job_shows_no_time_left() -> None:
    line = progress_line(job_with(["succeeded"], "succeeded"), 12.0, 0.0)
    assert "elapsed 0:12" in line and "left" not in line
