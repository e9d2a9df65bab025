"""openapi.yaml held to the code: a valid OpenAPI 3.1 document whose paths are the app's
routes, whose component schemas are the marshmallow wire format, and whose examples are
what the service really answers.

The spec is the contract clients generate code from, so every check here compares it with
something the service actually does (routes, schema classes, constants, live answers)
rather than with a second hand-written copy of the contract.
"""

from __future__ import annotations

import copy
import importlib
import inspect
import json
import pkgutil
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import yaml
from jsonschema.exceptions import ValidationError
from marshmallow import RAISE, Schema, missing, validate
from openapi_schema_validator import OAS31Validator, oas31_format_checker
from openapi_schema_validator import validate as validate_instance
from openapi_spec_validator import validate as validate_spec
from openapi_spec_validator.validation.exceptions import OpenAPIValidationError
from referencing import Registry
from referencing.jsonschema import DRAFT202012

import schemas
import service.errors
import service.http.api
import service.solve.pipeline
from schemas.answer import SHAPES, SOLVERS
from schemas.fields import Number, NumberMap
from schemas.numbers import MAX_ABS_VALUE, MAX_ANSWER_VALUE
from schemas.pointers import iter_wire_keys
from schemas.problem import OBJECTIVES, UNMET_POLICIES, ProblemSchema
from schemas.tables import RecordList
from service.app import create_app
from service.http import encoding, observe
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[2]
SPEC: dict[str, Any] = yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))

# The whole document is one JSON Schema resource, so that "#/components/..." references
# inside any schema resolve against it, exactly as an OpenAPI tool resolves them.
SPEC_URI = "urn:certimatch:openapi"
REGISTRY: Registry = Registry().with_resource(SPEC_URI, DRAFT202012.create_resource(SPEC))

PROBLEM_JSON = "application/problem+json"
PROBLEM_TYPE = service.errors.PROBLEM_TYPE_BASE
ERROR_STATUSES_OF_A_BODY = ("400", "413", "415", "422", "500")
POST_PATHS = ("/v1/solve", "/v1/verify")


# -- helpers ---------------------------------------------------------------------------


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


def _pointer(*tokens: str) -> str:
    return "".join("/" + _escape(t) for t in tokens)


def _resolve(pointer: str) -> Any:
    """The object at a JSON Pointer into the spec (RFC 6901)."""
    node: Any = SPEC
    for token in pointer.split("/")[1:]:
        node = node[token.replace("~1", "/").replace("~0", "~")]
    return node


def _response_pointer(path: str, method: str, status: str) -> str:
    """Pointer to a response object, following a $ref into components/responses."""
    pointer = _pointer("paths", path, method, "responses", status)
    ref = _resolve(pointer).get("$ref")
    return ref[1:] if ref else pointer


def _check(instance: Any, schema_pointer: str) -> None:
    """Validate ``instance`` against the schema at ``schema_pointer`` in the spec.

    JSON Schema 2020-12 with the OpenAPI 3.1 dialect, validated by openapi-schema-validator.
    """
    validate_instance(instance, {"$ref": f"{SPEC_URI}#{schema_pointer}"}, cls=OAS31Validator,
                      registry=REGISTRY, format_checker=oas31_format_checker)


def _is_valid(instance: Any, schema_pointer: str) -> bool:
    try:
        _check(instance, schema_pointer)
    except ValidationError:
        return False
    return True


def _deref(schema: dict[str, Any]) -> dict[str, Any]:
    """Follow local $refs (VerifyRequest and SolveResult reuse properties by reference)."""
    while "$ref" in schema:
        schema = _resolve(schema["$ref"][1:])
    return schema


def _operations() -> Iterator[tuple[str, str, dict[str, Any]]]:
    for path, item in SPEC["paths"].items():
        for method, op in item.items():
            if method in {"get", "put", "post", "delete", "patch", "head", "options", "trace"}:
                yield path, method, op


def _schema_classes() -> dict[str, type[Schema]]:
    """Every marshmallow Schema defined in the schemas package, by class name."""
    found: dict[str, type[Schema]] = {}
    for info in pkgutil.iter_modules(schemas.__path__):
        module = importlib.import_module(f"schemas.{info.name}")
        for name, obj in inspect.getmembers(module, inspect.isclass):
            if issubclass(obj, Schema) and obj.__module__ == module.__name__:
                found[name] = obj
    return found


SCHEMA_CLASSES = _schema_classes()


def _component(cls_name: str) -> dict[str, Any]:
    # Tolerant lookup: a missing component must fail a test, not the collection of all.
    schema: dict[str, Any] = SPEC["components"]["schemas"].get(cls_name.removesuffix("Schema"),
                                                               {})
    return schema


def _properties(cls_name: str) -> dict[str, Any]:
    props: dict[str, Any] = _component(cls_name).get("properties", {})
    return props


def _response_examples(path: str) -> list[tuple[str, str, str, Any]]:
    """(name, status, media type, value) of the examples of a POST's own responses."""
    found = []
    for status, response in SPEC["paths"][path]["post"]["responses"].items():
        # Shared responses (a $ref) serve several operations, so their examples pair with
        # no request example of this one; they are checked in their own tests.
        if "$ref" in response:
            continue
        for media, content in response.get("content", {}).items():
            for name, example in content.get("examples", {}).items():
                found.append((name, status, media, example["value"]))
    return found


def _request_examples(path: str) -> dict[str, Any]:
    content = SPEC["paths"][path]["post"]["requestBody"]["content"]["application/json"]
    return {name: example["value"] for name, example in content["examples"].items()}


def _examples(path: str) -> dict[str, tuple[Any, str, str, Any]]:
    """Request examples of a POST, each with (request, status, media type, answer).

    A request example and the response example of the same name are one real run: the
    request, and what the service answered to it.
    """
    requests = _request_examples(path)
    return {name: (requests[name], status, media, value)
            for name, status, media, value in _response_examples(path) if name in requests}


EXAMPLE_CASES = [(path, name) for path in POST_PATHS for name in _examples(path)]


# -- the document ----------------------------------------------------------------------


def test_spec_is_valid_openapi_3_1() -> None:
    assert SPEC["openapi"] == "3.1.0"
    # OpenAPI 3.1 specification, validated by openapi-spec-validator
    validate_spec(SPEC)


def test_spec_validator_rejects_a_broken_spec() -> None:
    # Guards the check above: a response without its required description must fail.
    # OpenAPI 3.1.0 specification, Response Object: description is REQUIRED
    broken = copy.deepcopy(SPEC)
    del broken["paths"]["/healthz"]["get"]["responses"]["200"]["description"]
    with pytest.raises(OpenAPIValidationError, match="description"):
        validate_spec(broken)


def test_paths_and_methods_are_the_app_routes(app: Any) -> None:
    routes = set()
    for rule in app.url_map.iter_rules():
        if rule.endpoint == "static":
            continue
        path = re.sub(r"<(?:[^:<>]+:)?([^<>]+)>", r"{\1}", rule.rule)
        routes |= {(path, m.lower()) for m in rule.methods - {"HEAD", "OPTIONS"}}
    assert {(path, method) for path, method, _ in _operations()} == routes


def test_operation_ids_are_unique() -> None:
    ids = [op["operationId"] for _, _, op in _operations()]
    assert len(ids) == len(set(ids))


# -- component schemas against marshmallow ---------------------------------------------


def test_component_schemas_are_the_marshmallow_schemas() -> None:
    expected = {name.removesuffix("Schema") for name in SCHEMA_CLASSES}
    assert set(SPEC["components"]["schemas"]) == expected
    assert len(expected) == len(SCHEMA_CLASSES), "two schema classes share a name"


@pytest.mark.parametrize("cls_name", sorted(SCHEMA_CLASSES))
def test_component_properties_are_the_wire_keys(cls_name: str) -> None:
    schema = SCHEMA_CLASSES[cls_name]()
    component = _component(cls_name)
    assert component["type"] == "object"
    assert set(component["properties"]) == set(iter_wire_keys(schema))
    required = {f.data_key or name for name, f in schema.fields.items() if f.required}
    assert sorted(component.get("required", [])) == sorted(required)


@pytest.mark.parametrize("cls_name", sorted(SCHEMA_CLASSES))
def test_unknown_fields_are_closed_except_in_problem_documents(cls_name: str) -> None:
    component = _component(cls_name)
    if cls_name == "ProblemDocumentSchema":
        # RFC 9457 section 3.2: problem types may add extension members, and clients must
        # ignore those they do not know; the service adds `limit` and `checks`.
        assert component.get("additionalProperties", True) is not False
        return
    # The loader refuses unknown keys (Meta.unknown, or RecordList per row), so the spec
    # must say so, or a generated client would send fields the service answers 422 to.
    assert SCHEMA_CLASSES[cls_name]().unknown == RAISE
    assert component["additionalProperties"] is False


@pytest.mark.parametrize("cls_name", sorted(SCHEMA_CLASSES))
def test_defaults_are_the_load_defaults(cls_name: str) -> None:
    component = _component(cls_name)
    for name, f in SCHEMA_CLASSES[cls_name]().fields.items():
        prop = _deref(component["properties"][f.data_key or name])
        if f.load_default is missing:
            assert "default" not in prop, f"{cls_name}.{name} has no default in the code"
        else:
            value = f.load_default() if callable(f.load_default) else f.load_default
            assert prop.get("default") == value, f"{cls_name}.{name}"


def _number_checks() -> Iterator[tuple[str, dict[str, Any], str, int, int | str | None]]:
    """(where, spec property, kind, bound, minimum) for every number the schemas check."""
    for cls_name, cls in sorted(SCHEMA_CLASSES.items()):
        for name, f in cls().fields.items():
            key = f.data_key or name
            if isinstance(f, RecordList):
                row_name = f.row_schema.__name__
                row = _properties(row_name)
                for row_key, kind, _ in f.specs:
                    if kind == "field":                   # a list of numbers: its items
                        yield (f"{row_name.removesuffix('Schema')}.{row_key}[]",
                               _deref(row.get(row_key, {})).get("items", {}), "number",
                               *f.bounds[row_key])
                    elif kind not in ("id", "flag", "object"):   # no number: no bound
                        yield (f"{row_name.removesuffix('Schema')}.{row_key}",
                               _deref(row.get(row_key, {})), kind, *f.bounds[row_key])
                continue
            where = f"{cls_name.removesuffix('Schema')}.{key}"
            prop = _deref(_properties(cls_name).get(key, {}))
            if isinstance(f, Number):
                # a Range(min=0, exclusive) validator is the spec's exclusiveMinimum: 0
                positive = any(isinstance(v, validate.Range) and v.min == 0
                               and not v.min_inclusive for v in f.validators)
                least = next((v.min for v in f.validators if isinstance(v, validate.Range)
                              and v.min is not None and v.min_inclusive), None)
                yield where, prop, f.kind, f.bound, ("exclusive 0" if positive else least)
            elif isinstance(f, NumberMap):
                yield f"{where}.*", prop.get("additionalProperties", {}), "number", \
                    MAX_ANSWER_VALUE, None
    cell = SPEC["components"]["schemas"]["Problem"]["properties"]["costs"]["items"]["items"]
    yield "Problem.costs[][]", cell, "number", MAX_ABS_VALUE, None


# Answer and SolveResult share their row schemas; check each property once.
NUMBER_CHECKS = list({c[0]: c for c in _number_checks()}.values())


@pytest.mark.parametrize(("where", "prop", "kind", "bound", "minimum"), NUMBER_CHECKS,
                         ids=[c[0] for c in NUMBER_CHECKS])
def test_number_bounds_are_the_checked_bounds(where: str, prop: dict[str, Any], kind: str,
                                              bound: int, minimum: int | str | None) -> None:
    types = prop.get("type", [])
    types = types if isinstance(types, list) else [types]
    if kind == "count":
        assert "integer" in types and "number" not in types
        assert (prop.get("minimum"), prop.get("maximum")) == (minimum or 0, bound)
    else:
        assert "number" in types
        if minimum == "exclusive 0":
            assert (prop.get("exclusiveMinimum"), prop.get("maximum")) == (0, bound)
            return
        low = -bound if minimum is None else minimum
        assert (prop.get("minimum"), prop.get("maximum")) == (low, bound)


def test_bounds_are_the_documented_ranges() -> None:
    # The contract's two ranges: requests within 1e9, answers within 2**53.
    assert MAX_ABS_VALUE == 10**9
    assert MAX_ANSWER_VALUE == 2**53
    kinds = {where.split(".")[0] for where, *_ in NUMBER_CHECKS}
    assert {"Source", "Sink", "Arc", "AllocationRow", "Amount", "Certificate"} <= kinds


def test_id_length_is_the_default_setting() -> None:
    for name in ("Source", "Sink", "Node"):
        prop = SPEC["components"]["schemas"][name]["properties"]["id"]
        assert prop["maxLength"] == Settings().max_id_length
        assert prop["minLength"] == 1


def test_enums_are_the_code_constants() -> None:
    components = SPEC["components"]["schemas"]
    answer = components["Answer"]["properties"]
    assert answer["shape"]["enum"] == list(SHAPES)
    assert answer["solver"]["enum"] == list(SOLVERS)
    problem = components["Problem"]["properties"]
    assert problem["objective"]["enum"] == list(OBJECTIVES)
    assert problem["unmet_demand"]["enum"] == list(UNMET_POLICIES)


def test_check_names_are_the_verifier_checks() -> None:
    # Read from the verifier's source: a check that only runs on rare inputs must still be
    # documented before any client meets it.
    source = "\n".join(path.read_text(encoding="utf-8")
                       for path in sorted((ROOT / "service" / "check").glob("*.py")))
    names = set(re.findall(r'checks\.add\(\s*"(\w+)"', source))
    for listed in re.findall(r"checks\.skip\(\s*\[([^\]]*)\]", source):
        names |= set(re.findall(r'"(\w+)"', listed))
    assert len(names) > 10, "the pattern no longer finds the checks"
    enum = SPEC["components"]["schemas"]["Check"]["properties"]["name"]["enum"]
    assert set(enum) == names


@pytest.mark.parametrize("key", ["sources", "sinks", "nodes", "arcs"])
def test_each_table_is_records_or_columns_of_the_same_fields(key: str) -> None:
    # the columnar form has one array per field of the record, each entry that field's
    # schema; an optional array may be null (all absent), a required one may not
    field = ProblemSchema().fields[key]
    assert isinstance(field, RecordList) and field.columnar
    records, columns = SPEC["components"]["schemas"]["Problem"]["properties"][key]["oneOf"]
    row = field.row_schema.__name__.removesuffix("Schema")
    assert records == {"type": "array", "items": {"$ref": f"#/components/schemas/{row}"}}
    assert columns["additionalProperties"] is False
    assert columns["properties"] == {
        k: {"type": "array" if f.required else ["array", "null"],
            "items": {"$ref": f"#/components/schemas/{row}/properties/{k}"}}
        for k, _, f in field.specs}
    assert sorted(columns["required"]) == sorted(k for k, _, f in field.specs if f.required)


def test_verify_request_is_a_problem_plus_answer() -> None:
    components = SPEC["components"]["schemas"]
    problem, request = components["Problem"], components["VerifyRequest"]
    assert set(request["properties"]) == set(problem["properties"]) | {"answer"}
    for key in ("oneOf", "dependentRequired"):
        assert request[key] == problem[key]


# -- errors ----------------------------------------------------------------------------


def _type_values(schema: Any) -> set[str]:
    """Every `type` a problem-document schema allows by const or enum (not via $ref)."""
    found: set[str] = set()
    if isinstance(schema, dict):
        prop = schema.get("properties", {}).get("type", {})
        if "const" in prop:
            found.add(prop["const"])
        found |= set(prop.get("enum", []))
        for key in ("oneOf", "anyOf", "allOf"):
            for sub in schema.get(key, []):
                found |= _type_values(sub)
    return found


def _error_types(path: str, method: str, status: str) -> set[str]:
    response = _resolve(_response_pointer(path, method, status))
    return _type_values(response["content"][PROBLEM_JSON]["schema"])


@pytest.mark.parametrize(("path", "method"), [(p, m) for p, m, _ in _operations()])
def test_every_operation_documents_its_errors_as_problem_documents(path: str,
                                                                    method: str) -> None:
    op = SPEC["paths"][path][method]
    responses = op["responses"]
    # Any operation can fail unexpectedly; one that reads a body can fail on it.
    wanted = ERROR_STATUSES_OF_A_BODY if "requestBody" in op else ("500",)
    assert set(wanted) <= set(responses)
    for status in responses:
        if status.startswith("4") or status == "500":
            response = _resolve(_response_pointer(path, method, status))
            # RFC 9457: problem details are sent as application/problem+json
            assert set(response["content"]) == {PROBLEM_JSON}
            schema = response["content"][PROBLEM_JSON]["schema"]
            refs = json.dumps(schema)
            assert '"#/components/schemas/ProblemDocument"' in refs
            assert _error_types(path, method, status), f"{status}: no problem type"


def test_every_problem_type_is_documented_at_its_status() -> None:
    errors = [cls for _, cls in inspect.getmembers(service.errors, inspect.isclass)
              if issubclass(cls, service.errors.ServiceError)]
    assert len(errors) >= 9
    for cls in errors:
        uri = PROBLEM_TYPE + cls.slug
        assert uri in _error_types("/v1/solve", "post", str(cls.status)), cls.__name__
        assert uri in SPEC["info"]["description"], f"{uri} missing from the overview"
    assert "about:blank" in SPEC["info"]["description"]


def test_not_found_and_method_not_allowed_are_documented() -> None:
    responses = SPEC["components"]["responses"]
    assert "Allow" in responses["MethodNotAllowed"]["headers"]
    for name in ("NotFound", "MethodNotAllowed"):
        assert _type_values(responses[name]["content"][PROBLEM_JSON]["schema"]) == {
            "about:blank"}


# -- examples --------------------------------------------------------------------------


def test_each_post_has_a_200_and_a_422_example() -> None:
    for path in POST_PATHS:
        names = [name for name, *_ in _response_examples(path)]
        assert len(names) == len(set(names)), f"{path}: an example name answers twice"
        assert set(names) == set(_request_examples(path)), f"{path}: unpaired examples"
        statuses = {status for _, status, _, _ in _examples(path).values()}
        assert {"200", "422"} <= statuses, path


@pytest.mark.parametrize(("path", "name"), EXAMPLE_CASES,
                         ids=[f"{p}:{n}" for p, n in EXAMPLE_CASES])
def test_example_request_gets_the_documented_answer(client: Any, path: str,
                                                    name: str) -> None:
    request, status, media, documented = _examples(path)[name]
    response = client.post(path, json=request)
    assert str(response.status_code) == status
    assert response.mimetype == media
    answer = response.get_json()
    pointer = _response_pointer(path, "post", status)
    _check(answer, f"{pointer}/content/{_escape(media)}/schema")
    # The examples are copied from real runs and the service is deterministic (README,
    # "Determinism"), so a stale example is a failure, not noise. Of a decision, the
    # digests are determined by the request; its id, time, place and caller are not.
    if "decision" in answer:
        answer, documented = copy.deepcopy(answer), copy.deepcopy(documented)
        got, shown = answer.pop("decision"), documented.pop("decision")
        for name in ("input_sha256", "answer_sha256", "service_version"):
            assert got[name] == shown[name], name
    assert answer == documented


@pytest.mark.parametrize(("path", "name"), EXAMPLE_CASES,
                         ids=[f"{p}:{n}" for p, n in EXAMPLE_CASES])
def test_example_request_is_valid_exactly_when_the_service_accepts_its_fields(
        path: str, name: str) -> None:
    request, _, _, documented = _examples(path)[name]
    body_schema = _pointer("paths", path, "post", "requestBody", "content",
                           "application/json", "schema")
    rejected = documented.get("type") == PROBLEM_TYPE + "invalid-problem"
    assert _is_valid(request, body_schema) is not rejected


def _all_response_examples() -> Iterator[tuple[str, str, Any]]:
    """(label, schema pointer, value) of every example of a response written out in full."""
    places = [("", _pointer("components", "responses"), SPEC["components"]["responses"])]
    places += [(f"{method} {path} ", _pointer("paths", path, method, "responses"),
                op["responses"]) for path, method, op in _operations()]
    for label, base, responses in places:
        for status, response in responses.items():
            if "$ref" in response:
                continue
            for media, content in response.get("content", {}).items():
                schema = f"{base}/{_escape(status)}/content/{_escape(media)}/schema"
                if "example" in content:
                    yield f"{label}{status}", schema, content["example"]
                for name, example in content.get("examples", {}).items():
                    yield f"{label}{status} {name}", schema, example["value"]


RESPONSE_EXAMPLES = list(_all_response_examples())


@pytest.mark.parametrize(("schema", "value"), [e[1:] for e in RESPONSE_EXAMPLES],
                         ids=[e[0] for e in RESPONSE_EXAMPLES])
def test_response_examples_match_their_schemas(schema: str, value: Any) -> None:
    _check(value, schema)


def test_response_schema_check_can_fail(client: Any) -> None:
    # Guards the live checks: an answer with a potential beyond 2**53 must be refused.
    request, *_ = _examples("/v1/solve")["technicians"]
    answer = client.post("/v1/solve", json=request).get_json()
    answer["certificate"]["potentials"]["tech-ana"] = 2**53 + 2
    schema = _response_pointer("/v1/solve", "post", "200") + "/content/application~1json/schema"
    with pytest.raises(ValidationError):
        _check(answer, schema)


# -- requests at the edges of the documented bounds -------------------------------------

TECHNICIANS = _examples("/v1/solve")["technicians"][0]
ARCS = _examples("/v1/solve")["depots"][0]


def _edit(base: dict[str, Any], pointer: str, value: Any) -> dict[str, Any]:
    """A copy of ``base`` with ``value`` at ``pointer``; the value ``...`` deletes."""
    body = copy.deepcopy(base)
    *parents, last = pointer.split("/")[1:]
    node: Any = body
    for token in parents:
        node = node[int(token) if isinstance(node, list) else token]
    key: Any = int(last) if isinstance(node, list) else last
    if value is ...:
        del node[key]
    else:
        node[key] = value
    return body


SPEC_INVALID = {
    "negative supply": (TECHNICIANS, "/sources/0/supply", -1),
    "fractional supply": (TECHNICIANS, "/sources/0/supply", 1.5),
    "supply over 1e9": (TECHNICIANS, "/sources/0/supply", MAX_ABS_VALUE + 1),
    "boolean supply": (TECHNICIANS, "/sources/0/supply", True),
    "string demand": (TECHNICIANS, "/sinks/0/demand", "2"),
    "empty id": (TECHNICIANS, "/sinks/1/id", ""),
    "id over 200 characters": (TECHNICIANS, "/sinks/1/id", "t" * 201),
    "id with a trailing space": (TECHNICIANS, "/sinks/1/id", "oven "),
    "id of whitespace only": (TECHNICIANS, "/sinks/1/id", "\u3000"),
    "id with a control character": (TECHNICIANS, "/sinks/1/id", "ov\x1ben"),
    "id with a bidirectional override": (TECHNICIANS, "/sinks/1/id", "ov\u202een"),
    "cost over 1e9": (TECHNICIANS, "/costs/0/1", MAX_ABS_VALUE + 1),
    "cost as text": (TECHNICIANS, "/costs/0/1", "cheap"),
    "negative penalty": (TECHNICIANS, "/sinks/2/penalty", -0.5),
    "unknown top-level field": (TECHNICIANS, "/priority", "high"),
    "unknown source field": (TECHNICIANS, "/sources/0/skill", "gas"),
    "sources missing": (TECHNICIANS, "/sources", ...),
    "neither costs nor arcs": (TECHNICIANS, "/costs", ...),
    "both costs and arcs": (TECHNICIANS, "/arcs", []),
    "null cost matrix": (TECHNICIANS, "/costs", None),
    "nodes without arcs": (TECHNICIANS, "/nodes", [{"id": "hub"}]),
    "unknown objective": (TECHNICIANS, "/objective", "maximize"),
    "unknown unmet policy": (TECHNICIANS, "/unmet_demand", "ignore"),
    "negative capacity": (ARCS, "/arcs/0/capacity", -1),
    "arc without cost": (ARCS, "/arcs/1/cost", ...),
    "arc with null cost": (ARCS, "/arcs/1/cost", None),
}

def _columns(records: list[dict[str, Any]], *keys: str) -> dict[str, list[Any]]:
    """The columnar form of ``records``: one array per key, null where a record lacks it."""
    return {k: [r.get(k) for r in records] for k in keys}


COLUMNAR_ARCS = _columns(ARCS["arcs"], "from", "to", "cost", "capacity")

SPEC_INVALID.update({
    "columnar arcs with an unknown array": (ARCS, "/arcs", {**COLUMNAR_ARCS,
                                                            "colour": ["red"] * 5}),
    "columnar arcs without costs": (ARCS, "/arcs", {k: v for k, v in COLUMNAR_ARCS.items()
                                                    if k != "cost"}),
    "columnar cost as text": (ARCS, "/arcs", {**COLUMNAR_ARCS, "cost": ["2", 1, 1, 3, 7]}),
    "columnar null in a required array": (ARCS, "/arcs", {**COLUMNAR_ARCS,
                                                          "to": [None, *COLUMNAR_ARCS["to"][1:]]}),
    "columnar supply as one number": (TECHNICIANS, "/sources", {"id": ["a", "b"], "supply": 2}),
    "columnar negative demand": (TECHNICIANS, "/sinks", {"id": ["x", "y", "z"],
                                                         "demand": [1, -1, 1]}),
})

SPEC_VALID = {
    "null supply means 1": (TECHNICIANS, "/sources/0/supply", None),
    "whole number written 3.0": (TECHNICIANS, "/sources/0/supply", 3.0),
    "zero supply": (TECHNICIANS, "/sources/0/supply", 0),
    "demand at 1e9": (TECHNICIANS, "/sinks/2/demand", MAX_ABS_VALUE),
    "cost at -1e9": (TECHNICIANS, "/costs/0/1", -MAX_ABS_VALUE),
    "cost at 1e9": (TECHNICIANS, "/costs/0/0", MAX_ABS_VALUE),
    "cost with 7 decimals": (TECHNICIANS, "/costs/0/0", 0.1234567),
    "null penalty is hard": (TECHNICIANS, "/sinks/2/penalty", None),
    "id of 200 characters": (TECHNICIANS, "/sinks/1/id", "t" * 200),
    "id with inner spaces and accents": (TECHNICIANS, "/sinks/1/id", "four\u00e9 \u00e0 gaz"),
    "objective max": (TECHNICIANS, "/objective", "max"),
    "null capacity is unbounded": (ARCS, "/arcs/0/capacity", None),
    "zero capacity": (ARCS, "/arcs/0/capacity", 0),
    "no arcs at all": (ARCS, "/arcs", []),
    "columnar arcs": (ARCS, "/arcs", COLUMNAR_ARCS),
    "columnar arcs without capacities": (ARCS, "/arcs", {**COLUMNAR_ARCS, "capacity": None}),
    "columnar sources with null supplies": (TECHNICIANS, "/sources", {
        "id": ["tech-north", "tech-south"], "supply": [None, 2]}),
    "columnar sinks, ids only": (TECHNICIANS, "/sinks", {
        "id": ["ticket-101", "ticket-102", "ticket-103"]}),
    "no arcs at all, columnar": (ARCS, "/arcs", {"from": [], "to": [], "cost": []}),
    "an empty day, no tickets": ({"sources": [{"id": "tech-north"}], "sinks": [],
                                  "costs": [[]]}, "/objective", "min"),
    "an empty day, no technicians": ({"sources": [], "sinks": [{"id": "ticket-101"}],
                                      "costs": []}, "/objective", "min"),
}

PROBLEM_SCHEMA = "/components/schemas/Problem"


@pytest.mark.parametrize("case", sorted(SPEC_INVALID))
def test_spec_and_service_both_refuse(client: Any, case: str) -> None:
    body = _edit(*SPEC_INVALID[case])
    assert not _is_valid(body, PROBLEM_SCHEMA)
    response = client.post("/v1/solve", json=body)
    assert response.status_code == 422
    doc = response.get_json()
    assert doc["type"] == PROBLEM_TYPE + "invalid-problem"
    _check(doc, _response_pointer("/v1/solve", "post", "422")
           + "/content/application~1problem+json/schema")


@pytest.mark.parametrize("case", sorted(SPEC_VALID))
def test_spec_and_service_both_accept(client: Any, case: str) -> None:
    body = _edit(*SPEC_VALID[case])
    _check(body, PROBLEM_SCHEMA)
    response = client.post("/v1/solve", json=body)
    assert response.status_code == 200, response.get_json()
    _check(response.get_json(),
           _response_pointer("/v1/solve", "post", "200") + "/content/application~1json/schema")


# -- error answers that no request example can show ------------------------------------


def _check_error(response: Any, path: str, method: str, status: int) -> dict[str, Any]:
    assert response.status_code == status
    assert response.mimetype == PROBLEM_JSON
    doc: dict[str, Any] = response.get_json()
    pointer = _response_pointer(path, method, str(status))
    _check(doc, f"{pointer}/content/{_escape(PROBLEM_JSON)}/schema")
    # RFC 9457 section 3.1: status, when present, is the HTTP status of the answer
    assert doc["status"] == status
    return doc


@pytest.mark.parametrize("path", POST_PATHS)
@pytest.mark.parametrize("body", [b'{"sources": [', b"\xff\xfe{}", b"", b"[" * 1100 + b"]" * 1100])
def test_malformed_json_is_400(client: Any, path: str, body: bytes) -> None:
    response = client.post(path, data=body, content_type="application/json")
    _check_error(response, path, "post", 400)


@pytest.mark.parametrize("path", POST_PATHS)
def test_wrong_content_type_is_415(client: Any, path: str) -> None:
    response = client.post(path, data=json.dumps(TECHNICIANS), content_type="text/plain")
    _check_error(response, path, "post", 415)


@pytest.mark.parametrize("path", POST_PATHS)
def test_body_over_the_limit_is_413_about_blank(path: str) -> None:
    small = create_app({"TESTING": True, "MAX_BODY_BYTES": 64}).test_client()
    doc = _check_error(small.post(path, json=TECHNICIANS), path, "post", 413)
    assert doc["type"] == "about:blank"


def test_problem_over_a_size_limit_is_413_with_limit() -> None:
    few_arcs = create_app({"TESTING": True, "MAX_ARCS": 1}).test_client()
    doc = _check_error(few_arcs.post("/v1/solve", json=ARCS), "/v1/solve", "post", 413)
    assert doc["type"] == PROBLEM_TYPE + "too-large"
    assert doc["limit"] == 1


def test_unknown_path_is_404(client: Any) -> None:
    response = client.get("/v2/solve")
    assert response.status_code == 404
    _check(response.get_json(), "/components/responses/NotFound/content/"
           "application~1problem+json/schema")


@pytest.mark.parametrize("path", POST_PATHS)
def test_wrong_method_is_405_with_allow(client: Any, path: str) -> None:
    response = client.get(path)
    assert response.status_code == 405
    assert response.mimetype == PROBLEM_JSON
    # RFC 9110 section 15.5.6: a 405 answer lists the allowed methods in Allow
    assert "POST" in response.headers["Allow"]
    _check(response.get_json(), "/components/responses/MethodNotAllowed/content/"
           "application~1problem+json/schema")


def test_certificate_failure_is_500_with_checks(client: Any, objective_off_by_one: None) -> None:
    # A bug after solving: the self-check must catch it and answer as documented.
    doc = _check_error(client.post("/v1/solve", json=TECHNICIANS), "/v1/solve", "post", 500)
    assert doc["type"] == PROBLEM_TYPE + "certificate-failure"
    assert [c["name"] for c in doc["checks"]] == ["objective"]


@pytest.mark.parametrize("path", POST_PATHS)
def test_unexpected_exception_is_500_internal_error(client: Any, path: str,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(*args: Any, **kwargs: Any) -> None:
        raise RuntimeError("injected by the test")

    monkeypatch.setattr(service.solve.pipeline, "build_network", broken)
    body = TECHNICIANS if path == "/v1/solve" else _examples(path)["certified_answer"][0]
    doc = _check_error(client.post(path, json=body), path, "post", 500)
    assert doc["type"] == PROBLEM_TYPE + "internal-error"


# -- health ----------------------------------------------------------------------------


@pytest.mark.parametrize("path", ["/healthz", "/readyz"])
def test_health_answers_match_the_spec(client: Any, path: str) -> None:
    response = client.get(path)
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    _check(response.get_json(), _pointer("paths", path, "get", "responses", "200", "content",
                                         "application/json", "schema"))


def test_not_ready_answer_matches_the_spec(client: Any,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    # A probe that solves wrongly must keep the process out of rotation.
    monkeypatch.setattr(service.http.api, "solve_body", lambda body, settings: {"objective": 2})
    response = client.get("/readyz")
    assert response.status_code == 503
    assert response.mimetype == "application/problem+json"
    _check(response.get_json(), _pointer("paths", "/readyz", "get", "responses", "503",
                                         "content", "application/problem+json", "schema"))


# -- request ids and the documents the service serves about itself ---------------------


def _responses_of_every_operation() -> Iterator[tuple[str, dict[str, Any]]]:
    for path, method, op in _operations():
        for status, response in op["responses"].items():
            if "$ref" in response:
                response = _resolve(response["$ref"][1:])
            yield f"{method} {path} {status}", response


def test_every_operation_accepts_a_request_id() -> None:
    for path, method, op in _operations():
        refs = [p.get("$ref") for p in op.get("parameters", [])]
        assert "#/components/parameters/RequestId" in refs, f"{method} {path}"
    parameter = SPEC["components"]["parameters"]["RequestId"]
    assert (parameter["name"], parameter["in"]) == (observe.REQUEST_ID_HEADER, "header")
    assert parameter["schema"]["maxLength"] == observe.REQUEST_ID_MAX


def test_every_post_documents_the_content_codings() -> None:
    for path in POST_PATHS:
        refs = [p.get("$ref") for p in SPEC["paths"][path]["post"]["parameters"]]
        assert "#/components/parameters/ContentEncoding" in refs, path
        headers = SPEC["paths"][path]["post"]["responses"]["200"]["headers"]
        assert headers["Content-Encoding"] == {"$ref": "#/components/headers/ContentEncoding"}
    parameter = SPEC["components"]["parameters"]["ContentEncoding"]
    assert set(parameter["schema"]["enum"]) == {*encoding._CODINGS, "identity"}
    assert encoding.ACCEPTED_CODINGS in parameter["description"].replace("\n", " ")
    assert str(encoding.MIN_GZIP_BYTES) in SPEC["components"]["headers"]["ContentEncoding"][
        "description"]


def test_every_response_documents_the_request_id_header() -> None:
    for label, response in _responses_of_every_operation():
        header = response.get("headers", {}).get(observe.REQUEST_ID_HEADER, {})
        assert header.get("$ref") == "#/components/headers/RequestId", label


@pytest.mark.parametrize(("path", "status"), [("/healthz", 200), ("/readyz", 200),
                                              ("/v1/openapi.yaml", 200), ("/", 200),
                                              ("/metrics", 200), ("/v2/solve", 404)])
def test_get_answers_match_their_documented_media_type(client: Any, path: str,
                                                       status: int) -> None:
    response = client.get(path)
    assert response.status_code == status
    item = SPEC["paths"].get(path)
    responses = item["get"]["responses"] if item else {"404": {
        "$ref": "#/components/responses/NotFound"}}
    documented = responses[str(status)]
    if "$ref" in documented:
        documented = _resolve(documented["$ref"][1:])
    assert response.mimetype in documented["content"]
    header = response.headers[observe.REQUEST_ID_HEADER]
    _check(header, "/components/headers/RequestId/schema")


def test_metrics_description_names_every_metric() -> None:
    # The names operators put in dashboards and alerts are part of the contract.
    text = SPEC["paths"]["/metrics"]["get"]["description"]
    for metric in vars(observe.metrics()).values():
        family = metric.describe()[0]
        name = family.name + ("_total" if family.type == "counter" else "")
        assert f"`{name}`" in text, name
