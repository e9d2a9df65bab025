"""The problem a caller sends: sources, sinks, optional nodes, and costs or arcs."""

from __future__ import annotations

from itertools import chain
from typing import Any

from marshmallow import RAISE, Schema, ValidationError, fields, validate, validates_schema

from schemas.fields import Number, StrictBoolean
from schemas.tables import CostMatrix, RecordList

OBJECTIVES = ("min", "max", "bottleneck")
UNMET_POLICIES = ("minimize", "reject")
#: Most next-best plans a request may ask for (README, "Ranked alternatives").
MAX_ALTERNATIVES = 50
#: Largest time_limit_s a request may name (one day); the server caps it lower.
MAX_TIME_LIMIT = 86_400
#: The lists that declare ids, in the order the ids are numbered (README, "Determinism").
ID_TABLES = ("sources", "nodes", "sinks")
#: Longest ``data`` object of a source, sink or node, in bytes of compact JSON (UTF-8).
MAX_DATA_BYTES = 4096


def _data_field() -> fields.Dict:
    return fields.Dict(metadata={
        "max_bytes": MAX_DATA_BYTES,
        "description": "any JSON object of at most 4096 bytes (compact JSON, UTF-8); "
                       "not read by the solver, handed back in the answer's data"})


#: The lists of records, each of which may be sent in the columnar form instead.
TABLES = ("sources", "sinks", "nodes", "arcs")
#: Most entries of one source's load_costs.
MAX_LOAD_COSTS = 100_000
#: The columns of an arc that name ids.
ARC_ENDS = ("from", "to")


class LoadCosts(fields.List):
    """A source's extra cost of its 1st, 2nd, ... unit sent: finite numbers, non-decreasing
    (a convex workload cost); the last value repeats up to the supply."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(Number(), validate=validate.Length(min=1, max=MAX_LOAD_COSTS),
                         **kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        costs: list[Any] = super()._deserialize(value, attr, data, **kwargs)
        for j in range(1, len(costs)):
            if costs[j] < costs[j - 1]:
                raise ValidationError({j: [f"must be at least the entry before it "
                                           f"({costs[j - 1]}): load costs are non-decreasing"]})
        return costs


class SourceSchema(Schema):
    """A source: a technician's free slots, a warehouse's stock."""

    id = fields.String(required=True)
    supply = fields.Integer(load_default=1, metadata={"description": "units it can send at most"})
    data = _data_field()
    load_costs = LoadCosts(metadata={"description": "extra cost of the 1st, 2nd, ... unit "
                                                    "sent, non-decreasing; the last repeats"})


class SinkSchema(Schema):
    """A sink: a ticket, a store; demand is hard unless a penalty per unmet unit is given."""

    id = fields.String(required=True)
    demand = fields.Integer(load_default=1)
    penalty = fields.Float(metadata={"description": "cost of each unit left unmet",
                                     "minimum": 0})
    data = _data_field()


class NodeSchema(Schema):
    """A transshipment node (depot, hub): what enters leaves."""

    id = fields.String(required=True)
    data = _data_field()


class ArcSchema(Schema):
    """A directed arc between any two distinct ids; no capacity means unbounded."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    cost = fields.Float(required=True)
    capacity = fields.Integer(allow_none=True)


class PinSchema(Schema):
    """A pin: the pair (or the arc ``arc``) carries exactly ``flow`` units."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    flow = fields.Integer(required=True)
    arc = fields.Integer(metadata={"description": "index into the request's arcs"})


class PreviousRowSchema(Schema):
    """A row of the previous plan: units on a pair; an answer's rows may be passed as they
    are (``cost`` and ``fixed`` are then ignored, ``arc`` names the arc)."""

    from_ = fields.String(required=True, data_key="from")
    to = fields.String(required=True)
    flow = fields.Integer(required=True)
    arc = fields.Integer(metadata={"description": "index into the request's arcs"})
    cost = fields.Float(metadata={"description": "ignored"})
    fixed = fields.Boolean(metadata={"description": "ignored"})


class PreviousSchema(Schema):
    """The plan being replaced and the cost of each of its units not kept on its pair."""

    class Meta:
        unknown = RAISE

    allocation = RecordList(PreviousRowSchema, required=True)
    change_penalty = Number(required=True, validate=validate.Range(min=0),
                            metadata={"minimum": 0})


class ProblemSchema(Schema):
    """A whole problem; exactly one of ``costs`` and ``arcs``.

    ``sources``, ``sinks``, ``nodes`` and ``arcs`` are lists of records, or each an object
    of equal-length arrays, one per field (the columnar form, :mod:`schemas.columns`)."""

    class Meta:
        unknown = RAISE

    sources = RecordList(SourceSchema, required=True, columnar=True)
    sinks = RecordList(SinkSchema, required=True, columnar=True)
    nodes = RecordList(NodeSchema, columnar=True)
    costs = CostMatrix()
    arcs = RecordList(ArcSchema, references=ARC_ENDS, declared_in=ID_TABLES, columnar=True)
    objective = fields.String(load_default="min", validate=validate.OneOf(OBJECTIVES))
    fixed = RecordList(PinSchema, metadata={"description": "pins: pairs whose flow is fixed"})
    previous = fields.Nested(PreviousSchema)
    unmet_demand = fields.String(load_default="minimize",
                                 validate=validate.OneOf(UNMET_POLICIES))
    prices = StrictBoolean(load_default=False, metadata={
        "description": "also price overriding every allowed pair (README, 'Override prices')"})
    alternatives = Number(kind="count", bound=MAX_ALTERNATIVES, validate=validate.Range(
        min=1, error=f"must be a whole number from 1 to {MAX_ALTERNATIVES}"),
        metadata={"description": "how many next-best plans to return, each certified"})
    time_limit_s = Number(bound=MAX_TIME_LIMIT, validate=validate.Range(
        min=0, min_inclusive=False, error="must be more than 0 seconds"),
        metadata={"description": "seconds this request may compute, capped by the server"})

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _one_cost_form(self, data: dict[str, Any], original: Any, **kwargs: Any) -> None:
        if not isinstance(original, dict):
            return                     # marshmallow already reports the wrong type
        given = set(original)
        if "costs" in given and "arcs" in given:
            raise ValidationError("give either costs or arcs, not both", "arcs")
        if not given & {"costs", "arcs"}:
            raise ValidationError("give costs (a matrix) or arcs (a list, or an object of "
                                  "arrays)", "costs")
        if "nodes" in given and "arcs" not in given:
            raise ValidationError("nodes need arcs to reach them", "nodes")
        if original.get("objective") == "bottleneck":
            for extra in ("prices", "alternatives"):
                if original.get(extra) not in (None, False, 0):
                    raise ValidationError(f"{extra} are not offered with the bottleneck "
                                          "objective, whose plan may use only the pairs at or "
                                          "below its threshold", extra)


def declared_ids(data: dict[str, Any]) -> list[str]:
    """The ids of a loaded problem in numbering order: sources, nodes, sinks."""
    return list(chain.from_iterable(data[name].columns["id"] for name in ID_TABLES
                                    if data.get(name) is not None))
