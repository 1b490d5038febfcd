"""olibra's web interface: a Flask application factory (thin: no chemistry lives in a view).

Blueprints, one per area: `auth` (sign-in), `browse` (catalogue browser and
material pages), `curation` (add, edit, import, vocabulary), `jobs`
(background recompute), `api` (JSON under /api) and `health`.

Every state-changing request (POST, PUT, PATCH, DELETE) needs a valid CSRF
token and, apart from signing in and out, a signed-in curator; reading needs a
signed-in reader or curator. See README.md, "Web interface and JSON API".
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from typing import Any, Iterator, Mapping

from flask import Flask, current_app, g
from flask_wtf.csrf import CSRFProtect
from sqlalchemy.orm import Session, sessionmaker

from library.catalogue.accounts import bookkeeping_sessions
from library.catalogue.database import Catalogue, resolve_url
from library.errors import OlibraError

SECRET_KEY_VARIABLE = "OLIBRA_SECRET_KEY"
DEFAULT_MAX_UPLOAD_BYTES = 20 * 1024 * 1024
CONTENT_SECURITY_POLICY = ("default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
                           "object-src 'none'; base-uri 'self'; form-action 'self'; frame-ancestors 'none'")

csrf = CSRFProtect()


class SecretKeyMissing(OlibraError):
    """The app would sign session cookies with no key."""


class WebState:
    """The catalogue behind one app, opened on first use (so a missing schema becomes an error page)."""

    def __init__(self, url: str):
        self.url = url
        self._catalogue: Catalogue | None = None
        self._bookkeeping: sessionmaker[Session] | None = None

    @property
    def catalogue(self) -> Catalogue:
        if self._catalogue is None:
            self._catalogue = Catalogue(self.url)
        return self._catalogue

    @property
    def bookkeeping(self) -> sessionmaker[Session]:
        if self._bookkeeping is None:
            self._bookkeeping = bookkeeping_sessions(self.catalogue.engine)
        return self._bookkeeping


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the app; configuration from `config`, else OLIBRA_DB / OLIBRA_SECRET_KEY in the environment.

    Outside testing a secret key is required (config SECRET_KEY or
    $OLIBRA_SECRET_KEY); `olibra serve` makes a random one for a server on the
    loopback interface and says so.
    """
    app = Flask(__name__)
    app.config.update(
        OLIBRA_DB=resolve_url(os.environ.get("OLIBRA_DB")),
        SECRET_KEY=os.environ.get(SECRET_KEY_VARIABLE) or None,
        MAX_CONTENT_LENGTH=DEFAULT_MAX_UPLOAD_BYTES,
        SESSION_COOKIE_HTTPONLY=True,
        SESSION_COOKIE_SAMESITE="Lax",
        WTF_CSRF_TIME_LIMIT=None,  # the token lives as long as the signed session
        OLIBRA_PAGE_SIZE=50,
        OLIBRA_JOB_PROCESSES=None,  # worker processes for a recompute (default: one per core)
    )
    if config:
        app.config.update(config)
    if not app.config.get("SECRET_KEY"):
        if not app.testing:
            raise SecretKeyMissing(
                f"no secret key for signing sessions: set {SECRET_KEY_VARIABLE} to a long random "
                "string (e.g. `python -c 'import secrets; print(secrets.token_hex(32))'`)")
        app.config["SECRET_KEY"] = os.urandom(32)

    app.extensions["olibra"] = WebState(app.config["OLIBRA_DB"])
    csrf.init_app(app)

    @app.teardown_appcontext
    def close_session(_exc) -> None:
        session = g.pop("db_session", None)
        if session is not None:
            session.close()

    @app.after_request
    def security_headers(response):
        response.headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("X-Frame-Options", "DENY")
        response.headers.setdefault("Referrer-Policy", "same-origin")
        return response

    from webui import api, auth, browse, curation, errors, health, jobs

    auth.init_app(app)
    errors.init_app(app)
    for module in (auth, browse, curation, jobs, api, health):
        app.register_blueprint(module.blueprint)
    return app


def web_state() -> WebState:
    return current_app.extensions["olibra"]


def db_session() -> Session:
    """The request's database session, opened on first use and closed at teardown."""
    if "db_session" not in g:
        g.db_session = web_state().catalogue.sessions()
    return g.db_session


@contextmanager
def write_transaction() -> Iterator[Session]:
    """The request's session as one unit of work: committed on success, rolled back on any error."""
    session = db_session()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
