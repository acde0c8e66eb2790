"""Fixtures of the exporter tests; the circuits themselves live in ``export_circuits``."""

from __future__ import annotations

import pytest
from export_circuits import CIRCUITS

from service.engine.model.circuit import Circuit


@pytest.fixture(params=sorted(CIRCUITS))
def circuit(request) -> Circuit:
    return CIRCUITS[request.param]()
