"""The plain data the store takes and gives: no SQLAlchemy here."""

from __future__ import annotations

import hashlib
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from typing import Any

from service.records.canonical import canonical_json
from service.records.merkle import leaf_hash

__all__ = ["DECISION_FIELDS", "MAX_CALLER", "MAX_VERSION", "Decision", "NewDecision",
           "StoredDecision", "rfc3339"]

#: The seven fields of the ``decision`` object, the leaf of the log.
DECISION_FIELDS = ("id", "recorded_at", "input_sha256", "answer_sha256", "log_index",
                   "service_version", "caller")


#: Longest caller label and service version the store keeps (the column widths).
MAX_CALLER, MAX_VERSION = 200, 100


def rfc3339(moment: datetime) -> str:
    """UTC time as fixed-width RFC 3339 text with microseconds: text order is time order."""
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@dataclass(frozen=True)
class NewDecision:
    """What the pipeline hands the store: provenance, digests and (in ``full`` mode) the
    canonical JSON bytes of the problem and the answer."""

    caller: str | None
    input_sha256: str
    answer_sha256: str
    service_version: str
    problem: bytes | None = None
    answer: bytes | None = None

    def __post_init__(self) -> None:
        if (self.problem is None) != (self.answer is None):
            raise ValueError("give both the problem and the answer, or neither")
        for name in ("input_sha256", "answer_sha256"):
            value = getattr(self, name)
            if len(value) != 64 or any(c not in "0123456789abcdef" for c in value):
                raise ValueError(f"{name} must be 64 lower-case hex digits")
        # Checked here, not left to the column: SQLite would keep a longer value and
        # PostgreSQL refuse it, and the store must behave alike on both.
        if self.caller is not None and not 0 < len(self.caller) <= MAX_CALLER:
            raise ValueError(f"caller must be 1 to {MAX_CALLER} characters")
        if not 0 < len(self.service_version) <= MAX_VERSION:
            raise ValueError(f"service_version must be 1 to {MAX_VERSION} characters")

    @property
    def mode(self) -> str:
        return "digest" if self.problem is None else "full"


@dataclass(frozen=True)
class Decision:
    """The ``decision`` object of an answer; its RFC 8785 JSON is the log's leaf."""

    id: str | None
    recorded_at: str
    input_sha256: str
    answer_sha256: str
    log_index: int | None
    service_version: str
    caller: str | None

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    def leaf(self) -> bytes:
        """The leaf: RFC 8785 canonical JSON of all seven fields."""
        return canonical_json(self.to_dict())

    def leaf_hash(self) -> bytes:
        return leaf_hash(self.leaf())

    @classmethod
    def unrecorded(cls, input_sha256: str, answer_sha256: str, service_version: str,
                   caller: str | None, moment: datetime | None = None) -> Decision:
        """The ``decision`` object when recording is off: digests, time and version,
        with ``id`` and ``log_index`` null."""
        return cls(None, rfc3339(moment or datetime.now(UTC)), input_sha256, answer_sha256,
                   None, service_version, caller)

    @classmethod
    def from_dict(cls, data: Any) -> Decision:
        """From a mapping with exactly the seven fields; ValueError naming the culprit."""
        if not isinstance(data, dict) or set(data) != set(DECISION_FIELDS):
            raise ValueError(f"a decision has exactly the fields {', '.join(DECISION_FIELDS)}")
        return cls(**data)


@dataclass(frozen=True)
class StoredDecision:
    """A record as stored: the decision, its stored leaf hash, the bodies if kept."""

    decision: Decision
    leaf_sha256: bytes
    mode: str
    problem: bytes | None
    answer: bytes | None
    pruned_at: str | None

    def body_checks(self) -> list[tuple[str, bool, str]]:
        """(name, passed, detail) for the leaf and each stored body against its digest."""
        d = self.decision
        checks = [("leaf", d.leaf_hash() == self.leaf_sha256,
                   "the decision's fields hash to the stored leaf"
                   if d.leaf_hash() == self.leaf_sha256
                   else "the decision's fields do not hash to the stored leaf: the record "
                        "was changed")]
        for name, body, digest in (("problem", self.problem, d.input_sha256),
                                   ("answer", self.answer, d.answer_sha256)):
            if body is None:
                why = ("removed by retention" if self.pruned_at
                       else "not kept (digest mode)" if self.mode == "digest"
                       else "missing although the record was kept in full")
                checks.append((f"{name}_digest", self.pruned_at is not None
                               or self.mode == "digest", f"the {name} is {why}"))
                continue
            ok = hashlib.sha256(body).hexdigest() == digest
            checks.append((f"{name}_digest", ok,
                           f"the stored {name} hashes to its digest" if ok
                           else f"the stored {name} does not hash to its digest: it was "
                                "changed"))
        return checks
