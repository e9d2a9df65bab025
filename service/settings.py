"""The service's settings: one table of name, default and meaning.

Each setting can be given as ``CERTIMATCH_<NAME>`` in the environment or as ``<NAME>`` in
the mapping passed to :func:`service.app.create_app`; the mapping wins.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

ENV_PREFIX = "CERTIMATCH_"


@dataclass(frozen=True)
class Settings:
    """Limits that keep one request from eating the machine (see README, Settings)."""

    max_body_bytes: int = 64 * 1024 * 1024
    max_cells: int = 16_000_000
    max_arcs: int = 2_000_000
    max_nodes: int = 1_000_000
    max_id_length: int = 200


HELP = {
    "max_body_bytes": "largest request body in bytes; larger bodies get 413 before parsing",
    "max_cells": "largest cost matrix (rows x columns, null cells included)",
    "max_arcs": "largest number of arcs in an arc list",
    "max_nodes": "largest number of sources + sinks + nodes",
    "max_id_length": "longest id, in characters",
}


def load_settings(overrides: Mapping[str, Any] | None = None,
                  environ: Mapping[str, str] | None = None) -> Settings:
    """Read the settings from the environment and ``overrides``; raise ValueError on a bad one."""
    environ = os.environ if environ is None else environ
    overrides = overrides or {}
    values: dict[str, int] = {}
    for f in fields(Settings):
        key = f.name.upper()
        raw: Any = overrides.get(key, environ.get(ENV_PREFIX + key))
        if raw is None:
            continue
        source = key if key in overrides else ENV_PREFIX + key
        try:
            value = int(raw)
        except (TypeError, ValueError):
            raise ValueError(f"{source} must be a whole number, got {raw!r}") from None
        if isinstance(raw, float) and not raw.is_integer():
            raise ValueError(f"{source} must be a whole number, got {raw!r}")
        if isinstance(raw, bool) or value < 1:
            raise ValueError(f"{source} must be a whole number of at least 1, got {raw!r}")
        values[f.name] = value
    return Settings(**values)
