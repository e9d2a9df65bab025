"""gunicorn's own answers to requests it cannot parse are problem documents too.

gunicorn answers a malformed request before the app sees it; deploy/gunicorn.conf.py's
``post_worker_init`` makes those answers RFC 9457 documents with a request id. These
tests send raw bytes to a real gunicorn (tests/servers.py) and read the raw answer.
"""

from __future__ import annotations

import json
import re
import socket
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.servers import Gunicorn

HEX_ID = re.compile(r"[0-9a-f]{32}")
#: Bound on one exchange with the server; only a failure waits this long.
SOCKET_SECONDS = 20.0
HOST = b"Host: 127.0.0.1\r\n"


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Gunicorn]:
    with Gunicorn(Path(tmp_path_factory.mktemp("gunicorn-errors")), workers=1) as running:
        yield running


def _exchange(server: Gunicorn, data: bytes) -> tuple[int, str, dict[str, str], bytes]:
    """(status, reason, headers, body) of the answer to the raw request ``data``."""
    with socket.create_connection(("127.0.0.1", server.port), timeout=SOCKET_SECONDS) as s:
        s.sendall(data)
        raw = b""
        while chunk := s.recv(65536):
            raw += chunk
    head, _, body = raw.partition(b"\r\n\r\n")
    status_line, *lines = head.decode("latin-1").split("\r\n")
    _, status, reason = status_line.split(" ", 2)
    headers = {k.strip().lower(): v.strip() for k, v in (ln.split(":", 1) for ln in lines)}
    return int(status), reason, headers, body


MALFORMED = {
    # name: (raw request, status gunicorn gives it)
    "bad request line": (b"GARBAGE\r\n\r\n", 400),
    "bytes that are no text in the line": (b"GET /\xff\xfe HTTP/1.1\r\n" + HOST + b"\r\n", 400),
    "unknown HTTP version": (b"GET /healthz HTTP/9.9\r\n" + HOST + b"\r\n", 400),
    "space in a header name": (b"GET /healthz HTTP/1.1\r\n" + HOST + b"Bad Name: 1\r\n\r\n", 400),
    "a header field over 8190 bytes": (
        b"GET /healthz HTTP/1.1\r\n" + HOST + b"X-Big: " + b"a" * 9000 + b"\r\n\r\n", 431),
    "more than 100 header fields": (
        b"GET /healthz HTTP/1.1\r\n" + HOST
        + b"".join(b"X-F%d: 1\r\n" % i for i in range(120)) + b"\r\n", 431),
    "a request line over 4094 bytes": (
        b"GET /" + b"a" * 5000 + b" HTTP/1.1\r\n" + HOST + b"\r\n", 414),
    "an unknown transfer coding": (
        b"POST /v1/solve HTTP/1.1\r\n" + HOST + b"Transfer-Encoding: gzip\r\n"
        b"Content-Type: application/json\r\n\r\n", 400),
}


@pytest.mark.parametrize("case", sorted(MALFORMED))
def test_gunicorns_own_error_answers_are_problem_documents(server, case):
    data, expected = MALFORMED[case]
    status, reason, headers, body = _exchange(server, data)
    assert status == expected
    assert headers["content-type"] == "application/problem+json"
    assert int(headers["content-length"]) == len(body)
    assert HEX_ID.fullmatch(headers["x-request-id"])
    doc = json.loads(body)
    # RFC 9457: about:blank means the HTTP status says it all, titled by its reason phrase
    assert doc == {"type": "about:blank", "title": reason, "status": status,
                   "detail": doc["detail"]}
    assert doc["detail"].startswith("the server could not read the request: ")


def test_a_body_whose_chunks_cannot_be_read_is_400_not_500(server):
    data = (b"POST /v1/solve HTTP/1.1\r\n" + HOST + b"Transfer-Encoding: chunked\r\n"
            b"Content-Type: application/json\r\nConnection: close\r\n\r\nzz\r\n{}\r\n0\r\n\r\n")
    status, _, headers, body = _exchange(server, data)
    assert status == 400
    assert headers["content-type"] == "application/problem+json"
    assert "chunk" in json.loads(body)["detail"]


def test_the_server_answers_well_formed_requests_after_them(server):
    for data, _ in MALFORMED.values():
        _exchange(server, data)
    status, _, headers, body = _exchange(
        server, b"GET /healthz HTTP/1.1\r\n" + HOST + b"Connection: close\r\n\r\n")
    assert status == 200 and body == b'{"status":"ok"}\n'


@pytest.mark.parametrize(("header", "kept"), [
    # HTTP drops spaces and tabs around a value before the service sees it (RFC 9110, 5.5)
    (b"X-Request-ID:   run 7 \t\r\n", "run 7"),
    # a field sent twice arrives as one value, joined by a comma
    (b"X-Request-ID: part-a\r\nX-Request-ID: part-b\r\n", "part-a,part-b"),
])
def test_request_ids_as_a_real_server_delivers_them(server, header, kept):
    status, _, headers, _ = _exchange(
        server, b"GET /healthz HTTP/1.1\r\n" + HOST + header + b"Connection: close\r\n\r\n")
    assert status == 200
    assert headers["x-request-id"] == kept
