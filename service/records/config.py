"""The decision store's settings: where the database is, what is recorded, for how long.

Each is an environment variable ``CERTIMATCH_<NAME>``, read and refused like the rows of
``service.settings.SETTINGS`` (a bad value stops the process at start-up with a
``ValueError`` naming the variable and the values it allows). :data:`RECORD_SETTINGS`
holds the rows in that table's shape, to be added to it.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.settings import ENV_PREFIX, Setting

__all__ = ["RECORD_MODES", "RECORD_SETTINGS", "RecordSettings", "load_record_settings"]

#: What is kept of each decision: everything, its provenance and digests only, nothing.
RECORD_MODES = ("full", "digest", "off")
#: File name of the embedded database inside the data directory.
SQLITE_NAME = "decisions.sqlite3"


def _text(raw: Any) -> str:
    if not isinstance(raw, str):
        raise ValueError("must be text")
    return raw.strip()


def _mode(raw: Any) -> str:
    if isinstance(raw, str) and raw.strip().lower() in RECORD_MODES:
        return raw.strip().lower()
    raise ValueError(f"must be one of {', '.join(RECORD_MODES)}")


def _days(raw: Any) -> int | None:
    # "keep" is spelled out so that a deployment can say "never prune" explicitly.
    if raw is None or (isinstance(raw, str) and raw.strip().lower() in ("", "keep")):
        return None
    try:
        value = int(raw)
    except (TypeError, ValueError):
        value = 0
    if isinstance(raw, bool) or value < 1 or (isinstance(raw, float) and raw != value):
        raise ValueError("must be a whole number of days of at least 1, or keep")
    return value


RECORD_SETTINGS: tuple[Setting, ...] = (
    Setting("DATABASE_URL", "",
            "SQLAlchemy URL of the decision store; none: a SQLite file in DATA_DIR. "
            "Several replicas share one PostgreSQL database "
            "(postgresql+psycopg://user@host/db)", _text, secret=True),
    Setting("DATA_DIR", "./certimatch-data",
            "directory of the embedded database and of the generated signing key", _text),
    Setting("RECORD", "full",
            "what is kept of each decision: full (problem, answer and provenance), "
            "digest (provenance and digests only) or off", _mode),
    Setting("RETENTION_DAYS", None,
            "days after which the problem and answer of a record are removed (its "
            "provenance and leaf stay, so the log still verifies); keep: never", _days),
    Setting("SIGNING_KEY_FILE", "",
            "PEM file of the Ed25519 key that signs checkpoints; none: generated as "
            "signing-key.pem in DATA_DIR on first start. Replicas share one key", _text),
)


@dataclass(frozen=True)
class RecordSettings:
    """The store's settings, parsed."""

    database_url: str = ""
    data_dir: str = "./certimatch-data"
    record: str = "full"
    retention_days: int | None = None
    signing_key_file: str = ""

    @property
    def url(self) -> str:
        """The database URL; the default is a SQLite file in the data directory."""
        if self.database_url:
            return self.database_url
        return f"sqlite:///{Path(self.data_dir).resolve() / SQLITE_NAME}"


def load_record_settings(overrides: Mapping[str, Any] | None = None,
                         environ: Mapping[str, str] | None = None) -> RecordSettings:
    """Read the store's settings from ``overrides`` (``<NAME>`` keys) and the environment;
    ValueError naming the variable on a bad one."""
    environ = os.environ if environ is None else environ
    overrides = overrides or {}
    values: dict[str, Any] = {}
    for setting in RECORD_SETTINGS:
        if setting.name in overrides:
            raw, source = overrides[setting.name], setting.name
        elif ENV_PREFIX + setting.name in environ:
            raw, source = environ[ENV_PREFIX + setting.name], ENV_PREFIX + setting.name
        else:
            continue
        try:
            values[setting.name.lower()] = setting.parse(raw)
        except ValueError as e:
            shown = "a value not shown here" if setting.secret else repr(raw)
            raise ValueError(f"{source} {e}, got {shown}") from None
    return RecordSettings(**values)
