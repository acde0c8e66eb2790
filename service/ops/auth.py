"""Optional API-key authentication: ``Authorization: Bearer <key>``.

Keys come from ``GAINCHAIN_API_KEYS`` (comma-separated) and/or the file named by
``GAINCHAIN_API_KEYS_FILE`` (one key per line; blank lines and lines starting with ``#``
are ignored). With neither set, authentication is off. The keys are read once when the
app is created: restart (or let gunicorn recycle the workers) to rotate them.

The check runs in a ``before_request`` hook, i.e. before any view reads the body, so a
caller without a valid key gets 401 even when the body is oversized. Keys are compared
as SHA-256 digests with :func:`hmac.compare_digest`, against every configured key, so
neither the length nor the position of a match shows in the timing.
"""

from __future__ import annotations

import hashlib
import hmac
from pathlib import Path

# Paths that answer without a key: probes, the scraper and the published contract.
# /docs renders the same public contract for browsers (which cannot add a Bearer header).
EXEMPT_PATHS = frozenset({"/healthz", "/readyz", "/metrics", "/openapi.json", "/docs"})

CHALLENGE = 'Bearer realm="gainchain"'


def load_keys(config) -> tuple[bytes, ...]:
    """SHA-256 digests of every configured key (empty tuple: authentication off).

    :raise RuntimeError: the key file cannot be read or holds no key (fail closed).
    """
    keys = [k for k in config.get("GAINCHAIN_API_KEYS") or () if k]
    path = config.get("GAINCHAIN_API_KEYS_FILE")
    if path:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise RuntimeError(f"GAINCHAIN_API_KEYS_FILE: cannot read {path!r}: {exc}") from exc
        from_file = [line.strip() for line in text.splitlines()]
        from_file = [line for line in from_file if line and not line.startswith("#")]
        if not from_file:
            raise RuntimeError(f"GAINCHAIN_API_KEYS_FILE: {path!r} holds no key")
        keys.extend(from_file)
    return tuple(_digest(k) for k in dict.fromkeys(keys))


def _digest(key: str) -> bytes:
    return hashlib.sha256(key.encode("utf-8")).digest()


def bearer_token(authorization: str | None) -> str | None:
    """The token of an ``Authorization: Bearer <token>`` header, else None."""
    if not authorization:
        return None
    scheme, _, token = authorization.strip().partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        return None
    return token.strip()


def key_matches(token: str, digests: tuple[bytes, ...]) -> bool:
    """Constant-time membership test (every digest is compared, no early exit)."""
    candidate = _digest(token)
    found = False
    for digest in digests:
        found |= hmac.compare_digest(candidate, digest)
    return found


def check_request(request, digests: tuple[bytes, ...]) -> None:
    """Raise a 401 problem unless the request may pass.

    :raise ApiProblem 401: missing or unknown key, with a ``WWW-Authenticate`` challenge.
    """
    from service.errors import ApiProblem

    if not digests or request.path in EXEMPT_PATHS:
        return
    token = bearer_token(request.headers.get("Authorization"))
    if token is None:
        raise ApiProblem(401, "Unauthorized",
                         "This service needs an API key: send 'Authorization: Bearer <key>'.",
                         type_="unauthorized", headers={"WWW-Authenticate": CHALLENGE})
    if not key_matches(token, digests):
        raise ApiProblem(401, "Unauthorized", "The API key is not valid.",
                         type_="unauthorized",
                         headers={"WWW-Authenticate": CHALLENGE + ', error="invalid_token"'})
