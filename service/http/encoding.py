"""Content codings: compressed request bodies in, gzip answers out (RFC 9110, 8.4 and 12.5.3).

A request body may come with ``Content-Encoding: gzip`` (RFC 1952) or ``deflate`` (the
zlib format of RFC 1950; a raw deflate stream, which some clients send under that name,
is taken too). It is inflated while it is read, a step of at most :data:`_STEP` bytes at a
time, and refused with 413 as soon as the inflated bytes pass ``MAX_BODY_BYTES``: a
compression bomb (a gigabyte of zeros is a megabyte of gzip) costs at most the limit in
memory and the time to inflate that much, never the whole. Any other coding is a 415
naming ``Content-Encoding``, with ``Accept-Encoding`` listing the codings taken.

An answer is sent gzip-compressed when the request's ``Accept-Encoding`` takes gzip and
the answer is at least :data:`MIN_GZIP_BYTES` long (below that the gzip header and the
client's work cost more than the bytes saved). Every answer that could be compressed says
``Vary: Accept-Encoding``, so that a cache keeps the two representations apart.
"""

from __future__ import annotations

import zlib
from collections.abc import Iterable, Iterator
from typing import Any

from flask import Flask, Response, request
from werkzeug.exceptions import BadRequest, HTTPException, RequestEntityTooLarge

from service.errors import MalformedBody, UnsupportedMediaType

#: zlib window bits of each request coding taken: gzip's header and trailer, or zlib's.
_CODINGS = {"gzip": 16 + zlib.MAX_WBITS, "x-gzip": 16 + zlib.MAX_WBITS,
            "deflate": zlib.MAX_WBITS}
#: What a 415 for an unknown coding offers instead (RFC 9110, 12.5.3).
ACCEPTED_CODINGS = "gzip, deflate"
#: Compressed bytes read from the connection at a time.
_READ = 64 * 1024
#: Most inflated bytes made from them per step: memory stays within the limit plus this.
_STEP = 1024 * 1024
#: Answers shorter than this are sent as they are.
MIN_GZIP_BYTES = 1024
#: gzip level of answers: 1 makes a JSON answer about a fifth of its size at several times
#: the speed of the default 6, whose smaller output saves less time than it costs on a LAN.
GZIP_LEVEL = 1
#: Media types worth compressing: text all of them.
_TEXT = ("application/json", "application/problem+json", "text/html", "image/svg+xml",
         "text/plain", "application/yaml", "text/csv")


class InflatedTooLarge(RequestEntityTooLarge):
    """The body grew past the limit while it was inflated."""


def request_coding() -> str | None:
    """The coding of this request's body, None when it has none (or ``identity``); a 415
    for a coding not taken, or for more than one (a body compressed twice is refused)."""
    header = request.headers.get("Content-Encoding", "")
    codings = [c.strip().lower() for c in header.split(",")]
    codings = [c for c in codings if c and c != "identity"]
    if not codings:
        return None
    if len(codings) == 1 and codings[0] in _CODINGS:
        return codings[0]
    raise UnsupportedMediaType(
        f"Content-Encoding {header.strip()!r} is not taken: send the body as it is, or "
        f"compressed once with Content-Encoding {ACCEPTED_CODINGS.replace(', ', ' or ')}",
        headers={"Accept-Encoding": ACCEPTED_CODINGS})


def compressed_chunks(limit: int) -> Iterator[bytes]:
    """The body as it arrives, at most ``limit`` bytes of it (413 past that)."""
    if request.content_length is not None:
        stream: Any = request.stream        # werkzeug's 413 when Content-Length says more
        counted = False
    else:
        stream = request.environ["wsgi.input"]   # chunked: count the bytes here
        counted = True
    seen = 0
    while True:
        try:
            chunk = stream.read(_READ)
        except HTTPException:
            raise
        except Exception as e:
            # gunicorn's own parse errors for a broken chunked transfer: the client's fault
            raise BadRequest(f"the body could not be read: {e}") from None
        if not chunk:
            return
        seen += len(chunk)
        if counted and seen > limit:
            raise RequestEntityTooLarge()
        yield chunk


def inflate(chunks: Iterable[bytes], coding: str, limit: int) -> bytes:
    """The inflated body of ``chunks`` in ``coding``; 413 (InflatedTooLarge) as soon as
    it passes ``limit`` bytes, 400 ``malformed-json`` when the bytes are not one whole
    stream of ``coding`` (a body that cannot be read as JSON).

    A gzip body may hold several members one after another (RFC 1952, 2.2); they are one
    body, as gunzip reads them.
    """
    wbits = _CODINGS[coding]
    unpack = zlib.decompressobj(wbits)
    parts: list[bytes] = []
    total = 0
    started = False
    for chunk in chunks:
        data = chunk
        while True:
            try:
                out = unpack.decompress(data, _STEP)
            except zlib.error as e:
                if coding == "deflate" and not started:
                    # a raw deflate stream without zlib's header: read it as such
                    wbits = -zlib.MAX_WBITS
                    unpack = zlib.decompressobj(wbits)
                    started = True
                    continue
                raise MalformedBody(f"the body is not valid {coding} data: {e}") from None
            started = True
            total += len(out)
            if total > limit:
                raise InflatedTooLarge(
                    f"the body inflated from Content-Encoding {coding} is larger than "
                    f"{limit} bytes (setting MAX_BODY_BYTES); it was not inflated further")
            parts.append(out)
            data = unpack.unconsumed_tail
            if unpack.eof:
                data = unpack.unused_data
                if not data:
                    break
                if wbits != _CODINGS["gzip"]:
                    raise MalformedBody(f"the body has bytes after the end of its {coding} "
                                        "stream")
                unpack = zlib.decompressobj(wbits)   # the next gzip member
                continue
            if not data and len(out) < _STEP:
                break                       # this chunk is used up, nothing is pending
    if not unpack.eof:
        raise MalformedBody(f"the body ends before the end of its {coding} stream")
    return b"".join(parts)


def _accepts_gzip() -> bool:
    return request.accept_encodings.quality("gzip") > 0


def compress_answer(response: Response) -> Response:
    """``response`` gzip-compressed when the client takes it and it is worth it."""
    if (response.direct_passthrough or response.is_streamed
            or "Content-Encoding" in response.headers or response.mimetype not in _TEXT):
        return response
    response.vary.add("Accept-Encoding")
    if not _accepts_gzip():
        return response
    body = response.get_data()
    if len(body) < MIN_GZIP_BYTES:
        return response
    packer = zlib.compressobj(GZIP_LEVEL, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    response.set_data(packer.compress(body) + packer.flush())
    response.headers["Content-Encoding"] = "gzip"
    return response


def init_app(app: Flask) -> None:
    """Compress every answer of ``app`` that is worth it (errors too)."""
    app.after_request(compress_answer)
