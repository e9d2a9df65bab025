"""The decision-record part of an audit report served from the decision log
(``GET /v1/decisions/{id}/report``): the record's provenance and the log's verdict on it.

Plain data in (the ``decision`` object and the checks of
``POST /v1/decisions/{id}/verify``), HTML out; the report room never reads the store.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from service.report.style import _esc

__all__ = ["record_failed", "record_section"]

#: What each check of the log says, for a reader who does not know the names.
_MEANING = {
    "leaf": "the seven decision fields hash to the leaf stored in the log",
    "problem_digest": "the stored problem hashes to input_sha256",
    "answer_digest": "the stored answer hashes to answer_sha256",
    "checkpoint": "the latest checkpoint carries a valid Ed25519 signature",
    "inclusion": "the decision is a leaf of the signed tree (RFC 9162 inclusion proof)",
}

_FIELDS = ("id", "log_index", "recorded_at", "caller", "service_version", "input_sha256",
           "answer_sha256")


_PASS, _FAIL = '<span class="pass">pass</span>', '<span class="fail">FAIL</span>'


def _shown(value: Any) -> str:
    return "null" if value is None else str(value)


def record_failed(record: Mapping[str, Any]) -> list[str]:
    """The names of the log checks that failed."""
    return [str(c.get("name")) for c in record.get("checks", []) if not c.get("passed")]


def record_section(record: Mapping[str, Any]) -> str:
    """The heading, the decision's fields and a table of the log's checks."""
    decision = record.get("decision") or {}
    failed = record_failed(record)
    checks: Sequence[Mapping[str, Any]] = record.get("checks", [])
    word = "INTACT" if not failed else "DAMAGED"
    items = "".join(f"<dt>{_esc(name)}</dt><dd><code>{_esc(_shown(decision.get(name)))}"
                    "</code></dd>" for name in _FIELDS)
    rows = "".join(
        f'<tr{"" if c.get("passed") else " class=failed"}><td>{_esc(c.get("name"))}</td>'
        f"<td>{_PASS if c.get('passed') else _FAIL}</td>"
        f'<td>{_esc(_MEANING.get(str(c.get("name")), ""))}</td>'
        f'<td>{_esc(c.get("detail", ""))}</td></tr>' for c in checks)
    return (f'<h2 id="decision-record">Decision record: {word}</h2>'
            "<p>This answer was read from the service's decision log. The log's checks "
            "below say whether the record is the one the service wrote: its fields, both "
            "digests and its place in the signed tree.</p>"
            f'<div class="card"><dl>{items}</dl></div>'
            "<table><thead><tr><th>log check</th><th>result</th><th>what it means</th>"
            f"<th>what was found</th></tr></thead><tbody>{rows}</tbody></table>")
