"""Finding ngspice for the SPICE cross-checks (tests/exporters and tests/analyses).

Locally a missing simulator skips those checks with a reason; under CI (``CI=true``) it
fails them instead, because .ci/run installs ngspice and a skip there would hide a
missing install step.
"""

from __future__ import annotations

import os
import shutil

import pytest

NGSPICE = shutil.which("ngspice")


def require_ngspice() -> str:
    """The ngspice path; skip when absent, but fail under CI=true."""
    if NGSPICE is None:
        if os.environ.get("CI") == "true":
            pytest.fail("ngspice is required under CI=true (apt-get install ngspice)")
        pytest.skip("ngspice not installed: SPICE cross-checks skipped locally")
    return NGSPICE
