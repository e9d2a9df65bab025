"""The decision store's settings: where the database is, what is recorded, for how long.

Each is an environment variable ``CERTIMATCH_<NAME>``, read and refused like the rows of
``service.settings.SETTINGS`` (a bad value stops the process at start-up with a
``ValueError`` naming the variable and the values it allows). The rows live in that
table; :data:`RECORD_SETTINGS` names them, for the commands that read only these.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.settings import ENV_PREFIX, RECORD_MODES, SETTINGS, Setting, Settings

__all__ = ["RECORD_MODES", "RECORD_SETTINGS", "RecordSettings", "load_record_settings"]

#: File name of the embedded database inside the data directory.
SQLITE_NAME = "decisions.sqlite3"


#: The store's rows of the service's one settings table (``service.settings.SETTINGS``).
RECORD_SETTINGS: tuple[Setting, ...] = tuple(
    s for s in SETTINGS if s.name in ("DATABASE_URL", "DATA_DIR", "RECORD", "RETENTION_DAYS",
                                      "SIGNING_KEY_FILE"))


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

    @classmethod
    def of(cls, settings: Settings) -> RecordSettings:
        """The store's part of the service's settings."""
        return cls(settings.database_url, settings.data_dir, settings.record,
                   settings.retention_days, settings.signing_key_file)


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
