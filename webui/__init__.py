"""olibra's web interface: a Flask application factory (thin: no chemistry lives in a view)."""

from __future__ import annotations

import os
from typing import Any, Mapping

from flask import Flask, g

from library.catalogue.database import Catalogue, resolve_url


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the app; configuration from `config`, else OLIBRA_DB / OLIBRA_SECRET_KEY in the environment."""
    app = Flask(__name__)
    app.config.update(
        OLIBRA_DB=resolve_url(os.environ.get("OLIBRA_DB")),
        SECRET_KEY=os.environ.get("OLIBRA_SECRET_KEY") or os.urandom(32),
        MAX_CONTENT_LENGTH=20 * 1024 * 1024,
    )
    if config:
        app.config.update(config)

    catalogue_holder: dict[str, Catalogue] = {}

    def catalogue() -> Catalogue:
        if "catalogue" not in catalogue_holder:
            catalogue_holder["catalogue"] = Catalogue(app.config["OLIBRA_DB"])
        return catalogue_holder["catalogue"]

    app.extensions["olibra_catalogue"] = catalogue

    @app.teardown_appcontext
    def close_session(_exc) -> None:
        session = g.pop("db_session", None)
        if session is not None:
            session.close()

    from webui.health import blueprint as health_blueprint

    app.register_blueprint(health_blueprint)
    return app


def db_session():
    """The request's database session, opened on first use and closed at teardown."""
    from flask import current_app

    if "db_session" not in g:
        g.db_session = current_app.extensions["olibra_catalogue"]().sessions()
    return g.db_session
