"""Typed views of the service's JSON answers: jobs, chains, verdicts, pages of jobs."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, NotRequired, TypedDict

TERMINAL_STATES = frozenset({"succeeded", "failed", "cancelled", "timed_out"})


@dataclass(frozen=True)
class FailedCheck:
    check: str
    quantity: str | None
    chain: int | None
    value: float | None
    threshold: float | None
    message: str

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> FailedCheck:
        return cls(
            check=str(doc.get("check", "")),
            quantity=doc.get("quantity"),
            chain=doc.get("chain"),
            value=doc.get("value"),
            threshold=doc.get("threshold"),
            message=str(doc.get("message", "")),
        )


@dataclass(frozen=True)
class Verdict:
    passed: bool
    failed_checks: list[FailedCheck]
    thresholds: dict[str, float | None]

    @classmethod
    def from_json(cls, doc: dict[str, Any] | None) -> Verdict | None:
        if doc is None:
            return None
        return cls(
            passed=bool(doc.get("passed")),
            failed_checks=[FailedCheck.from_json(c) for c in doc.get("failed_checks") or []],
            thresholds=dict(doc.get("thresholds") or {}),
        )


@dataclass(frozen=True)
class ChainProgress:
    chain: int  # 1-based, as the service reports it
    state: str
    phase: str | None
    iteration: int
    iterations_total: int
    divergences: int  # in sampling
    warmup_divergences: int
    attempts: int
    error: str | None

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> ChainProgress:
        return cls(
            chain=int(doc.get("chain", 0)),
            state=str(doc.get("state", "")),
            phase=doc.get("phase"),
            iteration=int(doc.get("iteration") or 0),
            iterations_total=int(doc.get("iterations_total") or 0),
            divergences=int(doc.get("divergences") or 0),
            warmup_divergences=int(doc.get("warmup_divergences") or 0),
            attempts=int(doc.get("attempts") or 0),
            error=doc.get("error"),
        )


@dataclass(frozen=True)
class Job:
    id: str
    state: str
    created_at: str | None
    started_at: str | None
    finished_at: str | None
    elapsed_seconds: float | None
    labels: dict[str, str]
    cancel_requested: bool
    chains: list[ChainProgress]
    verdict: Verdict | None
    error: str | None
    links: dict[str, str]
    raw: dict[str, Any] = field(repr=False, compare=False)

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> Job:
        return cls(
            id=str(doc["id"]),
            state=str(doc["state"]),
            created_at=doc.get("created_at"),
            started_at=doc.get("started_at"),
            finished_at=doc.get("finished_at"),
            elapsed_seconds=doc.get("elapsed_seconds"),
            labels=dict(doc.get("labels") or {}),
            cancel_requested=bool(doc.get("cancel_requested")),
            chains=[ChainProgress.from_json(c) for c in doc.get("chains") or []],
            verdict=Verdict.from_json(doc.get("verdict")),
            error=doc.get("error"),
            links=dict(doc.get("links") or {}),
            raw=doc,
        )

    @property
    def finished(self) -> bool:
        return self.state in TERMINAL_STATES

    @property
    def partial(self) -> bool:
        """True when the job stopped at its wall-time limit: its results cover the draws so far."""
        return bool(self.raw.get("partial", self.state == "timed_out"))

    @property
    def progress(self) -> float:
        """Share of all chains' iterations (warm-up included) done, 0 to 1."""
        total = sum(c.iterations_total for c in self.chains)
        if self.state == "succeeded":
            return 1.0
        return sum(c.iteration for c in self.chains) / total if total else 0.0


@dataclass(frozen=True)
class JobPage:
    jobs: list[Job]
    next_cursor: str | None

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> JobPage:
        return cls([Job.from_json(j) for j in doc.get("jobs") or []], doc.get("next_cursor"))


class Interval(TypedDict):
    level: float
    lower: float | None
    upper: float | None


class QuantitySummary(TypedDict, total=False):
    name: str
    median: float | None
    interval: Interval
    mean: float | None
    sd: float | None
    rhat: float | None
    bulk_ess: float | None
    tail_ess: float | None
    mean_error: float | None
    sd_error: float | None
    quantile_errors: dict[str, float | None]  # "median", "lower", "upper"
    note: str | None
    discrete: ValueTable | None  # integer-valued quantities only (docs/discrete-summaries.md)


class Estimate(TypedDict, total=False):
    """A probability read off the draws, its Monte Carlo standard error and its indicator's ESS."""

    probability: float
    error: float | None
    ess: float | None


class ValueProbability(Estimate):
    value: int


class OtherValues(Estimate):
    distinct_values: int


class ValueTable(TypedDict):
    distinct_values: int
    values: list[ValueProbability]   # increasing values, at most 20
    other: OtherValues | None        # the mass of the values not listed
    probability_of_one: Estimate | None  # 0/1 quantities: P(= 1)


class PatternProbability(Estimate, total=False):
    values: list[int]
    included: list[str]              # binary vectors: the elements equal to 1


class OtherPatterns(Estimate):
    distinct_patterns: int


class NamedEstimate(Estimate):
    name: str


class PatternTable(TypedDict):
    name: str
    elements: list[str]
    distinct_patterns: int
    patterns: list[PatternProbability]   # most probable first, at most 10
    other: OtherPatterns | None
    binary: bool
    inclusion: list[NamedEstimate] | None  # binary vectors: each element's P(= 1)


class SummaryDocument(TypedDict):
    job: str
    partial: bool
    quantities: list[QuantitySummary]
    patterns: NotRequired[list[PatternTable]]  # the vectors the submission's summary.patterns named
    verdict: dict[str, Any] | None


@dataclass(frozen=True)
class FileDownload:
    """What `DrawyardClient.download_if_changed` did: `changed` is false when the service answered
    304 Not Modified and the file was left alone; `etag` is the tag to send next time."""

    changed: bool
    etag: str | None
    bytes_written: int
