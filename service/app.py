"""Flask application factory.

``create_app(config=None)`` reads the environment (``service.config``), overlays ``config``
(a mapping, used by tests), loads the op-amp catalog, registers the blueprints, the
operational hooks (``service.ops``) and the single problem+json error path.
"""

from __future__ import annotations

from flask import Flask

from service import config as config_module
from service.errors import register_error_handlers


def create_app(config=None) -> Flask:
    app = Flask(__name__, static_folder=None)
    app.config.update(config_module.from_environment())
    if config:
        app.config.update(config)
    app.config["MAX_CONTENT_LENGTH"] = app.config["GAINCHAIN_MAX_BODY_BYTES"]
    app.config["DEBUG"] = False  # never from the environment; see service.config
    app.json.sort_keys = False

    from service.catalog_state import load_catalog_into

    load_catalog_into(app)

    from service.parts_library import load_library_into

    load_library_into(app)

    from service.blueprints import (
        analyses,
        batch,
        designs,
        explorations,
        exports,
        health,
        opamps,
        parts,
        plots,
    )

    for module in (health, opamps, parts, designs, batch, explorations, analyses, exports,
                   plots):
        app.register_blueprint(module.bp)

    from service import ops

    ops.init_app(app)
    register_error_handlers(app)
    return app
