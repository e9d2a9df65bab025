"""The decision store: an append-only, verifiable log of the service's decisions.

An adapter the pipeline calls through a small interface; it never imports the web
framework, the HTTP, CLI or report rooms, nor the solver (the verifier is handed in as a
callable where answers are re-checked).

Modules, in the order data flows through them:

``canonical``  RFC 8785 canonical JSON; the digests and leaves hash these bytes.
``model``      plain data: :class:`~.model.NewDecision` in, :class:`~.model.Decision`
               (the seven-field ``decision`` object, whose canonical JSON is the leaf) out.
``merkle``     the RFC 9162 tree: hashes, proofs as ranges of leaves, verification.
``signing``    Ed25519 checkpoints over ``{"size", "root_sha256"}``; the key file.
``tables``     the SQLAlchemy tables; ``migrations/`` the Alembic environment and revisions.
``migrate``    ``certimatch db upgrade`` and the start-up check of the schema.
``store``      :class:`~.store.DecisionStore`: append (one total order, whole or nothing),
               idempotency keys, retention; ``reads`` its read side (pages, proofs).
``audit``      export (JSON lines), check of an export, verification of one decision.
``config``     the store's settings (``CERTIMATCH_DATABASE_URL`` and the rest).
``errors``     ``StoreUnavailable`` (503), ``IdempotencyKeyReused`` (422), ``LogDamaged``,
               ``SchemaNotCurrent``.
"""
