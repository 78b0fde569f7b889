"""`DrawyardClient`: the service's API over `requests`, with timeouts, retries and typed answers."""

from __future__ import annotations

import json
import time
import uuid
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import requests

from service.client.errors import ProblemError, ServiceUnreachable
from service.client.model_records import ModelPage, ModelVersion, RegisteredModel, VersionPage
from service.client.records import FileDownload, Job, JobPage, SummaryDocument
from service.client.retrying import RETRY_STATUSES, RetryPolicy, parse_retry_after

DEFAULT_URL = "http://127.0.0.1:8000"
DOWNLOAD_CHUNK_BYTES = 1 << 16


class DrawyardClient:
    """One drawyard service. Every call has a connect and a read timeout; answers the service
    marks as temporary (429, 503) are retried after the wait it asks for, and connection
    failures are retried for calls that are safe to repeat (reads, cancels, and submissions,
    which carry an Idempotency-Key reused across their retries).

    `api_key` is sent as `Authorization: Bearer <key>` on every call; `rng` draws the backoff
    jitter; `sleep` is how the client waits (time.sleep by default).
    """

    def __init__(
        self,
        base_url: str = DEFAULT_URL,
        *,
        connect_timeout: float = 5.0,
        read_timeout: float = 30.0,
        retry: RetryPolicy | None = None,
        rng: np.random.Generator | None = None,
        session: requests.Session | None = None,
        headers: Mapping[str, str] | None = None,
        api_key: str | None = None,
        sleep: Callable[[float], None] = time.sleep,
    ):
        self.base_url = base_url.rstrip("/")
        self.timeout = (connect_timeout, read_timeout)
        self.retry = retry or RetryPolicy()
        self.rng = rng if rng is not None else np.random.default_rng()
        self.session = session or requests.Session()
        self.session.headers.update(headers or {})
        if api_key:
            self.session.headers["Authorization"] = f"Bearer {api_key}"
        self.sleep = sleep

    def close(self) -> None:
        self.session.close()

    def __enter__(self) -> DrawyardClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ---- jobs ---------------------------------------------------------------------------------

    def submit(
        self,
        body: Mapping[str, Any],
        idempotency_key: str | None = None,
        *,
        model_ref: tuple[str, int | None] | None = None,
        reuse: bool | None = None,
        warm_start: str | None = None,
    ) -> Job:
        """POST /v1/jobs. A fresh uuid4 key is made when none is given, and every retry of this
        submission sends the same one, so a repeat the service already accepted returns that job
        instead of queuing a second.

        `model_ref` (name, version or None for the latest) sends a registered model instead of
        the body's `model`; `reuse=False` forces a new run even when an identical earlier job
        succeeded; `warm_start` is the id of an earlier job to start from. A reused result comes
        back as a job like any other, already succeeded (its `raw["reused_from"]` names the
        source)."""
        payload = dict(body)
        if model_ref is not None:
            name, version = model_ref
            payload.pop("model", None)
            reference: dict[str, Any] = {"name": name}
            if version is not None:
                reference["version"] = version
            payload["model_ref"] = reference
        if reuse is not None:
            payload["reuse"] = reuse
        if warm_start is not None:
            payload["warm_start"] = {"job": warm_start}
        key = idempotency_key or uuid.uuid4().hex
        response = self._request(
            "POST", "/v1/jobs", json=payload, headers={"Idempotency-Key": key}, repeatable=True
        )
        return Job.from_json(response.json())

    def job(self, job_id: str) -> Job:
        return Job.from_json(self._request("GET", f"/v1/jobs/{job_id}").json())

    def cancel(self, job_id: str) -> Job:
        # Cancelling twice is the same as once, so a lost answer may be asked again.
        response = self._request("POST", f"/v1/jobs/{job_id}/cancel", repeatable=True)
        return Job.from_json(response.json())

    def list_jobs(
        self,
        states: Iterable[str] = (),
        labels: Mapping[str, str] | Iterable[str] = (),
        limit: int | None = None,
        cursor: str | None = None,
        verdicts: Iterable[str] = (),
    ) -> JobPage:
        """GET /v1/jobs, newest first; `labels` as {key: value} or "key:value" strings;
        `verdicts` among "passed", "failed" and "none" (not judged)."""
        params: list[tuple[str, str]] = []
        chosen = list(states)
        if chosen:
            params.append(("state", ",".join(chosen)))
        judged = list(verdicts)
        if judged:
            params.append(("verdict", ",".join(judged)))
        pairs = (
            [f"{k}:{v}" for k, v in labels.items()] if isinstance(labels, Mapping) else labels
        )
        params.extend(("label", pair) for pair in pairs)
        if limit is not None:
            params.append(("limit", str(limit)))
        if cursor:
            params.append(("cursor", cursor))
        return JobPage.from_json(self._request("GET", "/v1/jobs", params=params).json())

    def iter_jobs(
        self,
        states: Iterable[str] = (),
        labels: Mapping[str, str] | Iterable[str] = (),
        page_size: int | None = None,
        verdicts: Iterable[str] = (),
    ) -> Iterator[Job]:
        """Every matching job, following `next_cursor` page by page."""
        states, labels = list(states), labels if isinstance(labels, Mapping) else list(labels)
        verdicts = list(verdicts)
        cursor = None
        while True:
            page = self.list_jobs(states, labels, page_size, cursor, verdicts)
            yield from page.jobs
            if not page.next_cursor:
                return
            cursor = page.next_cursor

    # ---- the model registry -------------------------------------------------------------------

    def register_model(self, name: str, spec: Mapping[str, Any]) -> ModelVersion:
        """POST /v1/models/{name}/versions: the new version, or the one already holding this
        exact spec (`created` False). Safe to repeat, so a lost answer is asked again."""
        response = self._request(
            "POST", f"/v1/models/{_segment(name)}/versions", json={"model": dict(spec)},
            repeatable=True,
        )  # fmt: skip
        return ModelVersion.from_json(response.json(), created=response.status_code == 201)

    def list_models(self, limit: int | None = None, cursor: str | None = None) -> ModelPage:
        """GET /v1/models: registered names in name order, each with its latest version."""
        params = _page(limit, cursor)
        return ModelPage.from_json(self._request("GET", "/v1/models", params=params).json())

    def iter_models(self, page_size: int | None = None) -> Iterator[RegisteredModel]:
        cursor = None
        while True:
            page = self.list_models(page_size, cursor)
            yield from page.models
            if not page.next_cursor:
                return
            cursor = page.next_cursor

    def list_versions(
        self, name: str, limit: int | None = None, cursor: str | None = None
    ) -> VersionPage:
        """GET /v1/models/{name}/versions: newest first, with hash, time and key id."""
        response = self._request(
            "GET", f"/v1/models/{_segment(name)}/versions", params=_page(limit, cursor)
        )
        return VersionPage.from_json(response.json())

    def iter_versions(self, name: str, page_size: int | None = None) -> Iterator[ModelVersion]:
        cursor = None
        while True:
            page = self.list_versions(name, page_size, cursor)
            yield from page.versions
            if not page.next_cursor:
                return
            cursor = page.next_cursor

    def model_version(self, name: str, version: int) -> ModelVersion:
        """GET /v1/models/{name}/versions/{version}, with the spec."""
        path = f"/v1/models/{_segment(name)}/versions/{int(version)}"
        return ModelVersion.from_json(self._request("GET", path).json())

    # ---- results ------------------------------------------------------------------------------

    def summary(self, job_id: str) -> SummaryDocument:
        return self._request("GET", f"/v1/jobs/{job_id}/summary").json()

    def diagnostics(self, job_id: str) -> dict[str, Any]:
        return self._request("GET", f"/v1/jobs/{job_id}/diagnostics").json()

    def audit(self, job_id: str) -> dict[str, Any]:
        return self._request("GET", f"/v1/jobs/{job_id}/audit").json()

    def predictive_accuracy(self, job_id: str) -> dict[str, Any]:
        """PSIS-LOO of a succeeded job that stores its pointwise log likelihood."""
        return self._request("GET", f"/v1/jobs/{job_id}/predictive-accuracy").json()

    def evidence(self, job_id: str) -> dict[str, Any]:
        """The log marginal likelihood of a succeeded job, by bridge sampling."""
        return self._request("GET", f"/v1/jobs/{job_id}/evidence").json()

    def compare(self, job_ids: Sequence[str]) -> dict[str, Any]:
        """Succeeded jobs on the same data, ordered by elpd_loo (read-only, so repeatable)."""
        return self._request(
            "POST", "/v1/comparisons", json={"jobs": list(job_ids)}, repeatable=True
        ).json()

    def bayes_factor(self, first: str, second: str) -> dict[str, Any]:
        """log p(y | first) - log p(y | second) for two succeeded jobs on the same data."""
        return self._request(
            "POST", "/v1/bayes-factors", json={"jobs": [first, second]}, repeatable=True
        ).json()

    def draws(
        self,
        job_id: str,
        quantities: Sequence[str] | None = None,
        chains: Sequence[int] | None = None,
        thin: int | None = None,
    ) -> dict[str, Any]:
        """The draws as the service's JSON document (parsed)."""
        params = _selection("quantities", quantities, chains, thin)
        return self._request("GET", f"/v1/jobs/{job_id}/draws", params=params).json()

    def sampler_stats(
        self,
        job_id: str,
        statistics: Sequence[str] | None = None,
        chains: Sequence[int] | None = None,
        thin: int | None = None,
    ) -> dict[str, Any]:
        params = _selection("statistics", statistics, chains, thin)
        return self._request("GET", f"/v1/jobs/{job_id}/sampler-stats", params=params).json()

    def download(
        self,
        job_id: str,
        resource: str,
        destination: BinaryIO | Path,
        format: str = "json",
        columns: Sequence[str] | None = None,
        chains: Sequence[int] | None = None,
        thin: int | None = None,
        layout: str | None = None,
    ) -> int:
        """Stream `draws` or `sampler-stats` into a file; returns bytes written.

        `format` is json, csv, parquet or npz; `layout` wide or long (parquet and npz only).

        The body is copied in chunks as it arrives, so a large result never sits in memory.
        """
        params = _download_params(resource, format, columns, chains, thin, layout)
        response = self._request(
            "GET", f"/v1/jobs/{job_id}/{resource}", params=params, stream=True
        )
        with response:
            if isinstance(destination, Path):
                with destination.open("wb") as out:
                    return _copy(response, out)
            return _copy(response, destination)

    def download_if_changed(
        self,
        job_id: str,
        resource: str,
        path: Path,
        etag: str | None,
        format: str = "json",
        columns: Sequence[str] | None = None,
        chains: Sequence[int] | None = None,
        thin: int | None = None,
        layout: str | None = None,
    ) -> FileDownload:
        """Stream `draws` or `sampler-stats` into `path` unless the service's copy still has
        `etag`, the entity tag of an earlier download of the same selection.

        The tag goes out as If-None-Match (RFC 9110 section 13.1.2); a 304 answer leaves the file
        as it is. A changed result is written to a temporary file beside `path` and renamed over
        it only when complete, so a download that breaks off never replaces a good file.
        """
        params = _download_params(resource, format, columns, chains, thin, layout)
        headers = {"If-None-Match": etag} if etag else {}
        response = self._request(
            "GET", f"/v1/jobs/{job_id}/{resource}", params=params, stream=True, headers=headers
        )
        with response:
            current = response.headers.get("ETag")
            if response.status_code == 304:
                return FileDownload(changed=False, etag=current or etag, bytes_written=0)
            partial = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.part")
            try:
                with partial.open("wb") as out:
                    written = _copy(response, out)
                partial.replace(path)
            finally:
                partial.unlink(missing_ok=True)
        return FileDownload(changed=True, etag=current, bytes_written=written)

    # ---- transport ----------------------------------------------------------------------------

    def _request(
        self,
        method: str,
        path: str,
        *,
        repeatable: bool | None = None,
        stream: bool = False,
        **kwargs: Any,
    ) -> requests.Response:
        """Send, retrying as the policy allows; an error status becomes ProblemError."""
        if repeatable is None:
            repeatable = method in ("GET", "HEAD", "OPTIONS")
        url = self.base_url + path
        attempt = 0
        while True:
            try:
                response = self.session.request(
                    method, url, timeout=self.timeout, stream=stream, **kwargs
                )
            except requests.exceptions.ReadTimeout as error:
                # The request may have been received and acted on; waiting longer is the
                # caller's decision (a longer read timeout), not a silent repeat.
                raise ServiceUnreachable(
                    f"{method} {url}: no answer within the read timeout of {self.timeout[1]} s"
                ) from error
            except requests.exceptions.ConnectionError as error:
                if not repeatable or attempt >= self.retry.retries:
                    raise ServiceUnreachable(f"{method} {url}: {error}") from error
                self.sleep(self.retry.backoff(attempt, self.rng))
                attempt += 1
                continue
            if response.status_code < 400:
                return response
            wait = parse_retry_after(response.headers.get("Retry-After"))
            if (
                response.status_code in RETRY_STATUSES
                and attempt < self.retry.retries
                and (wait is None or wait <= self.retry.max_retry_after_seconds)
            ):
                response.close()
                self.sleep(self.retry.backoff(attempt, self.rng) if wait is None else wait)
                attempt += 1
                continue
            raise _problem(response, wait)


def _download_params(
    resource: str,
    format: str,
    columns: Sequence[str] | None,
    chains: Sequence[int] | None,
    thin: int | None,
    layout: str | None,
) -> list[tuple[str, str]]:
    if resource not in ("draws", "sampler-stats"):
        raise ValueError("resource is 'draws' or 'sampler-stats'")
    member = "quantities" if resource == "draws" else "statistics"
    params = [*_selection(member, columns, chains, thin), ("format", format)]
    if layout is not None:
        params.append(("layout", layout))
    return params


def _segment(name: str) -> str:
    # A name that is not a valid model name is still sent, escaped, so the service can say why.
    return requests.utils.quote(name, safe="")


def _page(limit: int | None, cursor: str | None) -> list[tuple[str, str]]:
    params = []
    if limit is not None:
        params.append(("limit", str(limit)))
    if cursor:
        params.append(("cursor", cursor))
    return params


def _selection(
    member: str, columns: Sequence[str] | None, chains: Sequence[int] | None, thin: int | None
) -> list[tuple[str, str]]:
    params = []
    if columns:
        params.append((member, ",".join(columns)))
    if chains:
        params.append(("chains", ",".join(str(c) for c in chains)))
    if thin is not None:
        params.append(("thin", str(thin)))
    return params


def _copy(response: requests.Response, out: BinaryIO) -> int:
    written = 0
    try:
        for chunk in response.iter_content(DOWNLOAD_CHUNK_BYTES):
            out.write(chunk)
            written += len(chunk)
    except requests.exceptions.RequestException as error:
        # The answer began and then broke off (a dropped connection, a stalled stream): the
        # file is incomplete, which the caller must hear about as "no usable answer".
        raise ServiceUnreachable(
            f"{response.url}: the download stopped after {written} bytes: {error}"
        ) from error
    return written


def _problem(response: requests.Response, retry_after: float | None) -> ProblemError:
    text = response.text
    try:
        document = json.loads(text)
    except ValueError:
        document = None
    if not isinstance(document, dict):
        document = {
            "type": "about:blank",
            "title": response.reason or "",
            "status": response.status_code,
            "detail": text[:500].strip(),
        }
    return ProblemError(response.status_code, document, retry_after)

