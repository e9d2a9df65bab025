"""``certimatch audit check --url URL``: the log a running service serves, read over its
API and checked here, as an export would be.

The checkpoint comes from ``GET /v1/log/checkpoint``; the decisions, in log order, from
``GET /v1/decisions`` pages up to its size; each record with its problem, answer and
inclusion proof from ``GET /v1/decisions/{id}``. The records are laid out as the lines of
an export (service/records/audit.py) with leaves recomputed here, so the same check runs
on them; and each record's inclusion proof is checked against the checkpoint served with
it (signed by the same key), which names a record the service's stored tree disagrees
with.
"""

from __future__ import annotations

import argparse
from typing import Any
from urllib.parse import quote

import requests

from service.cli.credentials import resolve_token
from service.cli.talk import EXIT_ERROR, EXIT_UNAVAILABLE, CliError, _reason, shown_url
from service.records.audit import EXPORT_NAME
from service.records.canonical import CanonicalizationError, canonical_json
from service.records.merkle import verify_inclusion
from service.records.model import Decision
from service.records.reads import MAX_PAGE
from service.records.signing import verify_checkpoint

__all__ = ["remote_lines"]


class _Service:
    """GETs to the service with the bearer token; failures as CliError (4: transient)."""

    def __init__(self, args: argparse.Namespace) -> None:
        self.base = args.url.rstrip("/")
        self.timeout = args.timeout
        token = resolve_token(args)
        self.session = requests.Session()
        if token is not None:
            self.session.headers["Authorization"] = f"Bearer {token.reveal()}"

    def get(self, path: str, params: dict[str, Any] | None = None,
            allow_error: bool = False) -> tuple[int, Any]:
        where = shown_url(self.base)
        try:
            r = self.session.get(self.base + path, params=params, timeout=self.timeout)
        except (requests.ConnectionError, requests.Timeout) as e:
            raise CliError(f"cannot reach {where}: {_reason(e)}", EXIT_UNAVAILABLE) from None
        except requests.RequestException as e:
            raise CliError(f"cannot reach {where}: {_reason(e)}") from None
        try:
            doc = r.json()
        except ValueError:
            doc = None
        if r.status_code != 200 and not (allow_error and isinstance(doc, dict)):
            detail = doc.get("detail") if isinstance(doc, dict) else r.text[:200]
            code = EXIT_UNAVAILABLE if r.status_code in (502, 503, 504) else EXIT_ERROR
            raise CliError(f"GET {path} answered {r.status_code}: {detail}", code)
        return r.status_code, doc


def _decisions(service: _Service, size: int) -> list[dict[str, Any]]:
    """The decisions below ``size``, in the order the service pages them."""
    found: list[dict[str, Any]] = []
    after: str | None = None
    while True:
        params: dict[str, Any] = {"limit": MAX_PAGE}
        if after is not None:
            params["after"] = after
        _, page = service.get("/v1/decisions", params)
        rows = page.get("decisions") if isinstance(page, dict) else None
        if not isinstance(rows, list):
            raise CliError("GET /v1/decisions did not answer a page of decisions")
        for row in rows:
            index = row.get("log_index") if isinstance(row, dict) else None
            if isinstance(index, int) and index >= size:
                return found                 # appended after the checkpoint was taken
            found.append(row)
        after = page.get("next")
        if not rows or not isinstance(after, str):
            return found


def _line(doc: dict[str, Any]) -> dict[str, Any]:
    """A record as an export line: its leaf recomputed (the stored one is not served)."""
    decision = Decision.from_dict(doc.get("decision"))
    problem, answer = doc.get("problem"), doc.get("answer")
    return {"decision": decision.to_dict(), "leaf_sha256": decision.leaf_hash().hex(),
            # Bodies absent: digest mode or removed by retention (the API does not say
            # which); one absent without the other is named by the check.
            "mode": "digest" if problem is None and answer is None else "full",
            "pruned_at": None, "problem": problem, "answer": answer}


def _included(doc: dict[str, Any], decision: Decision, key: str) -> str | None:
    """None when the record's inclusion proof leads to a checkpoint signed by ``key``."""
    proof, signed = doc.get("inclusion_proof"), doc.get("checkpoint")
    if not isinstance(proof, dict) or not isinstance(signed, dict):
        return "no inclusion proof or checkpoint was served with it"
    problem = verify_checkpoint(signed, key)
    if problem is not None:
        return f"the checkpoint served with it is not valid: {problem}"
    try:
        hashes = [bytes.fromhex(h) for h in proof["hashes"]]
        holds = (proof["log_index"] == decision.log_index and verify_inclusion(
            decision.leaf_hash(), proof["log_index"], proof["tree_size"], hashes,
            bytes.fromhex(signed["root_sha256"])))
    except (KeyError, TypeError, ValueError):
        holds = False
    return None if holds else ("its inclusion proof does not lead to the signed root: the "
                               "record or the stored tree was changed")


def remote_lines(args: argparse.Namespace) -> tuple[list[bytes], list[str]]:
    """The export lines of the log at ``args.url``, and findings about single records
    (inclusion proofs, records the service could not serve)."""
    service = _Service(args)
    _, checkpoint = service.get("/v1/log/checkpoint")
    size = checkpoint.get("size") if isinstance(checkpoint, dict) else None
    if not isinstance(size, int):
        raise CliError("GET /v1/log/checkpoint did not answer a checkpoint")
    key = args.public_key or checkpoint.get("public_key")
    lines = [canonical_json({"export": EXPORT_NAME, "version": 1, "start": 0,
                             "frontier": []})]
    findings: list[str] = []
    for row in _decisions(service, size):
        where = f"record {row.get('log_index')} (id {row.get('id')})"
        status, doc = service.get(f"/v1/decisions/{quote(str(row.get('id')), safe='')}",
                                  allow_error=True)
        if status != 200:
            findings.append(f"{where}: the service cannot serve it ({status}): "
                            f"{doc.get('detail')}")
            continue
        try:
            line = _line(doc)
            lines.append(canonical_json(line))
        except (ValueError, TypeError, CanonicalizationError) as e:
            findings.append(f"{where}: not a decision record ({e})")
            continue
        if line["decision"] != row:
            findings.append(f"{where}: the page and the record disagree on its fields")
        failed = _included(doc, Decision.from_dict(line["decision"]), key)
        if failed:
            findings.append(f"{where}: {failed}")
    lines.append(canonical_json({"checkpoint": checkpoint}))
    return lines, findings
