"""Small helpers shared by the blueprints."""

from flask import Response

from service.jsonout import dumps


def json_response(body, status: int = 200, *, field: str = "_schema") -> Response:
    """Strict JSON (no NaN/Infinity; non-finite numbers become null).

    The written reply is held to ``GAINCHAIN_MAX_REPLY_BYTES`` (422 naming ``field``) and
    the serialisation counts against the compute budget (503 past it), like the engine.
    """
    from service.ops import budget, cost

    text = dumps(body)
    budget.check("writing the reply")
    limit = cost.max_reply_bytes()
    if limit is not None and len(text) > limit:  # characters <= bytes: check the bytes
        size = len(text.encode("utf-8"))
        if size > limit:
            raise cost.reply_too_large(field, size, limit, estimated=False)
    return Response(text, status=status, mimetype="application/json")
