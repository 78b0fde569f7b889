"""Service settings: defaults, then DRAWYARD_* environment variables, then an explicit mapping.

Any setting may instead be read from a file named by ``DRAWYARD_<NAME>_FILE`` (its content, less a
final newline), so that secrets can arrive as compose or orchestrator secrets mounted as files
rather than as environment variables, which every process inspector shows.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from sqlalchemy.engine import make_url

PREFIX = "DRAWYARD_"
log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Settings:
    """Everything the API and the workers read from their environment.

    Each field is read from ``DRAWYARD_<FIELD NAME IN CAPITALS>``; docs/configuration.md lists them.
    """

    database_url: str = "sqlite:///var/drawyard.sqlite"
    # Put into database_url when that URL carries no password (from a secret file, typically).
    database_password: str = ""
    broker_url: str = "redis://127.0.0.1:6379/0"
    # Folder of the serverless broker used when broker_url is "filesystem://" (one machine only).
    broker_folder: str = "var/broker"
    queue: str = "drawyard"
    # The queue of finishing steps and completion callbacks, consumed by its own worker (started
    # with `-Q` on this name) so that neither waits behind chains nor holds a chain's process.
    closing_queue: str = "drawyard.closing"
    # A pass-through: a JSON object of the queue library's own transport options (its names),
    # merged over the ones derived here.
    broker_library_options: str = ""
    # Seconds; 0 means "derive from chain_time_limit" so a running chain is never redelivered.
    redelivery_timeout: int = 0
    chain_time_limit: int = 3600
    max_chains: int = 16
    max_draws: int = 100_000
    max_body_bytes: int = 10 * 1024 * 1024
    # Seconds a client may take to send a request's line and headers, and then its body
    # (service/buffered_worker.py); our choice: 10 s is ample for headers on any link, and 60 s
    # lets the largest body arrive at 175 kB/s. Past them the connection is closed.
    header_read_seconds: float = 10.0
    body_read_seconds: float = 60.0
    checkpoint_every: int = 200
    # MB of compiled models a worker process keeps between chains (worker/model_cache.py); 0
    # compiles every chain afresh. Our choice: a few large data sets' worth on a worker of 2 GB.
    model_cache_mb: int = 256
    # Seconds between checkpoints as well (whichever comes first); 0 means by iterations only.
    checkpoint_seconds: float = 30.0
    # Deliveries of one chain that may take its lease; the next ends the chain as failed, so a
    # chain that kills its worker is not requeued for ever.
    max_attempts: int = 3
    # The sweeper (service/sweeper.py): how often it looks, and how long a queued chain may wait
    # for a worker before its task is sent again (the broker may have lost it).
    sweep_interval: float = 10.0
    requeue_queued_after: float = 300.0
    # A file the sweeper touches after each good sweep, for `drawyard sweeper --check`.
    sweeper_heartbeat: str = ""
    # How often a running chain writes progress, renews its lease and looks at the cancel flag.
    progress_interval: float = 1.0
    # A lease not renewed for this long is taken to belong to a dead worker.
    lease_seconds: int = 60
    # Access (service/access/): 1 refuses every API request without a valid key, even before the
    # first key is created; 0 leaves the service open until a key exists.
    require_keys: int = 0
    # Requests per key per window (0: no limit), counted in Redis so all API processes share it.
    rate_limit: int = 600
    rate_window: int = 60
    # Failed authentications (invalid, revoked or malformed keys) one client address may make in
    # a sliding window before every request from it is refused for the rest of the window (0: no
    # limit). Our choice: 20 a minute is far more than a person mistyping a key, and slows a
    # guessing client to a useless rate.
    auth_failure_limit: int = 20
    auth_failure_window: int = 60
    # Queued plus running jobs one tenant may have at once (0: no cap).
    max_active_jobs: int = 100
    # Scalar unknowns (after shapes are resolved from the data) one model may declare.
    max_unknowns: int = 100_000
    page_limit: int = 50
    max_page_limit: int = 500
    # Completion callbacks (service/callbacks.py): URL prefixes a submission's notify.url must
    # start with, separated by commas or spaces (empty: none allowed), and the HMAC-SHA256 key.
    callback_allow: str = ""
    callback_secret: str = ""
    # Delivery attempts of one callback in all, the delay before the first retry (doubling after
    # each), and the seconds one attempt may take.
    callback_attempts: int = 5
    callback_backoff: float = 2.0
    callback_timeout: float = 10.0
    # Browser sign-in (service/access/browser_sessions.py): the key that signs session cookies and
    # form tokens (shared by every API process; sign-in is refused while it is empty), and how
    # long a session lasts: 8 hours, one working day, our own choice.
    session_secret: str = ""
    session_hours: float = 8.0
    # Log lines: "json" (one JSON object a line, for log collectors) or "text".
    log_format: str = "json"

    @property
    def effective_redelivery_timeout(self) -> int:
        """The broker's redelivery timeout: explicit, or longer than the longest allowed chain."""
        if self.redelivery_timeout > 0:
            return self.redelivery_timeout
        # Margin covers queueing behind other chains on the same worker process and the finish.
        return self.chain_time_limit + max(600, self.chain_time_limit // 4)


def _convert(kind: type, raw: Any, name: str) -> Any:
    if isinstance(raw, kind) and not (kind is int and isinstance(raw, bool)):
        return raw
    try:
        if kind is int:
            return int(str(raw).strip())
        if kind is float:
            return float(str(raw).strip())
    except ValueError as error:
        message = f"setting {PREFIX}{name.upper()}: expected a {kind.__name__}, got {raw!r}"
        raise ValueError(message) from error
    return str(raw)


def _read_setting_file(path: str, name: str) -> str:
    try:
        return Path(path).read_text().removesuffix("\n")
    except OSError as error:
        message = f"setting {PREFIX}{name.upper()}_FILE: cannot read {path!r} ({error.strerror})"
        raise ValueError(message) from error


def with_password(url: str, password: str) -> str:
    """The URL with ``password`` as its password, unless it already has one."""
    parsed = make_url(url)
    return url if parsed.password else parsed.set(password=password).render_as_string(False)


def load_settings(
    config: Mapping[str, Any] | None = None, environ: Mapping[str, str] | None = None
) -> Settings:
    """Build settings from defaults, the environment, then ``config``.

    ``config`` keys are field names in either case, with or without the ``DRAWYARD_`` prefix; an
    explicit mapping wins over the environment so that tests can build apps side by side.
    """
    environ = os.environ if environ is None else environ
    explicit = {}
    for key, value in (config or {}).items():
        name = key.upper().removeprefix(PREFIX).lower()
        explicit[name] = value
    values: dict[str, Any] = {}
    types = {"int": int, "float": float, "str": str}
    for field in fields(Settings):
        kind = types[field.type] if isinstance(field.type, str) else field.type
        if field.name in explicit:
            values[field.name] = _convert(kind, explicit[field.name], field.name)
        elif PREFIX + field.name.upper() in environ:
            values[field.name] = _convert(kind, environ[PREFIX + field.name.upper()], field.name)
        elif PREFIX + field.name.upper() + "_FILE" in environ:
            raw = _read_setting_file(environ[PREFIX + field.name.upper() + "_FILE"], field.name)
            values[field.name] = _convert(kind, raw, field.name)
    if values.get("database_password"):
        values["database_url"] = with_password(
            values.get("database_url", Settings.database_url), values["database_password"]
        )
    settings = Settings(**values)
    if 0 < settings.redelivery_timeout <= settings.chain_time_limit:
        log.warning(
            "redelivery timeout %ss is not longer than the chain time limit %ss: the broker will "
            "redeliver long chains (the chain lease drops the duplicates)",
            settings.redelivery_timeout,
            settings.chain_time_limit,
        )
    return settings
