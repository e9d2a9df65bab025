"""The decision store's settings: defaults, parsing and the messages that refuse."""

from __future__ import annotations

from pathlib import Path

import pytest

from service.records.config import RECORD_SETTINGS, RecordSettings, load_record_settings
from service.settings import SETTINGS, Settings


def test_defaults() -> None:
    settings = load_record_settings(environ={})
    assert settings == RecordSettings()
    assert (settings.record, settings.retention_days, settings.data_dir) == (
        "full", None, "./certimatch-data")
    assert settings.url == f"sqlite:///{Path('./certimatch-data').resolve()}/decisions.sqlite3"


def test_environment_and_overrides() -> None:
    env = {"CERTIMATCH_RECORD": " Digest ", "CERTIMATCH_RETENTION_DAYS": "30",
           "CERTIMATCH_DATA_DIR": "/var/lib/certimatch",
           "CERTIMATCH_DATABASE_URL": "postgresql+psycopg://svc@db/certimatch"}
    settings = load_record_settings({"RECORD": "off"}, environ=env)
    assert settings.record == "off" and settings.retention_days == 30
    assert settings.url == "postgresql+psycopg://svc@db/certimatch"
    assert load_record_settings(environ={"CERTIMATCH_RETENTION_DAYS": "keep"}).retention_days \
        is None


@pytest.mark.parametrize(("name", "raw", "message"), [
    ("RECORD", "everything",
     "CERTIMATCH_RECORD must be one of full, digest, off, got 'everything'"),
    ("RETENTION_DAYS", "0", "CERTIMATCH_RETENTION_DAYS must be a whole number of days of at "
                            "least 1, or keep, got '0'"),
    ("RETENTION_DAYS", "1.5", "CERTIMATCH_RETENTION_DAYS must be a whole number of days"),
])
def test_bad_values_are_refused_by_name(name: str, raw: str, message: str) -> None:
    with pytest.raises(ValueError, match=message.replace("(", r"\(")):
        load_record_settings(environ={f"CERTIMATCH_{name}": raw})


def test_the_database_url_is_never_repeated() -> None:
    # a URL may hold a password
    with pytest.raises(ValueError, match="a value not shown here"):
        load_record_settings({"DATABASE_URL": 5})


def test_the_rows_are_those_of_the_one_settings_table() -> None:
    # service.settings.SETTINGS is the table the README's settings table is held to
    assert {s.name for s in RECORD_SETTINGS} == {"DATABASE_URL", "DATA_DIR", "RECORD",
                                                  "RETENTION_DAYS", "SIGNING_KEY_FILE"}
    assert set(RECORD_SETTINGS) <= set(SETTINGS)
    # the store's defaults are the service's
    assert RecordSettings.of(Settings()) == RecordSettings()
