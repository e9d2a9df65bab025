"""Decisions recorded around /v1/solve: provenance, digests, Idempotency-Key replay.

The view calls :meth:`Recorder.begin` with the parsed body before solving (the input
digest, and an earlier response to replay) and :meth:`Recorder.finish` with the answer
after the independent check passed; ``finish`` appends the decision to the store and
returns the response bytes, so the decision and the answer leave together or not at all.
No web framework here: plain data in, bytes out.

The digests
-----------
``input_sha256`` is SHA-256 of the request body's JSON in RFC 8785 canonical form,
``answer_sha256`` of the answer without its ``decision`` object, canonicalised the same
way (README, "Decision records", shows a client recomputing both).
"""

from __future__ import annotations

import hashlib
import logging
import threading
import time
from dataclasses import dataclass
from typing import Any

import orjson

from service import __version__
from service.errors import OutOfRange
from service.records.canonical import CanonicalizationError, canonical_json
from service.records.config import RecordSettings
from service.records.errors import SchemaNotCurrent, StoreUnavailable
from service.records.migrate import prepare
from service.records.model import Decision, NewDecision
from service.records.signing import KeyFileError, Signer, load_or_create_key
from service.records.store import DecisionStore, make_engine

__all__ = ["PRUNE_EVERY_S", "Pending", "Recorder"]

log = logging.getLogger(__name__)

SERVICE_VERSION = __version__
#: Seconds between two retention passes of one process (``CERTIMATCH_RETENTION_DAYS``).
PRUNE_EVERY_S = 3600.0


@dataclass(frozen=True)
class Pending:
    """What :meth:`Recorder.begin` learnt of a request: its input digest (None when the
    body cannot be canonicalised, ``refusal`` says why), the caller and the key."""

    input_sha256: str | None
    problem: bytes | None
    caller: str | None
    key: str | None
    refusal: str | None = None


class Recorder:
    """The store and the signer of one app, and the rules of what is recorded.

    With recording on (``full`` or ``digest``) both are opened at start-up, so a schema
    that is behind or a bad key stops the service there. With ``off`` nothing is opened
    until a log endpoint asks (a log kept earlier can still be read).
    """

    def __init__(self, settings: RecordSettings) -> None:
        self.settings = settings
        self._store: DecisionStore | None = None
        self._signer: Signer | None = None
        self._lock = threading.Lock()
        self._pruned_at: float | None = None
        if self.recording:
            self.open()
            self.prune_due()

    @property
    def recording(self) -> bool:
        return self.settings.record != "off"

    def open(self) -> tuple[DecisionStore, Signer]:
        """The store (schema created on an empty database, else required current) and the
        signer; SchemaNotCurrent, StoreUnavailable or KeyFileError when they cannot be."""
        with self._lock:
            if self._store is None or self._signer is None:
                signer = Signer(load_or_create_key(self.settings.signing_key_file,
                                                   self.settings.data_dir))
                engine = make_engine(self.settings.url)
                try:
                    prepare(engine)
                except BaseException:
                    engine.dispose()
                    raise
                self._store, self._signer = DecisionStore(engine), signer
            return self._store, self._signer

    def reader(self) -> tuple[DecisionStore, Signer]:
        """The store and signer for a log endpoint: StoreUnavailable (503) when they cannot
        be opened."""
        try:
            return self.open()
        except (SchemaNotCurrent, KeyFileError) as e:
            raise StoreUnavailable(str(e)) from None

    def prune_due(self) -> int:
        """Retention: remove the problem and answer of records older than
        ``RETENTION_DAYS`` (their decision and leaf stay), at most once every
        :data:`PRUNE_EVERY_S` per process; at start-up and after answers have been sent.
        The number of records pruned; a store that fails is logged, never raised (the
        decisions were recorded; the next pass catches up)."""
        days = self.settings.retention_days
        now = time.monotonic()
        if (not days or not self.recording
                or (self._pruned_at is not None and now - self._pruned_at < PRUNE_EVERY_S)):
            return 0
        self._pruned_at = now
        try:
            store, _ = self.open()
            pruned = store.prune(days)
        except (StoreUnavailable, SchemaNotCurrent) as e:
            log.warning("retention pass failed: %s", e)
            return 0
        if pruned:
            log.info("retention removed the problem and answer of %d decisions older than "
                     "%d days", pruned, days)
        return pruned

    def close(self) -> None:
        if self._store is not None:
            self._store.engine.dispose()

    # -- /v1/solve ------------------------------------------------------------------------

    def begin(self, body: Any, caller: str | None, key: str | None) -> tuple[Pending,
                                                                            bytes | None]:
        """The request's digest, and the stored response when ``key`` answered this body
        before (IdempotencyKeyReused when it answered another). The key is ignored when
        recording is off: nothing is stored to replay."""
        try:
            # (a shallow copy of the top level: a dict subclass is not JSON to the encoder)
            problem = canonical_json(dict(body) if isinstance(body, dict) else body,
                                     parsed=True)
        except CanonicalizationError as e:
            # Reported after solving, so that the schema's own errors (which name every
            # field) come first; a body the solver accepts rarely gets here.
            return Pending(None, None, caller, None, str(e)), None
        pending = Pending(_sha256(problem), problem, caller, key if self.recording else None)
        if pending.key is None:
            return pending, None
        store, _ = self.open()
        assert pending.input_sha256 is not None
        earlier = store.replay(caller, pending.key, pending.input_sha256)
        return pending, None if earlier is None else earlier.response

    def finish(self, pending: Pending, answer: dict[str, Any]) -> bytes:
        """The response bytes: the answer with its ``decision``, recorded unless off."""
        if pending.refusal is not None or pending.input_sha256 is None:
            raise OutOfRange(f"the body cannot be written as RFC 8785 JSON, so its digest "
                             f"cannot be taken: {pending.refusal}")
        answer_json = canonical_json(answer)
        answer_sha256 = _sha256(answer_json)
        if not self.recording:
            decision = Decision.unrecorded(pending.input_sha256, answer_sha256,
                                           SERVICE_VERSION, pending.caller)
            return render(answer, decision)
        full = self.settings.record == "full"
        new = NewDecision(pending.caller, pending.input_sha256, answer_sha256,
                          SERVICE_VERSION, pending.problem if full else None,
                          answer_json if full else None)
        store, _ = self.open()
        done = store.append(new, idempotency_key=pending.key,
                            render=lambda decision: render(answer, decision))
        if done.response is not None:
            return done.response
        return render(answer, done.decision)


def render(answer: dict[str, Any], decision: Decision) -> bytes:
    """The 200 body: the answer as the solver wrote it, then its ``decision``."""
    return orjson.dumps({**answer, "decision": decision.to_dict()})


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
