"""Content codings (service/http/encoding.py): compressed request bodies, gzip answers.

The references are outside the service: Python's gzip and zlib modules (RFC 1952 gzip,
RFC 1950 zlib, RFC 1951 raw deflate) make the request bodies and read the answers back,
and the answer to the same problem sent uncompressed is what every decoded answer must be.
"""

from __future__ import annotations

import gzip
import json
import tracemalloc
import zlib
from functools import cache
from typing import Any

import pytest

from service.app import create_app
from service.http.encoding import MIN_GZIP_BYTES
from tests.http.test_columnar import without_decision
from tests.reference import instance
from tests.wire.test_columns import columnar

JSON = "application/json"
PROBLEM = {"sources": [{"id": f"s{i}", "supply": 3} for i in range(40)],
           "sinks": [{"id": f"t{j}"} for j in range(90)],
           "costs": [[(7 * i + 3 * j) % 17 for j in range(90)] for i in range(40)]}


def _raw(body: Any = PROBLEM) -> bytes:
    return json.dumps(body).encode()


def _post(client: Any, data: bytes, path: str = "/v1/solve", **headers: str) -> Any:
    return client.post(path, data=data, content_type=JSON, headers=headers)


def _raw_deflate(data: bytes) -> bytes:
    packer = zlib.compressobj(6, zlib.DEFLATED, -zlib.MAX_WBITS)
    return packer.compress(data) + packer.flush()


@cache
def gigabyte_of_zeros() -> bytes:
    """2**30 zero bytes, gzip-compressed (about a megabyte): a compression bomb.

    It is 64 gzip members of 16 MiB each (RFC 1952, 2.2: one body, as gunzip reads it),
    so that it is made in a moment; one member alone passes the limits it is sent to.
    """
    packer = zlib.compressobj(9, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    member = packer.compress(bytes(16 << 20)) + packer.flush()
    assert len(gzip.decompress(member * 2)) == 32 << 20
    return member * 64


# -- compressed request bodies --------------------------------------------------------------


@pytest.mark.parametrize("coding,pack", [
    ("gzip", gzip.compress), ("x-gzip", gzip.compress), ("GZip", gzip.compress),
    ("deflate", zlib.compress), ("deflate", _raw_deflate), ("identity", lambda b: b),
    ("gzip, identity", gzip.compress),
])
def test_a_compressed_body_gets_the_answer_of_the_plain_one(client, coding, pack):
    plain = _post(client, _raw())
    assert plain.status_code == 200
    packed = _post(client, pack(_raw()), **{"Content-Encoding": coding})
    assert without_decision(packed.data) == without_decision(plain.data)


def test_a_gzip_body_of_several_members_is_one_body(client):
    # RFC 1952, 2.2: a gzip file is a series of members; gunzip reads them as one
    raw = _raw()
    body = gzip.compress(raw[:100]) + gzip.compress(raw[100:1000]) + gzip.compress(raw[1000:])
    packed = _post(client, body, **{"Content-Encoding": "gzip"})
    assert without_decision(packed.data) == without_decision(_post(client, raw).data)


@pytest.mark.parametrize("path", ["/v1/solve", "/v1/verify", "/v1/report"])
def test_every_post_takes_a_gzip_columnar_body(client, path):
    body = instance("transshipment", 3)
    answer = _post(client, _raw(body)).get_json()
    full = {**columnar(body), "answer": answer} if path != "/v1/solve" else columnar(body)
    plain = _post(client, _raw(full), path)
    packed = _post(client, gzip.compress(_raw(full)), path, **{"Content-Encoding": "gzip"})
    assert plain.status_code == packed.status_code == 200
    assert without_decision(packed.data) == without_decision(plain.data)


@pytest.mark.parametrize("coding", ["br", "compress", "zstd", "gzip, gzip", "deflate, gzip"])
def test_a_coding_not_taken_is_415_naming_content_encoding(client, coding):
    reply = _post(client, _raw(), **{"Content-Encoding": coding})
    assert reply.status_code == 415
    doc = reply.get_json()
    assert doc["type"] == "urn:certimatch:problem:unsupported-media-type"
    assert "Content-Encoding" in doc["detail"] and repr(coding) in doc["detail"]
    # RFC 9110, 12.5.3: a 415 for a content coding says which codings are taken
    assert reply.headers["Accept-Encoding"] == "gzip, deflate"


@pytest.mark.parametrize("case,body", [
    ("truncated", gzip.compress(_raw())[:-9]),
    ("not gzip at all", _raw()),
    ("corrupted", gzip.compress(_raw())[:30] + b"\xff" * 40 + gzip.compress(_raw())[70:]),
    ("empty", b""),
    ("junk after the member", gzip.compress(_raw()) + b"tail"),
])
def test_a_body_that_is_no_gzip_stream_is_400(client, case, body):
    reply = _post(client, body, **{"Content-Encoding": "gzip"})
    assert reply.status_code == 400, case
    assert reply.get_json()["type"] == "urn:certimatch:problem:malformed-json"
    assert "gzip" in reply.get_json()["detail"]


def test_the_limit_holds_for_the_inflated_body():
    limit = 4096
    app = create_app({"TESTING": True, "MAX_BODY_BYTES": limit})
    client = app.test_client()
    raw = _raw({"sources": [{"id": "a"}], "sinks": [{"id": "b"}], "costs": [[1]]})
    at_limit = raw + b" " * (limit - len(raw))          # JSON allows trailing whitespace
    assert _post(client, gzip.compress(at_limit), **{"Content-Encoding": "gzip"}
                 ).status_code == 200
    over = _post(client, gzip.compress(at_limit + b" "), **{"Content-Encoding": "gzip"})
    assert over.status_code == 413
    assert over.get_json()["type"] == "about:blank"
    assert f"larger than {limit} bytes (setting MAX_BODY_BYTES)" in over.get_json()["detail"]


def test_a_compression_bomb_is_refused_without_being_inflated_whole():
    limit = 4 * 1024 * 1024
    client = create_app({"TESTING": True, "MAX_BODY_BYTES": limit}).test_client()
    bomb = gigabyte_of_zeros()
    tracemalloc.start()
    try:
        reply = _post(client, bomb, **{"Content-Encoding": "gzip"})
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert reply.status_code == 413
    assert "inflated from Content-Encoding gzip" in reply.get_json()["detail"]
    # the bomb is 2**30 bytes inflated; memory held is the limit, the compressed body and
    # a step of at most 1 MiB (service.http.encoding._STEP), with room for the app's own
    assert peak < limit + len(bomb) + 8 * 1024 * 1024, peak


# -- gzip answers ---------------------------------------------------------------------------


@pytest.mark.parametrize("accept", ["gzip", "gzip, deflate, br", "br;q=1.0, gzip;q=0.5", "*"])
def test_an_answer_is_gzip_when_the_client_takes_it(client, accept):
    plain = _post(client, _raw())
    assert len(plain.data) >= MIN_GZIP_BYTES
    packed = _post(client, _raw(), **{"Accept-Encoding": accept})
    assert packed.headers["Content-Encoding"] == "gzip"
    assert "Accept-Encoding" in packed.headers["Vary"]
    assert int(packed.headers["Content-Length"]) == len(packed.data) < len(plain.data)
    assert without_decision(gzip.decompress(packed.data)) == without_decision(plain.data)


@pytest.mark.parametrize("accept", [None, "identity", "gzip;q=0", "br", "*;q=0"])
def test_an_answer_is_plain_unless_gzip_is_taken(client, accept):
    headers = {"Accept-Encoding": accept} if accept else {}
    reply = _post(client, _raw(), **headers)
    assert "Content-Encoding" not in reply.headers
    assert "Accept-Encoding" in reply.headers["Vary"]
    assert reply.get_json()["status"] == "optimal"


def test_a_short_answer_is_sent_as_it_is(client):
    reply = _post(client, _raw({"sources": [{"id": "a"}], "sinks": [{"id": "b"}],
                                "costs": [[1]]}), **{"Accept-Encoding": "gzip"})
    assert len(reply.data) < MIN_GZIP_BYTES
    assert "Content-Encoding" not in reply.headers
    assert "Accept-Encoding" in reply.headers["Vary"]


def test_a_long_problem_document_is_gzip_too(client):
    body = {"sources": [{"id": f"s{i}", "supply": -1} for i in range(60)],
            "sinks": [{"id": "t"}], "costs": [[1]] * 60}
    reply = _post(client, _raw(body), **{"Accept-Encoding": "gzip"})
    assert reply.status_code == 422
    assert reply.headers["Content-Encoding"] == "gzip"
    assert reply.mimetype == "application/problem+json"
    assert len(json.loads(gzip.decompress(reply.data))["errors"]) == 51


def test_the_report_page_is_gzip_too(client):
    body = instance("sparse_arcs", 1)
    answer = _post(client, _raw(body)).get_json()
    reply = _post(client, _raw({**body, "answer": answer}), "/v1/report",
                  **{"Accept-Encoding": "gzip"})
    assert reply.headers["Content-Encoding"] == "gzip"
    assert gzip.decompress(reply.data).startswith(b"<!DOCTYPE html>")
