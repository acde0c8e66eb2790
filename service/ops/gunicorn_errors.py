"""gunicorn's own error replies (a request line, header or chunk it cannot read) as
problem+json with the security headers, instead of its HTML page.

gunicorn answers these before the app sees the request (400, 414, 431, 501...), so the
app's error path cannot. :func:`install` replaces ``gunicorn.util.write_error``, which
every gunicorn worker calls for them; ``docker/gunicorn.conf.py`` installs it in the
master before the workers fork. Behind the documented front (nginx, ``docker/nginx/``)
these requests are refused by the front first, with the same kind of body.
"""

from __future__ import annotations

import json


def problem_bytes(status: int, reason: str, message: str) -> bytes:
    """A complete HTTP/1.1 response carrying an RFC 9457 problem document."""
    # Imported here: the gunicorn configuration installs this module before it sets up
    # Prometheus' multiprocess mode, and service.ops imports prometheus-client.
    from service.errors import PROBLEM_BASE, PROBLEM_MIME
    from service.ops import DEFAULT_CSP, SECURITY_HEADERS

    slug = "-".join(reason.lower().split()) or "error"
    detail = "The request could not be read" + (f": {message}" if message else "") + "."
    body = json.dumps({"type": PROBLEM_BASE + slug, "title": reason, "status": status,
                       "detail": detail[:500]}, ensure_ascii=True, separators=(",", ":"))
    headers = [f"HTTP/1.1 {status} {reason}", "Connection: close",
               f"Content-Type: {PROBLEM_MIME}", f"Content-Length: {len(body)}",
               "Cache-Control: no-store", f"Content-Security-Policy: {DEFAULT_CSP}"]
    headers += [f"{name}: {value}" for name, value in SECURITY_HEADERS.items()]
    return ("\r\n".join(headers) + "\r\n\r\n" + body).encode("latin-1")


def write_problem(sock, status_int, reason, mesg) -> None:
    """Drop-in for ``gunicorn.util.write_error(sock, status_int, reason, mesg)``."""
    from gunicorn import util

    util.write_nonblock(sock, problem_bytes(int(status_int), str(reason),
                                            str(mesg or "")))


def install() -> None:
    from gunicorn import util

    util.write_error = write_problem
