"""Answers: what /v1/solve returns, what /v1/verify reads and what it returns."""

from __future__ import annotations

from typing import Any

from marshmallow import Schema, fields, validate

from schemas.fields import IdList, Number, NumberMap, StrictBoolean
from schemas.frontier import FrontierList
from schemas.numbers import MAX_ANSWER_VALUE
from schemas.problem import ProblemSchema
from schemas.tables import RecordList

SHAPES = ("assignment", "transportation", "transshipment")
SOLVERS = ("lapjv", "linear_sum_assignment", "min_weight_full_bipartite_matching",
           "network_simplex", "min_cost_flow")

#: Why an unmet sink waits (README, "Why a sink waits").
REASONS = ("no-eligible-source", "capacity", "penalty")


class AllocationRowSchema(Schema):
    """Units sent along one arc; ``cost`` is flow x the arc's cost as given."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    flow = fields.Integer(required=True, metadata={"bound": MAX_ANSWER_VALUE})
    cost = fields.Float(metadata={"bound": MAX_ANSWER_VALUE})
    arc = fields.Integer(metadata={"description": "index into the request's arcs"})
    fixed = fields.Boolean(metadata={"description": "true on a pinned arc (see /fixed); "
                                                   "checked when present"})


class ChangesSchema(Schema):
    """Against ``previous``: units kept on their pair, units moved (not kept, those on
    vanished pairs included), and what the moves cost (change_penalty x moved)."""

    kept = Number(kind="count", required=True, bound=MAX_ANSWER_VALUE)
    moved = Number(kind="count", required=True, bound=MAX_ANSWER_VALUE)
    penalty = Number(required=True, bound=MAX_ANSWER_VALUE)


class AmountSchema(Schema):
    """Units of one sink left unmet, or of one source left unused."""

    id = fields.String(required=True)
    amount = fields.Integer(required=True, metadata={"bound": MAX_ANSWER_VALUE})


class UnmetSchema(Schema):
    """Units of one sink left unmet, and whether its demand is hard (it has no penalty)."""

    id = fields.String(required=True)
    amount = fields.Integer(required=True, metadata={"bound": MAX_ANSWER_VALUE})
    hard = fields.Boolean(metadata={"description": "true when the sink has no penalty; "
                                                   "checked when present"})
    reason = fields.String(validate=validate.OneOf(REASONS), metadata={
        "description": "why the sink waits (README, 'Why a sink waits'); checked when present"})
    reduced_cost = fields.Float(metadata={
        "bound": MAX_ANSWER_VALUE,
        "description": "with reason penalty: pi(super-source) - pi(sink) - penalty, at least 0 "
                       "(min form): serving one more unit costs at least this much more"})


class UnmetResultSchema(UnmetSchema):
    """An unmet row as /v1/solve writes it: ``hard`` and ``reason`` are always there."""

    hard = fields.Boolean(required=True)
    reason = fields.String(required=True, validate=validate.OneOf(REASONS))


class VirtualPotentialsSchema(Schema):
    """Potentials of the three virtual nodes of the extended network."""

    super_source = Number(required=True, bound=MAX_ANSWER_VALUE)
    super_sink = Number(required=True, bound=MAX_ANSWER_VALUE)
    hard_pool = Number(required=True, bound=MAX_ANSWER_VALUE)


class CutSchema(Schema):
    """A cut proving that no flow leaves less hard demand unmet than ``hard_shortfall``."""

    sink_side = IdList(required=True, metadata={"description": "ids on the sink side"})
    sinks = IdList(load_default=list, metadata={"description": "hard sinks on the sink side"})
    demand = Number(kind="count", load_default=0, bound=MAX_ANSWER_VALUE)
    capacity = Number(kind="count", load_default=0, bound=MAX_ANSWER_VALUE)


class PriceRowSchema(Schema):
    """What forcing or forbidding one allowed pair costs (README, "Override prices")."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    flow = fields.Integer(required=True, metadata={"bound": MAX_ANSWER_VALUE})
    force_delta = fields.Float(metadata={"bound": MAX_ANSWER_VALUE, "minimum": 0, "description":
                               "least extra cost of a plan with a unit on the pair; null: none"})
    forbid_delta = fields.Float(metadata={"bound": MAX_ANSWER_VALUE, "minimum": 0, "description":
                                "least extra cost of a plan with nothing on it; null: none"})
    arc = fields.Integer(metadata={"description": "index into the request's arcs"})


class BottleneckSchema(Schema):
    """The threshold of ``"objective": "bottleneck"`` and the cut proving no cheaper one."""

    threshold = Number(required=True, allow_none=True, bound=MAX_ANSWER_VALUE, metadata={
        "description": "the largest cost of a used pair; null when no pair is needed"})
    cut = fields.Nested(CutSchema, required=True, allow_none=True, metadata={
        "description": "a cut in the network of the pairs strictly cheaper than the "
                       "threshold, proving a hard shortfall above hard_shortfall there"})


class CertificateSchema(Schema):
    """Dual potentials and the cut; see README, 'The certificate'."""

    negated = StrictBoolean(required=True)
    potentials = NumberMap(required=True)
    virtual_potentials = fields.Nested(VirtualPotentialsSchema, required=True)
    hard_shortfall = Number(kind="count", required=True, bound=MAX_ANSWER_VALUE)
    cut = fields.Nested(CutSchema, required=True)
    dual_objective = Number(required=True, bound=MAX_ANSWER_VALUE)
    bottleneck = fields.Nested(BottleneckSchema, metadata={
        "description": "with objective bottleneck only (README, 'The certificate')"})
    prices = fields.Dict(metadata={"description": "the proof of the override prices: "
                                   "distance rows and trees, reroutes (README, 'The "
                                   "certificate'); checked when the answer has prices"})


#: The two sides of a child cell: the branch pair's flow at most one less, or at least one
#: more, than the plan's (README, "Ranked alternatives").
SIDES = ("below", "above")
VIRTUAL_NODES = ("super_source", "super_sink", "hard_pool")
_COUNT: dict[str, Any] = {"kind": "count", "bound": MAX_ANSWER_VALUE}


class PairSchema(Schema):
    """One pair (arc) of the problem: its ends, and its index when the problem gives arcs."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    arc: fields.Field = fields.Integer(metadata={"bound": MAX_ANSWER_VALUE})


class BoundSchema(PairSchema):
    """The flows a cell allows on one pair: ``min`` to ``max`` (null: no upper bound)."""

    arc = Number(**_COUNT)
    min = Number(required=True, **_COUNT)
    max = Number(required=True, allow_none=True, **_COUNT)


class CellSchema(Schema):
    """Where a plan's cell lies in the partition, and the bounds that define it."""

    parent = Number(required=True, **_COUNT)
    branch = Number(required=True, **_COUNT)
    side = fields.String(required=True, validate=validate.OneOf(SIDES))
    bounds = fields.List(fields.Nested(BoundSchema), required=True)


class CellCertificateSchema(Schema):
    """Potentials proving a plan optimal in its cell (README, "The certificate")."""

    potentials = NumberMap(required=True)
    virtual_potentials = fields.Nested(VirtualPotentialsSchema, required=True)
    dual_objective = Number(required=True, bound=MAX_ANSWER_VALUE)


class AlternativeSchema(Schema):
    """One next-best plan: the best plan of its cell."""

    objective = Number(required=True, bound=MAX_ANSWER_VALUE)
    allocation = RecordList(AllocationRowSchema, required=True)
    unmet = RecordList(UnmetSchema, required=True)
    unused = RecordList(AmountSchema, required=True)
    cell = fields.Nested(CellSchema, required=True)
    certificate = fields.Nested(CellCertificateSchema, required=True)


class EmptyCellSchema(Schema):
    """A node set whose balance the cell's bounds cannot carry: the cell holds no plan."""

    nodes = IdList(required=True)
    virtual_nodes = fields.List(fields.String(validate=validate.OneOf(VIRTUAL_NODES)),
                                load_default=list)


class FrontierSchema(Schema):
    """A cell left unexpanded, with a proof that it holds no plan better than the last
    alternative: a lower bound from potentials, or ``empty``."""

    parent = Number(required=True, **_COUNT)
    branch = Number(required=True, **_COUNT)
    side = fields.String(required=True, validate=validate.OneOf(SIDES))
    bound = Number(bound=MAX_ANSWER_VALUE)
    shift = Number(bound=MAX_ANSWER_VALUE)
    distances = NumberMap()
    virtual_distances = fields.Dict(keys=fields.String(validate=validate.OneOf(VIRTUAL_NODES)),
                                    values=Number(bound=MAX_ANSWER_VALUE))
    empty = fields.Nested(EmptyCellSchema)


class PartitionSchema(Schema):
    """The cells of all plans: each listed plan's branch pairs (null when not split), and
    the cells left unexpanded."""

    requested = Number(required=True, **_COUNT)
    branches = fields.List(RecordList(PairSchema, allow_none=True), required=True)
    frontier = FrontierList(FrontierSchema, required=True)


_HEX64 = validate.Regexp(r"^[0-9a-f]{64}$", error="must be 64 lower-case hex digits")


class DecisionSchema(Schema):
    """Provenance of an answer from /v1/solve; its RFC 8785 JSON is a leaf of the
    decision log. ``id`` and ``log_index`` are null when recording is off."""

    id = fields.String(required=True, allow_none=True)
    recorded_at = fields.String(required=True, metadata={"description": "RFC 3339, UTC"})
    input_sha256 = fields.String(required=True, validate=_HEX64)
    answer_sha256 = fields.String(required=True, validate=_HEX64)
    log_index = fields.Integer(required=True, allow_none=True, validate=validate.Range(min=0))
    service_version = fields.String(required=True)
    caller = fields.String(required=True, allow_none=True)


class AnswerSchema(Schema):
    """An answer to check: as returned by /v1/solve, or produced by anyone else. Its
    ``decision``, when there, is read for its shape and not checked further."""

    status = fields.String(validate=validate.Equal("optimal"))
    shape = fields.String(validate=validate.OneOf(SHAPES))
    solver = fields.String(validate=validate.OneOf(SOLVERS))
    objective = Number(required=True, bound=MAX_ANSWER_VALUE)
    flow_value = Number(kind="count", bound=MAX_ANSWER_VALUE)
    allocation = RecordList(AllocationRowSchema, required=True)
    unmet = RecordList(UnmetSchema, required=True)
    unused = RecordList(AmountSchema, required=True)
    certificate = fields.Nested(CertificateSchema, required=True)
    prices = RecordList(PriceRowSchema, metadata={
        "description": "one row per allowed pair, when the request asked for prices"})
    data = fields.Dict(keys=fields.String(), values=fields.Dict(), metadata={
        "description": "the data objects of the request's sources, nodes and sinks by id; "
                       "checked when present"})
    alternatives = fields.List(fields.Nested(AlternativeSchema), metadata={
        "description": "the next-best plans, best first (README, 'Ranked alternatives')"})
    partition = fields.Nested(PartitionSchema)
    decision = fields.Nested(DecisionSchema)
    changes = fields.Nested(ChangesSchema, metadata={
        "description": "with previous: what the plan keeps and moves; checked when present"})


class SolveResultSchema(AnswerSchema):
    """The 200 answer of /v1/solve."""

    status = fields.String(required=True, validate=validate.Equal("optimal"))
    shape = fields.String(required=True, validate=validate.OneOf(SHAPES))
    solver = fields.String(required=True, validate=validate.OneOf(SOLVERS))
    flow_value = Number(kind="count", required=True, bound=MAX_ANSWER_VALUE)
    unmet = RecordList(UnmetResultSchema, required=True)
    decision = fields.Nested(DecisionSchema, required=True)


class VerifyRequestSchema(ProblemSchema):
    """A problem plus the answer to check."""

    answer = fields.Nested(AnswerSchema, required=True)


class CheckSchema(Schema):
    name = fields.String(required=True)
    passed = fields.Boolean(required=True)
    detail = fields.String(required=True)


class VerifyResultSchema(Schema):
    """The 200 answer of /v1/verify."""

    valid = fields.Boolean(required=True)
    checks = fields.List(fields.Nested(CheckSchema), required=True)
