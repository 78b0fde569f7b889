"""A small version of the load run (tests/load/soak.py) for every test run: 20 readers for 5 s
while jobs run and 10 slow clients are held, then a burst of 30 tiny jobs; zero errors, every
job stored once and finished.
The full size runs under `make soak` and `make bench`."""

from __future__ import annotations

from pathlib import Path

from tests.load.soak import run


def test_readers_see_no_errors_and_a_burst_of_jobs_is_counted_exactly(
    redis_server, tmp_path: Path
) -> None:
    reads, figures, (alone, health) = run(clients=20, seconds=5, jobs=30, workers=2,
                                          burst_timeout=240, folder=tmp_path, slow_clients=10)
    assert reads.latencies and not reads.errors, reads.errors[:5]
    assert alone.latencies and health.latencies, (alone, health)
    assert not alone.errors and not health.errors, (alone.errors[:5], health.errors[:5])
    assert figures.exact, figures
