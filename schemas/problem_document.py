"""RFC 9457 problem document, the body of every error answer."""

from __future__ import annotations

from marshmallow import Schema, fields

from schemas.answer import CheckSchema


class FieldErrorSchema(Schema):
    pointer = fields.String(required=True, metadata={"description": "RFC 6901 JSON Pointer"})
    detail = fields.String(required=True)


class WitnessArcSchema(Schema):
    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    capacity = fields.Integer(required=True)


class WitnessSchema(Schema):
    """Hard sinks that need more than can reach them, and what limits them."""

    sinks = fields.List(fields.String(), required=True)
    sources = fields.List(fields.String(), required=True)
    arcs = fields.List(fields.Nested(WitnessArcSchema), required=True)
    demand = fields.Integer(required=True)
    capacity = fields.Integer(required=True)
    shortfall = fields.Integer(required=True)


class PinsWitnessSchema(Schema):
    """Pins that cannot be routed: a pin above its capacity, or a set of nodes whose pins
    bring in (``in``) or take out (``out``) more than the other arcs can carry."""

    pins = fields.List(fields.String(), required=True)
    ids = fields.List(fields.String(), required=True)
    limit = fields.String(required=True)
    pinned = fields.Integer(required=True)
    available = fields.Integer(required=True)


class ProblemDocumentSchema(Schema):
    type = fields.String(required=True)
    title = fields.String(required=True)
    status = fields.Integer(required=True)
    detail = fields.String(required=True)
    errors = fields.List(fields.Nested(FieldErrorSchema))
    witness = fields.Nested(WitnessSchema)
    cycle = fields.List(fields.String())
    limit = fields.Integer(metadata={"description": "the size limit exceeded (too-large)"})
    checks = fields.List(fields.Nested(CheckSchema),
                         metadata={"description": "failed checks (certificate-failure)"})
    time_limit_s = fields.Float(metadata={"description": "the time limit that ran out"})
    max_time_limit_s = fields.Float(metadata={"description": "the server's MAX_TIME_LIMIT_S"})
    cpu_s = fields.Float(metadata={"description": "CPU seconds before the limit (server-busy)"})
