"""The decision store as the ``db`` and ``audit`` commands open it: the same settings as
the service (``CERTIMATCH_DATABASE_URL``, ``CERTIMATCH_DATA_DIR``,
``CERTIMATCH_SIGNING_KEY_FILE``), so an operator runs them beside the server with its
environment."""

from __future__ import annotations

from pathlib import Path

from sqlalchemy import Engine

from service.cli.talk import CliError
from service.records.config import RecordSettings, load_record_settings
from service.records.errors import SchemaNotCurrent, StoreUnavailable
from service.records.migrate import require_current
from service.records.signing import GENERATED_KEY_NAME, KeyFileError, Signer, load_key
from service.records.store import DecisionStore, make_engine
from service.settings import ENV_PREFIX

__all__ = ["open_engine", "open_store", "record_settings", "stored_signer"]


def record_settings() -> RecordSettings:
    try:
        return load_record_settings()
    except ValueError as e:
        raise CliError(str(e)) from None


def open_engine(settings: RecordSettings) -> Engine:
    try:
        return make_engine(settings.url)
    except ValueError as e:              # a URL of another database, or no URL at all
        raise CliError(str(e)) from None


def open_store(settings: RecordSettings) -> DecisionStore:
    """The store, refused (exit 1, saying what to run) unless its schema is current."""
    engine = open_engine(settings)
    try:
        require_current(engine)
    except (SchemaNotCurrent, StoreUnavailable) as e:
        engine.dispose()
        raise CliError(str(e)) from None
    return DecisionStore(engine)


def stored_signer(settings: RecordSettings) -> Signer:
    """The service's signing key; never a new one. A key made here would sign a
    checkpoint no auditor pinned, so a missing key is an error naming where it was
    looked for."""
    if settings.signing_key_file:
        path = Path(settings.signing_key_file)
    else:
        path = Path(settings.data_dir) / GENERATED_KEY_NAME
        if not path.exists():
            raise CliError(f"no signing key at {path}: run this with the service's "
                           f"{ENV_PREFIX}DATA_DIR or {ENV_PREFIX}SIGNING_KEY_FILE (the key "
                           "is made when the service first starts)")
    try:
        return Signer(load_key(path))
    except KeyFileError as e:
        raise CliError(str(e)) from None
