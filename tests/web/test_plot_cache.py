"""The plot cache: one render per job and parameters, whole files only (common practice)."""

from __future__ import annotations

from pathlib import Path

from service.plots.cache import PlotCache, cache_key

JOB = "0" * 32


def test_renders_once_then_reads_the_file(tmp_path: Path) -> None:
    cache = PlotCache(tmp_path)
    calls: list[int] = []

    def render() -> bytes:
        calls.append(1)
        return b"<svg/>"

    first = cache.get_or_render(JOB, "trace", {"quantity": "mu"}, render)
    second = cache.get_or_render(JOB, "trace", {"quantity": "mu"}, render)
    assert first == second == (b"<svg/>", cache_key(JOB, "trace", {"quantity": "mu"}))
    assert len(calls) == 1
    assert list((tmp_path / JOB).iterdir()) == [cache.path(JOB, first[1])]


def test_parameters_and_kind_are_part_of_the_key() -> None:
    keys = {
        cache_key(JOB, "trace", {"quantity": "mu"}),
        cache_key(JOB, "trace", {"quantity": "tau"}),
        cache_key(JOB, "density", {"quantity": "mu"}),
        cache_key("1" * 32, "trace", {"quantity": "mu"}),
        cache_key(JOB, "ranks", {"quantity": "mu", "bins": 20}),
        cache_key(JOB, "ranks", {"quantity": "mu", "bins": 10}),
    }
    assert len(keys) == 6
    assert cache_key(JOB, "scatter", {"x": "a", "y": "b"}) == cache_key(
        JOB, "scatter", {"y": "b", "x": "a"}
    )


def test_a_failed_render_leaves_nothing_behind(tmp_path: Path) -> None:
    cache = PlotCache(tmp_path)

    def broken() -> bytes:
        raise RuntimeError("no figure")

    try:
        cache.get_or_render(JOB, "trace", {"quantity": "mu"}, broken)
    except RuntimeError:
        pass
    assert not (tmp_path / JOB).exists() or not any((tmp_path / JOB).iterdir())
