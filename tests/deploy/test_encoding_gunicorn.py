"""Compressed bodies and gzip answers under a real gunicorn (deploy/gunicorn.conf.py).

The client is ``requests`` (urllib3), which sends a generator body with chunked transfer
coding and decodes gzip answers itself; the bodies are made with Python's gzip module.
A compression bomb must be refused with 413 that the client reads (not a reset
connection), and the worker's peak memory (its VmHWM in /proc) must stay near the limit,
not near the gigabyte the bomb inflates to.
"""

from __future__ import annotations

import gzip
import json
from collections.abc import Iterator
from pathlib import Path

import pytest
import requests
from servers import gunicorn, without_decision

from tests.http.test_encoding import PROBLEM, gigabyte_of_zeros
from tests.wire.test_columns import columnar

LIMIT = 64 * 1024 * 1024        # the default MAX_BODY_BYTES


def _peak_kib(pid: int) -> int:
    """The process's peak resident set (VmHWM) in KiB (proc(5))."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1])
    raise AssertionError("no VmHWM")


def _pieces(data: bytes, size: int = 8192) -> Iterator[bytes]:
    for i in range(0, len(data), size):
        yield data[i:i + size]


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory):
    with gunicorn(tmp_path_factory.mktemp("encoding"), workers=1) as s:
        yield s


def _post(server, data, **headers) -> requests.Response:
    return requests.post(server.base + "/v1/solve", data=data, timeout=60,
                         headers={"Content-Type": "application/json", **headers})


def test_gzip_bodies_with_a_length_and_chunked_get_the_plain_answer(server):
    raw = json.dumps(columnar(PROBLEM)).encode()
    plain = _post(server, raw, **{"Accept-Encoding": "identity"})
    assert plain.status_code == 200
    packed = gzip.compress(raw)
    sized = _post(server, packed, **{"Content-Encoding": "gzip",
                                     "Accept-Encoding": "identity"})
    chunked = _post(server, _pieces(packed), **{"Content-Encoding": "gzip",
                                                "Accept-Encoding": "identity"})
    assert (without_decision(sized.content) == without_decision(chunked.content)
            == without_decision(plain.content))


def test_the_answer_comes_back_gzip(server):
    raw = json.dumps(PROBLEM).encode()
    reply = requests.post(server.base + "/v1/solve", data=raw, timeout=60,
                          headers={"Content-Type": "application/json",
                                   "Accept-Encoding": "gzip"}, stream=True)
    wire = reply.raw.read(decode_content=False)
    assert reply.headers["Content-Encoding"] == "gzip"
    assert "Accept-Encoding" in reply.headers["Vary"]
    assert int(reply.headers["Content-Length"]) == len(wire)
    plain = _post(server, raw, **{"Accept-Encoding": "identity"})
    assert without_decision(gzip.decompress(wire)) == without_decision(plain.content)


@pytest.mark.parametrize("chunked", [False, True])
def test_a_compression_bomb_is_413_and_the_worker_stays_small(server, chunked):
    bomb = gigabyte_of_zeros()
    (worker,) = server.worker_pids()
    before = _peak_kib(worker)
    reply = _post(server, _pieces(bomb, 65536) if chunked else bomb,
                  **{"Content-Encoding": "gzip"})
    assert reply.status_code == 413
    assert "inflated from Content-Encoding gzip" in reply.json()["detail"]
    grown = _peak_kib(worker) - before
    # the bomb inflates to 2**30 bytes; the worker may hold the limit and a few MiB more
    assert grown * 1024 < LIMIT + 16 * 1024 * 1024, f"peak grew by {grown} KiB"
    assert server.answers_good()
