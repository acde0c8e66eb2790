"""gainchain: a stateless JSON service that designs cascades of op-amp gain stages.

This file stays free of Flask imports so that ``service.engine`` can be imported (by
exporters, batch jobs, tests) without pulling in the web stack.  The factory lives in
``service.app``; ``service.create_app`` forwards to it.
"""


def create_app(config=None):
    """Build the Flask application (see :func:`service.app.create_app`)."""
    from service.app import create_app as _create_app

    return _create_app(config)
