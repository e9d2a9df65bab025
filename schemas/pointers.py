"""marshmallow's nested error messages as RFC 6901 JSON Pointers, in our wording."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from marshmallow import Schema


def escape_token(token: str) -> str:
    """One reference token of a JSON Pointer (RFC 6901, section 3: ``~`` and ``/`` escaped)."""
    return token.replace("~", "~0").replace("/", "~1")


def _lower(message: str) -> str:
    """marshmallow's own messages in our style: lower-case, no closing full stop."""
    message = message.rstrip(".")
    return message[0].lower() + message[1:] if message[:2].istitle() else message


def to_pointers(messages: Any, prefix: str = "") -> list[dict[str, str]]:
    """Flatten marshmallow's nested error messages into RFC 6901 pointers."""
    out: list[dict[str, str]] = []
    if isinstance(messages, dict):
        for key, sub in messages.items():
            here = prefix if key == "_schema" else f"{prefix}/{escape_token(str(key))}"
            out.extend(to_pointers(sub, here))
    elif isinstance(messages, list | tuple):
        for sub in messages:
            out.extend(to_pointers(sub, prefix))
    else:
        out.append({"pointer": prefix, "detail": _lower(str(messages))})
    return out


def iter_wire_keys(schema: Schema) -> Iterable[str]:
    """The JSON keys a schema reads, for documentation checks."""
    return [f.data_key or name for name, f in schema.fields.items()]
