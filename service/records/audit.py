"""Audit of the decision log: export it, check an export, verify one stored decision.

The export format (``certimatch audit export``)
-----------------------------------------------
JSON lines, UTF-8, each line the RFC 8785 canonical JSON of one object, so that two
exports of the same log are byte for byte equal:

1. a header ``{"export": "certimatch-decision-log", "version": 1, "start": S,
   "frontier": [hex, ...]}``. ``start`` is the log index of the first record exported
   (0 for the whole log; later with ``--since``); ``frontier`` the hashes of the perfect
   subtrees of the first S leaves, largest first (RFC 9162 §2.1), from which the root is
   continued. With S = 0 it is empty and the check covers every record of the log.
2. one line per record, in log order: ``{"decision": {the seven fields}, "leaf_sha256":
   hex, "mode": "full" | "digest", "pruned_at": RFC 3339 or null, "problem": JSON or
   null, "answer": JSON or null}``. ``leaf_sha256`` is the leaf hash the store kept; the
   bodies are the stored problem and answer. A stored body that is not canonical JSON
   (it was tampered with) is given as ``"problem_b64"`` / ``"answer_b64"``, its raw bytes
   in base64, instead.
   Records stored past the log's head (no append writes one: they were added by hand)
   follow, so that the check names them.
3. a last line ``{"checkpoint": {"size", "root_sha256", "signature", "public_key",
   "key_id"}}``: the signed checkpoint the export was taken at; every exported record
   an append wrote lies below its size.

The check (``certimatch audit check``) recomputes every leaf from its decision fields and
compares it with the stored one, recomputes both digests from the bodies, re-verifies
every kept answer against its problem with the verifier handed in, checks that log
indexes run from ``start`` without gap, repetition or disorder, recomputes the root from
the frontier and the leaves, and checks the checkpoint's signature. Each finding names
the line, the log index and the decision id.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from typing import IO, Any

import orjson

from service.records.canonical import CanonicalizationError, canonical_json
from service.records.errors import LogDamaged
from service.records.merkle import Frontier, verify_inclusion
from service.records.model import Decision, StoredDecision
from service.records.reads import LogReader
from service.records.signing import Signer, verify_checkpoint

__all__ = ["EXPORT_NAME", "AuditReport", "Reverify", "check", "export", "export_lines",
           "verify_decision"]

EXPORT_NAME = "certimatch-decision-log"
#: Most records past the checkpoint's size named one by one.
_NAMED_PAST_SIZE = 1000

#: Re-checks a stored (problem, answer) pair, both parsed JSON: (valid, detail). The
#: service passes its independent verifier; the records package never imports it.
Reverify = Callable[[Any, Any], tuple[bool, str]]


def export_lines(store: LogReader, signer: Signer, since: str | None = None
                 ) -> Iterator[bytes]:
    """The lines of an export (without newlines), from the record at or after the RFC
    3339 time ``since`` (all records without it) up to the latest checkpoint."""
    checkpoint = store.checkpoint(signer)
    start = min(store.first_index_since(since), checkpoint.size) if since else 0
    frontier = [h.hex() for h in store.frontier_at(start)]
    yield canonical_json({"export": EXPORT_NAME, "version": 1, "start": start,
                          "frontier": frontier})
    for record in store.records(start, checkpoint.size):
        yield canonical_json(_record_line(record))
    for record in store.beyond_head():          # added by hand: the check names them
        yield canonical_json(_record_line(record))
    yield canonical_json({"checkpoint": checkpoint.to_dict()})


def export(store: LogReader, signer: Signer, out: IO[bytes], since: str | None = None) -> int:
    """Write an export to ``out``; the number of records written."""
    count = -2                                   # the header and the checkpoint
    for line in export_lines(store, signer, since):
        out.write(line + b"\n")
        count += 1
    return count


def _record_line(record: StoredDecision) -> dict[str, Any]:
    line: dict[str, Any] = {"decision": record.decision.to_dict(),
                            "leaf_sha256": record.leaf_sha256.hex(), "mode": record.mode,
                            "pruned_at": record.pruned_at}
    for name, body in (("problem", record.problem), ("answer", record.answer)):
        line[name] = None
        if body is not None:
            try:
                value = orjson.loads(body)
                if canonical_json(value) != body:
                    raise ValueError("not canonical")
                line[name] = value
            except (orjson.JSONDecodeError, ValueError):
                line[f"{name}_b64"] = base64.b64encode(body).decode("ascii")
    return line


@dataclass
class AuditReport:
    """What a check found; ``ok`` only when nothing."""

    records: int = 0
    size: int | None = None
    root_sha256: str | None = None
    findings: list[str] = field(default_factory=list)
    reverified: int = 0

    @property
    def ok(self) -> bool:
        return not self.findings

    def to_dict(self) -> dict[str, Any]:
        return {"ok": self.ok, "records": self.records, "size": self.size,
                "root_sha256": self.root_sha256, "reverified": self.reverified,
                "findings": self.findings}


def check(lines: Iterable[bytes | str], reverify: Reverify | None = None,
          public_key: str | None = None) -> AuditReport:
    """Check an export line by line (see the module docstring); ``public_key`` (base64)
    pins the signer's key."""
    report = AuditReport()
    numbered = ((n, line) for n, line in enumerate(lines, 1) if line.strip())
    frontier = _header(next(numbered, (1, b"")), report)
    if frontier is None:
        return report
    start = expected = frontier.size
    checkpoint = None
    # The last records seen, to name those past the checkpoint once its size is read.
    last: deque[tuple[Any, str]] = deque(maxlen=_NAMED_PAST_SIZE)
    for number, line in numbered:
        if checkpoint is not None:
            report.findings.append(f"line {number}: more lines after the checkpoint")
            break
        try:
            obj = orjson.loads(line)
        except orjson.JSONDecodeError:
            report.findings.append(f"line {number}: not JSON")
            continue
        if isinstance(obj, dict) and set(obj) == {"checkpoint"}:
            checkpoint = obj["checkpoint"]
            continue
        try:
            decision = Decision.from_dict(obj.get("decision") if isinstance(obj, dict) else None)
            leaf = decision.leaf_hash()
        except (ValueError, TypeError, CanonicalizationError) as e:
            report.findings.append(f"line {number}: not a decision record ({e})")
            continue
        where = f"line {number}, record {decision.log_index} (id {decision.id})"
        if decision.log_index != expected:
            report.findings.append(_out_of_place(where, decision.log_index, expected))
        if isinstance(decision.log_index, int) and decision.log_index >= expected:
            expected = decision.log_index + 1
        if obj.get("leaf_sha256") != leaf.hex():
            report.findings.append(f"{where}: its decision fields do not hash to its stored "
                                   "leaf: the record was changed")
        frontier.append(leaf)
        last.append((decision.log_index, where))
        report.records += 1
        report.findings += [f"{where}: {f}" for f in _bodies(obj, decision, reverify, report)]
    _close(checkpoint, frontier, report, public_key, start)
    if isinstance(report.size, int):
        report.findings += [f"{where}: past the {report.size} records of the signed "
                            "checkpoint: the record was added to the log"
                            for index, where in last
                            if isinstance(index, int) and index >= report.size]
    return report


def _header(first: tuple[int, bytes | str], report: AuditReport) -> Frontier | None:
    try:
        header = orjson.loads(first[1])
        if header.get("export") != EXPORT_NAME or header.get("version") != 1:
            raise ValueError
        hashes = [bytes.fromhex(h) for h in header["frontier"]]
        if any(len(h) != 32 for h in hashes):
            raise ValueError
        return Frontier(int(header["start"]), hashes)
    except (orjson.JSONDecodeError, ValueError, TypeError, KeyError, AttributeError):
        report.findings.append(f"line {first[0]}: not the header of a {EXPORT_NAME} export")
        return None


def _out_of_place(where: str, found: Any, expected: int) -> str:
    if isinstance(found, int) and found > expected:
        missing = (f"record {expected}" if found == expected + 1
                   else f"records {expected} to {found - 1}")
        return f"{where}: {missing} missing before it: dropped, or the records reordered"
    return (f"{where}: log index {found} where {expected} was due: the record was added, "
            "repeated or reordered")


def _bodies(obj: dict[str, Any], decision: Decision, reverify: Reverify | None,
            report: AuditReport) -> list[str]:
    findings = []
    parsed = {}
    for name, digest in (("problem", decision.input_sha256),
                         ("answer", decision.answer_sha256)):
        raw = obj.get(f"{name}_b64")
        try:
            body = (base64.b64decode(raw, validate=True) if raw is not None
                    else None if obj.get(name) is None else canonical_json(obj[name]))
        except (binascii.Error, TypeError, CanonicalizationError):
            findings.append(f"the {name} is neither JSON nor base64")
            continue
        if body is None:
            if obj.get("mode") == "full" and not obj.get("pruned_at"):
                findings.append(f"the {name} is missing although it was kept in full")
            continue
        if hashlib.sha256(body).hexdigest() != digest:
            findings.append(f"the stored {name} does not hash to its digest: it was changed")
        elif raw is None:
            parsed[name] = obj[name]
    if reverify is not None and len(parsed) == 2:
        valid, detail = reverify(parsed["problem"], parsed["answer"])
        report.reverified += 1
        if not valid:
            findings.append(f"the stored answer fails the verifier: {detail}")
    return findings


def _close(checkpoint: Any, frontier: Frontier, report: AuditReport,
           public_key: str | None, start: int) -> None:
    if checkpoint is None:
        report.findings.append("no checkpoint line: the export is truncated")
        return
    if not isinstance(checkpoint, dict):
        report.findings.append("checkpoint: not an object of size, root_sha256, signature, "
                               "public_key and key_id")
        return
    report.size, report.root_sha256 = checkpoint.get("size"), checkpoint.get("root_sha256")
    problem = verify_checkpoint(checkpoint, public_key)
    if problem is not None:
        report.findings.append(f"checkpoint: {problem}")
    if frontier.size != report.size:
        report.findings.append(
            f"the export holds {frontier.size - start} records"
            + (f" after the {start} its header stands for" if start else "")
            + f" but the checkpoint covers {report.size} records: records were dropped or "
            "added")
    elif frontier.root().hex() != report.root_sha256:
        report.findings.append(
            "the records do not make up the signed tree: a record was changed together "
            "with its stored leaf, or the checkpoint is of another log")


def verify_decision(store: LogReader, signer: Signer, decision_id: str,
                    reverify: Reverify | None = None) -> dict[str, Any] | None:
    """``{"valid", "checks"}`` for one stored decision (POST /v1/decisions/{id}/verify):
    its leaf, its digests, its inclusion in the latest signed checkpoint and the stored
    answer re-checked against the stored problem. None for an unknown id."""
    record = store.get(decision_id)
    if record is None:
        return None
    body = record.body_checks()
    checks: list[dict[str, Any]] = [{"name": n, "passed": ok, "detail": d} for n, ok, d in body]
    checkpoint = store.checkpoint(signer)
    signed = verify_checkpoint(checkpoint.to_dict(), signer.public_key_b64)
    checks.append({"name": "checkpoint", "passed": signed is None,
                   "detail": signed or f"the checkpoint of {checkpoint.size} records is "
                                       "validly signed"})
    index = record.decision.log_index
    assert index is not None
    try:
        proof = store.inclusion_proof(index, checkpoint.size)
        included = verify_inclusion(record.decision.leaf_hash(), index, checkpoint.size,
                                    proof, bytes.fromhex(checkpoint.root_sha256))
        detail = (f"the decision is leaf {index} of the signed tree of {checkpoint.size}"
                  if included else "the decision is not in the signed tree: its fields or "
                                   "the log were changed")
    except LogDamaged as e:
        included, detail = False, e.detail
    checks.append({"name": "inclusion", "passed": included, "detail": detail})
    digests_hold = all(ok for name, ok, _ in body if name.endswith("_digest"))
    if (reverify is not None and digests_hold and record.problem is not None
            and record.answer is not None):
        # Only the bodies that were recorded are worth re-checking; changed ones are
        # named by their digests above.
        try:
            valid, detail = reverify(orjson.loads(record.problem), orjson.loads(record.answer))
        except orjson.JSONDecodeError:
            valid, detail = False, "the stored problem or answer is not JSON"
        checks.append({"name": "answer", "passed": valid, "detail": detail})
    return {"valid": all(c["passed"] for c in checks), "checks": checks}
