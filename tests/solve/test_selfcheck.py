"""An unproven answer never leaves: engine or certificate faults become a logged 500."""

from __future__ import annotations

import logging

import numpy as np
import pytest

from service.app import create_app
from service.network.model import Flow
from service.solve import certificate, pipeline
from service.solve.engines import Run, dense_assignment

# scipy.optimize.linear_sum_assignment docstring example: the optimum is 5.
PROBLEM = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
    "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]],
}


@pytest.fixture()
def client():
    return create_app({"TESTING": True}).test_client()


def _assert_failure_document(response) -> None:
    assert response.status_code == 500
    assert response.content_type == "application/problem+json"
    body = response.get_json()
    assert body["type"].endswith("certificate-failure")
    assert "allocation" not in body and "certificate" not in body


@pytest.mark.parametrize("duals", [None, "zeros", "huge"])
def test_suboptimal_engine_flow_is_refused(client, monkeypatch, caplog, duals):
    def worse(net):
        # the identity matching (cells 0, 4, 8) costs 4 + 0 + 2 = 6, not optimal; with or
        # without duals claimed for it, no potentials can prove it
        claimed = {None: None, "zeros": np.zeros(9), "huge": np.full(9, 1e300)}[duals]
        return "lapjv", Run(Flow(arc=np.array([0, 4, 8]), amount=np.ones(3, np.int64)),
                            claimed)

    monkeypatch.setattr(dense_assignment, "solve", worse)
    with caplog.at_level(logging.ERROR):
        response = client.post("/v1/solve", json=PROBLEM)
    _assert_failure_document(response)
    assert any("optimality" in r.getMessage() or "negative cycle" in r.getMessage()
               for r in caplog.records)


def test_wrong_potentials_are_caught_by_the_verifier(client, monkeypatch, caplog):
    real = certificate.certify

    def skewed(net, solution):
        cert = real(net, solution)
        cert.potential[0] += 1          # breaks dual feasibility or the dual objective
        return cert

    monkeypatch.setattr(pipeline, "certify", skewed)
    with caplog.at_level(logging.ERROR):
        response = client.post("/v1/solve", json=PROBLEM)
    _assert_failure_document(response)
    assert any("self-check failed" in r.getMessage() for r in caplog.records)


def test_service_answers_normally_without_faults(client):
    response = client.post("/v1/solve", json=PROBLEM)
    assert response.status_code == 200
    assert response.get_json()["objective"] == 5   # docstring example optimum
