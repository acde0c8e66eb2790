"""Design identity: a content hash of the circuit, the same across replicas and restarts.

``design_id(circuit)`` is the SHA-256 (FIPS 180-4) hex digest of

    ``b"gainchain-design/<SERVICE_MAJOR_VERSION>\\n" + canonical circuit JSON``

where the canonical JSON is the circuit's JSON form (README "The circuit model") with
sorted keys, no spaces, every number written as ``repr(float(x))`` (Python's shortest
round-trip spelling, so ``10000`` and ``10000.0`` are the same value) and non-ASCII text
escaped. Same circuit, same id; any part value, op-amp figure or topology change gives a
new id. The service's major version (the ``/v1`` of the API) is hashed in, so a later
major version that changes what a circuit means also changes every id.
"""

from __future__ import annotations

import hashlib
import json
import math

from service.engine.model.circuit import Circuit

#: The API's major version (the ``/v1`` path prefix); part of every design id.
SERVICE_MAJOR_VERSION = 1


def _canonical(value):
    """Numbers as fixed strings (``repr(float)``), containers walked, other scalars as is."""
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int | float):
        x = float(value)
        return repr(x) if math.isfinite(x) else None
    if isinstance(value, dict):
        return {str(k): _canonical(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_canonical(v) for v in value]
    raise TypeError(f"not a JSON value: {type(value).__name__}")


def canonical_circuit_json(circuit: Circuit | dict) -> str:
    """The canonical JSON text of a circuit (or of its JSON form)."""
    data = circuit.to_dict() if isinstance(circuit, Circuit) else circuit
    return json.dumps(_canonical(data), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=True)


def design_id(circuit: Circuit | dict) -> str:
    """64 hex digits: SHA-256 of the version line and the canonical circuit JSON."""
    blob = f"gainchain-design/{SERVICE_MAJOR_VERSION}\n{canonical_circuit_json(circuit)}"
    return hashlib.sha256(blob.encode("ascii")).hexdigest()
