"""The service's settings: one table of name, default, meaning and parser.

Every setting is an environment variable ``CERTIMATCH_<NAME>``. Settings of scope ``app``
are read by :func:`service.app.create_app`, which also takes them as ``<NAME>`` keys of
its mapping (the mapping wins); settings of scope ``server`` are read by
``deploy/gunicorn.conf.py`` before any worker starts. Both refuse a bad value with a
``ValueError`` that names the variable and the values it allows, so a typo stops the
process at start-up instead of changing its behaviour quietly.
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields
from typing import Any, Literal

ENV_PREFIX = "CERTIMATCH_"

LOG_LEVELS = ("debug", "info", "warning", "error")

#: Shortest bearer token accepted from the environment.
MIN_TOKEN_LENGTH = 16
#: Largest time limit a server may allow a request (one day).
MAX_SECONDS = 86_400


class _Refused(ValueError):
    """Raised by a parser; the loader puts the variable's name and the raw value around it."""


def _whole(raw: Any) -> int:
    try:
        value = int(raw)
    except (TypeError, ValueError):
        raise _Refused("must be a whole number") from None
    if isinstance(raw, float) and not raw.is_integer():
        raise _Refused("must be a whole number")
    if isinstance(raw, bool) or value < 1:
        raise _Refused("must be a whole number of at least 1")
    return value


def _whole_or_auto(raw: Any) -> int | None:
    # "auto" is spelled out so that a deployment can say "one per core" explicitly.
    if isinstance(raw, str) and raw.strip().lower() == "auto":
        return None
    try:
        return _whole(raw)
    except _Refused:
        raise _Refused("must be a whole number of at least 1 or auto") from None


def _flag(raw: Any) -> bool:
    # Only the two words: "yes", "1" or "on" would each be a second spelling to document,
    # and a misspelt "flase" must not silently count as either.
    if isinstance(raw, bool):
        return raw
    if isinstance(raw, str) and raw.strip().lower() in ("true", "false"):
        return raw.strip().lower() == "true"
    raise _Refused("must be true or false")


def _log_level(raw: Any) -> str:
    if isinstance(raw, str) and raw.strip().lower() in LOG_LEVELS:
        return raw.strip().lower()
    raise _Refused(f"must be one of {', '.join(LOG_LEVELS)}")


def _tokens(raw: Any) -> tuple[str, ...]:
    # Short tokens are guessable; 16 characters is the least a generator would hand out.
    if not isinstance(raw, str):
        raise _Refused("must be a comma-separated list of tokens")
    tokens = tuple(t.strip() for t in raw.split(",") if t.strip())
    if any(len(t) < MIN_TOKEN_LENGTH or not t.isprintable() or " " in t for t in tokens):
        raise _Refused(f"must hold printable tokens of at least {MIN_TOKEN_LENGTH} "
                       "characters without spaces")
    return tokens


def _path(raw: Any) -> str:
    if not isinstance(raw, str):
        raise _Refused("must be a file path")
    return raw.strip()


#: What is kept of each decision: everything, its provenance and digests only, nothing.
RECORD_MODES = ("full", "digest", "off")


def _text(raw: Any) -> str:
    if not isinstance(raw, str):
        raise _Refused("must be text")
    return raw.strip()


def _record_mode(raw: Any) -> str:
    if isinstance(raw, str) and raw.strip().lower() in RECORD_MODES:
        return raw.strip().lower()
    raise _Refused(f"must be one of {', '.join(RECORD_MODES)}")


def _days(raw: Any) -> int | None:
    # "keep" is spelled out so that a deployment can say "never prune" explicitly.
    if raw is None or (isinstance(raw, str) and raw.strip().lower() in ("", "keep")):
        return None
    try:
        value = int(raw)
    except (TypeError, ValueError):
        value = 0
    if isinstance(raw, bool) or value < 1 or (isinstance(raw, float) and raw != value):
        raise _Refused("must be a whole number of days of at least 1, or keep")
    return value


def _seconds(raw: Any) -> int:
    value = _whole(raw)
    if value > MAX_SECONDS:
        raise _Refused(f"must be a whole number from 1 to {MAX_SECONDS}")
    return value


_BIND = re.compile(r"(?:\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+):(\d{1,5})")


def _bind(raw: Any) -> str:
    allowed = "must be HOST:PORT, [IPv6]:PORT (PORT from 1 to 65535) or unix:PATH"
    if not isinstance(raw, str):
        raise _Refused(allowed)
    text = raw.strip()
    if text.startswith("unix:") and len(text) > len("unix:"):
        return text
    match = _BIND.fullmatch(text)
    if match is None or not 1 <= int(match.group(1)) <= 65535:
        raise _Refused(allowed)
    return text


def bind_port(bind: str) -> int | None:
    """The TCP port of a ``BIND`` value, or None for a unix socket."""
    match = _BIND.fullmatch(bind.strip())
    return int(match.group(1)) if match else None


Scope = Literal["app", "server"]


@dataclass(frozen=True)
class Setting:
    """One row of the table: ``CERTIMATCH_<name>``, its default, meaning and parser."""

    name: str
    default: Any
    help: str
    parse: Callable[[Any], Any]
    scope: Scope = "app"
    secret: bool = False      # never repeat the value in a message
    shown: str | None = None  # the README's word for the default, when not the value

    @property
    def env(self) -> str:
        return ENV_PREFIX + self.name

    @property
    def shown_default(self) -> str:
        """The default as the README's settings table writes it."""
        if self.shown is not None:
            return self.shown
        if self.default is None:
            return "auto"
        if self.default in ((), ""):
            return "none"
        if isinstance(self.default, bool):
            return "true" if self.default else "false"
        return str(self.default)


#: Every setting of the service; the README's settings table lists exactly these.
SETTINGS: tuple[Setting, ...] = (
    Setting("MAX_BODY_BYTES", 64 * 1024 * 1024,
            "largest request body in bytes; larger bodies get 413 before parsing", _whole),
    Setting("MAX_CELLS", 16_000_000,
            "largest cost matrix (rows x columns, null cells included)", _whole),
    Setting("MAX_ARCS", 2_000_000, "largest number of arcs in an arc list", _whole),
    Setting("MAX_NODES", 1_000_000, "largest number of sources + sinks + nodes", _whole),
    Setting("MAX_ID_LENGTH", 200, "longest id, in characters", _whole),
    Setting("MAX_PRICES_WORK", 100_000_000,
            "most work one request's override prices may take: Dijkstra runs x (nodes + "
            "residual arcs); more gets 413 naming /prices (checking a price proof in "
            "/v1/verify, likewise)", _whole),
    Setting("METRICS_ENABLED", True,
            "serve GET /metrics (Prometheus text format) and count requests and solves: "
            "true or false", _flag),
    Setting("TOKENS", (),
            "bearer tokens that may call the service, comma-separated; none: no "
            "authentication (allowed on a loopback address only)", _tokens, secret=True),
    Setting("TOKENS_FILE", "",
            "file of bearer tokens, one per line, or their SHA-256 digests written "
            "sha256:<64 hex digits>; # starts a comment", _path),
    Setting("METRICS_PUBLIC", False,
            "serve GET /metrics without a token when tokens are configured: true or false",
            _flag),
    Setting("MAX_TIME_LIMIT_S", 60,
            "longest a request may compute, in seconds; a request may ask for less with "
            "time_limit_s", _seconds),
    Setting("DATABASE_URL", "",
            "database of the decision store, an SQLAlchemy URL; none: a SQLite file in "
            "DATA_DIR, created on first start. Several replicas share one PostgreSQL "
            "database (postgresql+psycopg://user@host/db)", _text, secret=True),
    Setting("DATA_DIR", "./certimatch-data",
            "directory of the embedded database and of the generated signing key", _text),
    Setting("RECORD", "full",
            "what is kept of each decision: full (problem, answer and provenance), "
            "digest (provenance and digests only) or off", _record_mode),
    Setting("RETENTION_DAYS", None,
            "days after which the problem and answer of a record are removed (its "
            "provenance and leaf stay, so the log still verifies); keep: never", _days,
            shown="keep"),
    Setting("SIGNING_KEY_FILE", "",
            "file of the Ed25519 key (PEM) that signs checkpoints; none: generated as "
            "signing-key.pem in DATA_DIR on first start. Replicas share one key", _text),
    Setting("INSECURE", False,
            "gunicorn only: allow listening on a non-loopback address with no tokens "
            "(a warning is logged): true or false", _flag, "server"),
    Setting("BIND", "127.0.0.1:8080",
            "address gunicorn listens on: HOST:PORT, [IPv6]:PORT or unix:PATH", _bind,
            "server"),
    Setting("WORKERS", None,
            "gunicorn worker processes; auto = one per CPU core the process may use "
            "(affinity and cgroup CPU limit)", _whole_or_auto, "server"),
    Setting("WORKER_TIMEOUT", 120,
            "seconds one request may take before gunicorn restarts its worker", _whole,
            "server"),
    Setting("GRACEFUL_TIMEOUT", 30,
            "seconds requests in flight may finish after SIGTERM before workers are killed",
            _whole, "server"),
    Setting("ACCESS_LOG", False,
            "also write gunicorn's access log (JSON lines); the app already logs one line "
            "per request: true or false", _flag, "server"),
    Setting("LOG_LEVEL", "info",
            "least severe log level written: debug, info, warning or error", _log_level,
            "server"),
)

_BY_NAME = {s.name: s for s in SETTINGS}


def _default(name: str) -> Any:
    return _BY_NAME[name].default


@dataclass(frozen=True)
class Settings:
    """What ``create_app`` reads: limits that keep one request from eating the machine,
    whether metrics are served, who may call, and where and what the decision store
    keeps."""

    max_body_bytes: int = _default("MAX_BODY_BYTES")
    max_cells: int = _default("MAX_CELLS")
    max_arcs: int = _default("MAX_ARCS")
    max_nodes: int = _default("MAX_NODES")
    max_id_length: int = _default("MAX_ID_LENGTH")
    max_prices_work: int = _default("MAX_PRICES_WORK")
    metrics_enabled: bool = _default("METRICS_ENABLED")
    tokens: tuple[str, ...] = field(default=_default("TOKENS"), repr=False)
    tokens_file: str = _default("TOKENS_FILE")
    metrics_public: bool = _default("METRICS_PUBLIC")
    max_time_limit_s: int = _default("MAX_TIME_LIMIT_S")
    database_url: str = field(default=_default("DATABASE_URL"), repr=False)
    data_dir: str = _default("DATA_DIR")
    record: str = _default("RECORD")
    retention_days: int | None = _default("RETENTION_DAYS")
    signing_key_file: str = _default("SIGNING_KEY_FILE")


@dataclass(frozen=True)
class ServerSettings:
    """What ``deploy/gunicorn.conf.py`` reads; the environment only (it has no mapping)."""

    insecure: bool = _default("INSECURE")
    bind: str = _default("BIND")
    workers: int | None = _default("WORKERS")
    worker_timeout: int = _default("WORKER_TIMEOUT")
    graceful_timeout: int = _default("GRACEFUL_TIMEOUT")
    access_log: bool = _default("ACCESS_LOG")
    log_level: str = _default("LOG_LEVEL")


def _read(cls: type[Any], overrides: Mapping[str, Any],
          environ: Mapping[str, str]) -> dict[str, Any]:
    values: dict[str, Any] = {}
    for f in fields(cls):
        setting = _BY_NAME[f.name.upper()]
        if setting.name in overrides:
            raw, source = overrides[setting.name], setting.name
        elif setting.env in environ:
            raw, source = environ[setting.env], setting.env
        else:
            continue
        if raw is None:
            continue
        try:
            values[f.name] = setting.parse(raw)
        except _Refused as e:
            shown = "a value not shown here" if setting.secret else repr(raw)
            raise ValueError(f"{source} {e}, got {shown}") from None
    return values


def load_settings(overrides: Mapping[str, Any] | None = None,
                  environ: Mapping[str, str] | None = None) -> Settings:
    """Read the app settings from the environment and ``overrides``; ValueError on a bad one."""
    environ = os.environ if environ is None else environ
    return Settings(**_read(Settings, overrides or {}, environ))


def load_server_settings(environ: Mapping[str, str] | None = None) -> ServerSettings:
    """Read the server settings from the environment; ValueError on a bad one."""
    environ = os.environ if environ is None else environ
    return ServerSettings(**_read(ServerSettings, {}, environ))
