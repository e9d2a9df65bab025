"""The bad-input catalogue: every way a caller can get a request wrong, and what it gets back.

Each entry is one request as bytes on the wire (body, media type, method, path) and the
answer it must get: a 4xx RFC 9457 problem document (``application/problem+json``, with
``type``, ``title``, ``status`` and ``detail``), its problem type and, for field errors, the
exact JSON Pointers (RFC 6901) of the culprits. After every entry the same service must
still solve a good problem: a bad request may not leave a worker in a bad state.

The catalogue runs twice: entry by entry through the Flask test client, and once, all
entries in a row, against a real gunicorn on loopback (the same bytes through a real HTTP
parser, including one body sent chunked, which the test client cannot send).

Entries that a service bug makes fail carry ``bug``: they are strict xfails here (so the
fix is noticed) and are reported, not judged, in the gunicorn run.
"""

from __future__ import annotations

import io
import json
import signal
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from functools import cache
from typing import Any

import pytest
import requests
from servers import GOOD, GOOD_OBJECTIVE, Gunicorn, clean_app

#: Small limits, so that "too big" entries stay small; GOOD fits under every one of them.
LIMITS = {"MAX_BODY_BYTES": 65_536, "MAX_ARCS": 50, "MAX_CELLS": 100, "MAX_NODES": 40,
          "MAX_ID_LENGTH": 200}

JSON = "application/json"
URN = "urn:certimatch:problem:"


def dumps(doc: Any) -> bytes:
    # The standard library writes 10**30 and other edge values exactly as given.
    return json.dumps(doc).encode()


def with_(base: dict[str, Any], **changes: Any) -> bytes:
    return dumps({**json.loads(json.dumps(base)), **changes})


def without(base: dict[str, Any], key: str) -> bytes:
    return dumps({k: v for k, v in base.items() if k != key})


#: One arc, for errors only an arc list can have.
ARCS = {"sources": [{"id": "a"}], "nodes": [{"id": "hub"}], "sinks": [{"id": "x"}],
        "arcs": [{"from": "a", "to": "hub", "cost": 1}, {"from": "hub", "to": "x", "cost": 2}]}

#: u -> v -> u gains 2 per turn on arcs without capacity: the cost falls without limit.
LOOP = {"sources": [{"id": "s"}], "nodes": [{"id": "u"}, {"id": "v"}], "sinks": [{"id": "t"}],
        "arcs": [{"from": "s", "to": "u", "cost": 1}, {"from": "u", "to": "v", "cost": -3},
                 {"from": "v", "to": "u", "cost": 1}, {"from": "v", "to": "t", "cost": 1}]}

#: Three hard tickets, two technicians, the shortfall rejected (worked by hand).
SHORT = {"sources": [{"id": "tech-a"}, {"id": "tech-b"}],
         "sinks": [{"id": "job-1"}, {"id": "job-2"}, {"id": "job-3"}],
         "costs": [[1, 2, 3], [4, 5, 6]], "unmet_demand": "reject"}


@cache
def _good_answer() -> str:
    """The service's own answer to GOOD (as JSON text), for /v1/verify entries to break."""
    client = clean_app(LIMITS).test_client()
    resp = client.post("/v1/solve", data=dumps(GOOD), content_type=JSON)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_data(as_text=True)


def verify_with(change: Callable[[dict[str, Any]], Any]) -> bytes:
    """GOOD plus its own answer, changed by ``change``, as a /v1/verify body."""
    answer = json.loads(_good_answer())
    change(answer)
    return dumps({**GOOD, "answer": answer})


def _set(path: tuple[Any, ...], value: Any) -> Callable[[dict[str, Any]], None]:
    def change(doc: dict[str, Any]) -> None:
        for key in path[:-1]:
            doc = doc[key]
        doc[path[-1]] = value
    return change


def _nested(depth: int, opener: str, closer: str) -> bytes:
    return (opener * depth + closer * depth).encode()


@dataclass(frozen=True)
class Bad:
    """One catalogue entry: a request and the problem document it must get."""

    name: str
    body: bytes
    status: int
    type: str                               # full problem type, or "about:blank"
    pointers: tuple[str, ...] | None = None  # exact field pointers of an invalid-problem
    method: str = "POST"
    path: str = "/v1/solve"
    content_type: str | None = JSON
    chunked: bool = False                    # sent with Transfer-Encoding: chunked
    check: Callable[[dict[str, Any]], None] | None = None   # what else the document holds
    bug: str | None = None                   # a service bug makes this entry fail
    headers: dict[str, str] = field(default_factory=dict)


def invalid(name: str, body: bytes, *pointers: str, path: str = "/v1/solve",
            bug: str | None = None) -> Bad:
    return Bad(name, body, 422, URN + "invalid-problem", pointers, path=path, bug=bug)


def malformed(name: str, body: bytes) -> Bad:
    return Bad(name, body, 400, URN + "malformed-json")


def media(name: str, content_type: str | None) -> Bad:
    return Bad(name, dumps(GOOD), 415, URN + "unsupported-media-type",
               content_type=content_type)


def method(verb: str, path: str) -> Bad:
    def allow(doc: dict[str, Any]) -> None:
        assert doc["title"] == "Method Not Allowed"
    return Bad(f"{verb.lower()}-{path.strip('/').replace('/', '-')}", b"", 405, "about:blank",
               method=verb, path=path, content_type=None, check=allow)


def _has_cycle(doc: dict[str, Any]) -> None:
    assert set(doc["cycle"]) == {"u", "v"}, doc


def _has_witness(doc: dict[str, Any]) -> None:
    w = doc["witness"]
    assert (w["demand"], w["capacity"], w["shortfall"]) == (3, 2, 1), w


def _limit(value: int) -> Callable[[dict[str, Any]], None]:
    def check(doc: dict[str, Any]) -> None:
        assert doc["limit"] == value, doc
    return check


def _names_setting(doc: dict[str, Any]) -> None:
    assert "MAX_BODY_BYTES" in doc["detail"], doc


G = GOOD
S3 = [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}]
T3 = [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}]
GOOD_TEXT = json.dumps(GOOD)
OVER = LIMITS["MAX_BODY_BYTES"]

CATALOGUE: list[Bad] = [
    # -- not JSON at all (400) ---------------------------------------------------------------
    malformed("truncated", b'{"sources": ['),
    malformed("empty-body", b""),
    malformed("only-whitespace", b" \n\t "),
    malformed("trailing-garbage", dumps(G) + b" and more"),
    malformed("two-documents", dumps(G) + dumps(G)),
    malformed("single-quotes", GOOD_TEXT.replace('"', "'").encode()),
    malformed("trailing-comma", GOOD_TEXT.replace("]]}", "],]}").encode()),
    malformed("comment", b"// tickets for today\n" + dumps(G)),
    malformed("invalid-utf8", GOOD_TEXT.replace('"r0"', '"r\xff"').encode("latin-1")),
    malformed("utf16-body", GOOD_TEXT.encode("utf-16")),
    malformed("byte-order-mark", b"\xef\xbb\xbf" + dumps(G)),
    malformed("lone-surrogate", GOOD_TEXT.replace('"r0"', '"\\ud800"').encode()),
    malformed("nan", GOOD_TEXT.replace("[4, 1, 3]", "[NaN, 1, 3]").encode()),
    malformed("infinity", GOOD_TEXT.replace("[4, 1, 3]", "[Infinity, 1, 3]").encode()),
    malformed("minus-infinity", GOOD_TEXT.replace("[4, 1, 3]", "[-Infinity, 1, 3]").encode()),
    malformed("number-overflows-double", GOOD_TEXT.replace("[4, 1, 3]", "[1e400, 1, 3]")
              .encode()),
    malformed("integer-of-400-digits", GOOD_TEXT.replace("[4, 1, 3]", f"[{10**400}, 1, 3]")
              .encode()),
    malformed("nested-arrays-5000-deep", _nested(5000, "[", "]")),
    malformed("nested-objects-5000-deep", ('{"a":' * 5000 + "1" + "}" * 5000).encode()),
    malformed("nested-inside-a-field", b'{"sources": ' + _nested(5000, "[", "]") + b"}"),
    # -- not sent as JSON (415), wrong method (405), nowhere (404) ---------------------------
    media("text-plain", "text/plain"),
    media("no-content-type", None),
    media("form-urlencoded", "application/x-www-form-urlencoded"),
    media("multipart", "multipart/form-data; boundary=x"),
    media("json-lookalike", "application/jsonx"),
    method("GET", "/v1/solve"),
    method("PUT", "/v1/verify"),
    method("DELETE", "/v1/solve"),
    method("PATCH", "/v1/solve"),
    method("HEAD", "/v1/verify"),
    method("POST", "/healthz"),
    Bad("unknown-path", dumps(G), 404, "about:blank", path="/v1/solv"),
    # -- too big (413) -----------------------------------------------------------------------
    Bad("body-just-over-max-body-bytes", dumps(G) + b" " * OVER, 413, "about:blank",
        check=_names_setting),
    Bad("enormous-body", b'{"sources": "' + b"x" * (20 * 1024 * 1024) + b'"}', 413,
        "about:blank", check=_names_setting),
    Bad("chunked-body-over-max-body-bytes", dumps(G) + b" " * (4 * OVER), 413, "about:blank",
        chunked=True, check=_names_setting),
    # The same body with a cut at the limit that would leave valid JSON (all trailing
    # space): it must still be refused, not solved from its first MAX_BODY_BYTES bytes.
    Bad("chunked-body-just-over-max-body-bytes", dumps(G) + b" " * (OVER - len(dumps(G)) + 1),
        413, "about:blank", chunked=True, check=_names_setting),
    Bad("too-many-arcs", with_(ARCS, arcs=[{"from": "a", "to": "x", "cost": c}
                                           for c in range(51)]),
        413, URN + "too-large", check=_limit(50)),
    Bad("too-many-cells", dumps({"sources": [{"id": f"s{i}"} for i in range(11)],
                                 "sinks": [{"id": f"t{j}"} for j in range(10)],
                                 "costs": [[1] * 10 for _ in range(11)]}),
        413, URN + "too-large", check=_limit(100)),
    Bad("too-many-nodes", dumps({"sources": [{"id": f"s{i}"} for i in range(21)],
                                 "sinks": [{"id": f"t{j}"} for j in range(20)],
                                 "arcs": []}),
        413, URN + "too-large", check=_limit(40)),
    # -- JSON, but not a problem (422 invalid-problem, naming the fields) ---------------------
    invalid("root-is-an-array", dumps([G]), ""),
    invalid("root-is-a-string", b'"solve this"', ""),
    invalid("root-is-null", b"null", ""),
    invalid("root-is-a-number", b"42", ""),
    invalid("empty-object", b"{}", "/sources", "/sinks", "/costs"),
    invalid("missing-sources", without(G, "sources"), "/sources"),
    invalid("sources-null", with_(G, sources=None), "/sources"),
    invalid("sources-a-string", with_(G, sources="r0"), "/sources"),
    # an object is the columnar form (issue 15), whose arrays must be arrays
    invalid("sources-one-record-not-a-list", with_(G, sources={"id": "r0"}), "/sources/id"),
    invalid("sources-columns-of-unequal-length",
            with_(G, sources={"id": ["r0", "r1", "r2"], "supply": [1, 1]}), "/sources/supply"),
    invalid("arcs-columns-with-a-bad-cost",
            dumps({"sources": {"id": ["r0"]}, "sinks": {"id": ["t0"]},
                   "arcs": {"from": ["r0", "r0"], "to": ["t0", "t0"], "cost": [1, "x"]}}),
            "/arcs/cost/1"),
    # no sources or no sinks is an empty day (200); a matrix that disagrees is not
    invalid("no-sources-but-matrix-rows", with_(G, sources=[]), "/costs"),
    invalid("no-sinks-but-matrix-columns", with_(G, sinks=[]), "/costs/0"),
    invalid("source-not-an-object", with_(G, sources=[{"id": "r0"}, "r1", {"id": "r2"}]),
            "/sources/1"),
    invalid("id-a-number", with_(G, sources=[{"id": 7}, *S3[1:]]), "/sources/0/id"),
    invalid("id-empty", with_(G, sinks=[{"id": ""}, *T3[1:]]), "/sinks/0/id"),
    invalid("id-too-long", with_(G, sources=[{"id": "r" * 201}, *S3[1:]]), "/sources/0/id"),
    invalid("supply-a-string", with_(G, sources=[{"id": "r0", "supply": "2"}, *S3[1:]]),
            "/sources/0/supply"),
    invalid("demand-a-boolean", with_(G, sinks=[T3[0], {"id": "c1", "demand": True}, T3[2]]),
            "/sinks/1/demand"),
    invalid("demand-fractional", with_(G, sinks=[*T3[:2], {"id": "c2", "demand": 1.5}]),
            "/sinks/2/demand"),
    invalid("supply-negative", with_(G, sources=[S3[0], {"id": "r1", "supply": -1}, S3[2]]),
            "/sources/1/supply"),
    invalid("supply-huge", with_(G, sources=[{"id": "r0", "supply": 10**30}, *S3[1:]]),
            "/sources/0/supply"),
    invalid("penalty-negative", with_(G, sinks=[{"id": "c0", "penalty": -5}, *T3[1:]]),
            "/sinks/0/penalty"),
    invalid("penalty-the-string-nan", with_(G, sinks=[{"id": "c0", "penalty": "NaN"},
                                                      *T3[1:]]),
            "/sinks/0/penalty"),
    invalid("cost-a-string", with_(G, costs=[[4, "1", 3], [2, 0, 5], [3, 2, 2]]), "/costs/0/1"),
    invalid("cost-a-list", with_(G, costs=[[[4], 1, 3], [2, 0, 5], [3, 2, 2]]), "/costs/0/0"),
    invalid("cost-huge", with_(G, costs=[[4, 1, 3], [2, 0, 5], [3, 2, 10**30]]), "/costs/2/2"),
    invalid("cost-just-over-the-range", with_(G, costs=[[4, 1, 3], [2, 0, 5],
                                                        [3, 2, 1_000_000_001]]),
            "/costs/2/2"),
    invalid("ragged-matrix", with_(G, costs=[[4, 1, 3], [2, 0], [3, 2, 2]]), "/costs/1"),
    invalid("matrix-short-of-rows", with_(G, costs=[[4, 1, 3], [2, 0, 5]]), "/costs"),
    invalid("matrix-row-not-a-list", with_(G, costs=[[4, 1, 3], 7, [3, 2, 2]]), "/costs/1"),
    invalid("empty-matrix", with_(G, costs=[]), "/costs"),
    invalid("duplicate-source-id", with_(G, sources=[S3[0], {"id": "r0"}, S3[2]]),
            "/sources/1/id"),
    invalid("duplicate-id-across-kinds", with_(G, sinks=[T3[0], {"id": "r1"}, T3[2]]),
            "/sinks/1/id"),
    invalid("duplicate-node-id", with_(ARCS, nodes=[{"id": "hub"}, {"id": "hub"}]),
            "/nodes/1/id"),
    invalid("arc-from-unknown-id", with_(ARCS, arcs=[{"from": "ghost", "to": "x", "cost": 1}]),
            "/arcs/0/from"),
    invalid("arc-to-unknown-id", with_(ARCS, arcs=[{"from": "a", "to": "ghost", "cost": 1}]),
            "/arcs/0/to"),
    invalid("self-loop", with_(ARCS, arcs=[{"from": "hub", "to": "hub", "cost": 1}]), "/arcs/0"),
    invalid("capacity-negative", with_(ARCS, arcs=[{"from": "a", "to": "x", "cost": 1,
                                                    "capacity": -2}]),
            "/arcs/0/capacity"),
    invalid("capacity-fractional", with_(ARCS, arcs=[{"from": "a", "to": "x", "cost": 1,
                                                      "capacity": 2.5}]),
            "/arcs/0/capacity"),
    invalid("arc-without-cost", with_(ARCS, arcs=[{"from": "a", "to": "x"}]), "/arcs/0/cost"),
    invalid("costs-and-arcs", with_(G, arcs=[{"from": "r0", "to": "c0", "cost": 1}]), "/arcs"),
    invalid("neither-costs-nor-arcs", without(G, "costs"), "/costs"),
    invalid("nodes-without-arcs", with_(G, nodes=[{"id": "hub"}]), "/nodes"),
    invalid("unknown-field", with_(G, colour="red"), "/colour"),
    invalid("unknown-field-in-an-arc", with_(ARCS, arcs=[{"from": "a", "to": "x", "cost": 1,
                                                          "colour": "red"}]),
            "/arcs/0/colour"),
    invalid("objective-not-min-or-max", with_(G, objective="cheapest"), "/objective"),
    invalid("unmet-demand-unknown", with_(G, unmet_demand="ignore"), "/unmet_demand"),
    invalid("several-fields-at-once",
            with_(G, sources=[{"id": "r0", "supply": -1}, {"id": "r1", "supply": "many"}, S3[2]],
                  objective="up"),
            "/sources/0/supply", "/sources/1/supply", "/objective"),
    # -- well formed, but no answer exists (422 with a proof of why) -------------------------
    Bad("unbounded-negative-cycle", dumps(LOOP), 422, URN + "unbounded", check=_has_cycle),
    Bad("unbounded-score-cycle-when-maximising",
        dumps({**LOOP, "objective": "max",
               "arcs": [{**a, "cost": -a["cost"]} for a in LOOP["arcs"]]}),
        422, URN + "unbounded", check=_has_cycle),
    Bad("rejected-shortfall", dumps(SHORT), 422, URN + "infeasible", check=_has_witness),
    Bad("objective-beyond-exact-json",
        dumps({"sources": [{"id": "plant", "supply": 10**7}],
               "sinks": [{"id": "city", "demand": 10**7}], "costs": [[10**9]]}),
        422, URN + "out-of-range"),
    # -- /v1/verify: the answer part -----------------------------------------------------------
    invalid("verify-without-answer", dumps(G), "/answer", path="/v1/verify"),
    invalid("verify-answer-a-string", with_(G, answer="optimal"), "/answer", path="/v1/verify"),
    invalid("verify-negative-flow",
            verify_with(_set(("allocation", 0, "flow"), -1)),
            "/answer/allocation/0/flow", path="/v1/verify"),
    invalid("verify-unknown-field-in-answer",
            verify_with(_set(("colour",), "red")), "/answer/colour", path="/v1/verify"),
    invalid("verify-potential-not-a-number",
            verify_with(_set(("certificate", "potentials", "r0"), "high")),
            "/answer/certificate/potentials/r0", path="/v1/verify"),
    invalid("verify-negated-a-string",
            verify_with(_set(("certificate", "negated"), "false")),
            "/answer/certificate/negated", path="/v1/verify"),
    invalid("verify-negated-a-number",
            verify_with(_set(("certificate", "negated"), 0)),
            "/answer/certificate/negated", path="/v1/verify"),
    invalid("verify-objective-past-2**53",
            verify_with(_set(("objective",), 2**53 + 1)),
            "/answer/objective", path="/v1/verify"),
    invalid("verify-potential-past-2**53",
            verify_with(_set(("certificate", "potentials", "r0"), 2**53 + 1)),
            "/answer/certificate/potentials/r0", path="/v1/verify"),
]

#: A verify request whose row names an arc an empty arc list cannot have. Not a refusal,
#: so not a Bad entry: the answer is 200 with valid false (it once was a 500).
EMPTY_ARCS_ROWS = {
    "sources": [{"id": "a"}], "sinks": [{"id": "x"}], "arcs": [],
    "answer": {"objective": 0, "allocation": [{"from": "a", "to": "x", "flow": 1, "cost": 0}],
               "unmet": [], "unused": [],
               "certificate": {"negated": False, "potentials": {"a": 0, "x": 0},
                               "virtual_potentials": {"super_source": 0, "super_sink": 0,
                                                      "hard_pool": 0},
                               "hard_shortfall": 0,
                               "cut": {"sink_side": [], "sinks": [], "demand": 0,
                                       "capacity": 0},
                               "dual_objective": 0}},
}


def test_the_catalogue_is_large_and_its_names_unique():
    names = [b.name for b in CATALOGUE]
    assert len(names) == len(set(names))
    assert len(CATALOGUE) >= 40


# --------------------------------------------------------------------------------------------
# Judging one answer
# --------------------------------------------------------------------------------------------


@dataclass
class Reply:
    status: int
    content_type: str
    headers: dict[str, str]
    body: bytes


def judge(bad: Bad, reply: Reply) -> dict[str, Any]:
    """Assert ``reply`` is the problem document ``bad`` calls for; return the document."""
    text = reply.body[:500].decode(errors="replace")
    assert reply.status == bad.status, f"{bad.name}: {reply.status} {text}"
    assert reply.content_type.startswith("application/problem+json"), (bad.name,
                                                                       reply.content_type)
    if bad.method == "HEAD":
        return {}   # RFC 9110: a HEAD answer has the headers of a GET answer, no body
    doc = json.loads(reply.body)
    assert doc["status"] == bad.status, (bad.name, doc)
    for member in ("type", "title", "detail"):
        assert isinstance(doc.get(member), str) and doc[member], (bad.name, member, doc)
    assert doc["type"] == bad.type, (bad.name, doc)
    if bad.pointers is not None:
        got = sorted(e["pointer"] for e in doc["errors"])
        assert got == sorted(bad.pointers), (bad.name, doc["errors"])
        assert all(isinstance(e["detail"], str) and e["detail"] for e in doc["errors"])
    if bad.status == 405:
        allow = {m.strip() for m in reply.headers.get("allow", "").split(",")}
        assert allow and bad.method not in allow, (bad.name, reply.headers)
    if bad.check is not None:
        bad.check(doc)
    return doc


def _marks(bad: Bad) -> list[Any]:
    if bad.bug is None:
        return []
    return [pytest.mark.xfail(strict=True, reason=f"service bug: {bad.bug}")]


CASES = [pytest.param(b, id=b.name, marks=_marks(b)) for b in CATALOGUE]


# --------------------------------------------------------------------------------------------
# Through the Flask test client, entry by entry
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    yield clean_app(LIMITS).test_client()


def _flask_send(client: Any, bad: Bad) -> Reply:
    headers = dict(bad.headers)
    environ: dict[str, Any] = {}
    data: Any = bad.body
    if bad.content_type is not None:
        headers["Content-Type"] = bad.content_type
    if bad.chunked:
        # What gunicorn hands the app for a chunked body: no Content-Length, and a stream
        # the server ends itself (wsgi.input_terminated).
        headers["Transfer-Encoding"] = "chunked"
        environ["wsgi.input_terminated"] = True
        resp = client.open(bad.path, method=bad.method, input_stream=io.BytesIO(bad.body),
                           headers=headers, environ_overrides=environ)
    else:
        resp = client.open(bad.path, method=bad.method, data=data, headers=headers)
    return Reply(resp.status_code, resp.content_type or "",
                 {k.lower(): v for k, v in resp.headers.items()}, resp.get_data())


def _flask_good(client: Any) -> None:
    resp = client.post("/v1/solve", data=dumps(GOOD), content_type=JSON)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert resp.get_json()["objective"] == GOOD_OBJECTIVE


@pytest.mark.parametrize("bad", CASES)
def test_bad_input_gets_a_problem_document_then_a_good_request_is_solved(client, bad):
    judge(bad, _flask_send(client, bad))
    _flask_good(client)


def test_verify_with_an_empty_arc_list_and_a_row_gives_a_verdict(client):
    resp = client.post("/v1/verify", data=dumps(EMPTY_ARCS_ROWS), content_type=JSON)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    verdict = resp.get_json()
    # The row names an arc the problem does not have: the allocation check must say no.
    assert verdict["valid"] is False
    assert not next(c for c in verdict["checks"] if c["name"] == "allocation_arcs")["passed"]


def test_a_request_out_of_time_leaves_no_alarm_handler_behind(client):
    before = signal.getsignal(signal.SIGALRM)
    try:
        body = dumps({**GOOD, "time_limit_s": 1e-6})
        resp = client.post("/v1/solve", data=body, content_type=JSON)
        # 422 time-limit; 503 server-busy only should this machine be busy at that moment
        assert resp.status_code in (200, 422, 503), resp.get_data(as_text=True)
        assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
        assert signal.getsignal(signal.SIGALRM) == before
    finally:
        # Whatever the service left, later tests get the process as it was.
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, before)


def test_a_good_request_really_is_judged(client):
    """Control: judge() refuses a 200 answer, so the entries above can fail."""
    resp = client.post("/v1/solve", data=dumps(GOOD), content_type=JSON)
    reply = Reply(resp.status_code, resp.content_type or "", {}, resp.get_data())
    with pytest.raises(AssertionError):
        judge(CATALOGUE[0], reply)


# --------------------------------------------------------------------------------------------
# Against a real gunicorn, all entries in a row
# --------------------------------------------------------------------------------------------


def _http_send(server: Gunicorn, session: requests.Session, bad: Bad) -> Reply:
    headers = dict(bad.headers)
    if bad.content_type is not None:
        headers["Content-Type"] = bad.content_type
    data: Any = bad.body
    if bad.chunked:
        # A generator body makes requests send Transfer-Encoding: chunked, no length.
        data = (bad.body[i:i + 16_384] for i in range(0, len(bad.body), 16_384))
    elif not bad.body and bad.method in ("GET", "HEAD", "DELETE"):
        data = None
    resp = session.request(bad.method, server.base + bad.path, data=data, headers=headers,
                           timeout=60)
    return Reply(resp.status_code, resp.headers.get("Content-Type", ""),
                 {k.lower(): v for k, v in resp.headers.items()}, resp.content)


def test_the_catalogue_against_a_real_gunicorn(tmp_path):
    env = {f"CERTIMATCH_{k}": str(v) for k, v in LIMITS.items()}
    failures: list[str] = []
    known: list[str] = []
    with Gunicorn(tmp_path, workers=2, env=env) as server, requests.Session() as session:
        workers = server.worker_pids()
        for bad in CATALOGUE:
            try:
                reply = _http_send(server, session, bad)
            except requests.RequestException as e:
                failures.append(f"{bad.name}: no answer ({e!r})")
                continue
            try:
                judge(bad, reply)
                if bad.bug is not None:
                    failures.append(f"{bad.name}: passes now; drop its bug mark")
            except AssertionError as e:
                target = known if bad.bug is not None else failures
                target.append(f"{bad.name}: {e}")
            # Whatever the entry did, the next request must be solved, by a live worker.
            if not server.answers_good(session):
                failures.append(f"{bad.name}: the good request after it was not solved")
            assert reply.status < 500 or bad.bug is not None, (bad.name, reply.body[:300])
        # No entry may have cost a worker its life (a crash would show as a new pid).
        assert server.worker_pids() == workers, server.output()
    assert failures == [], "\n".join(failures)
    # Known bugs still fail the same way over real HTTP (if one is fixed, the strict xfail of
    # the test-client run says so).
    assert len(known) == sum(b.bug is not None for b in CATALOGUE), known
