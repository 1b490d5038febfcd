"""olibra's web interface: a Flask application factory (thin: no chemistry lives in a view).

Blueprints, one per area: `auth` (sign-in), `browse` (catalogue browser and
material pages), `curation` (add, edit, import, vocabulary), `jobs`
(background recompute), `substitutes`, `compare`, `disagreements` and
`scorecard` (the search pages), `api` and `search_api` (JSON under /api) and
`health`. The similarity index lives in memory (`IndexCache`), rebuilt when the
catalogue revision moves.

Every state-changing request (POST, PUT, PATCH, DELETE) needs a valid CSRF
token and, apart from signing in and out, a signed-in curator; reading needs a
signed-in reader or curator. See README.md, "Web interface and JSON API".
"""

from __future__ import annotations

import datetime as dt
import os
import threading
from collections import OrderedDict
from contextlib import contextmanager
from typing import Any, Callable, Iterator, Mapping

from flask import Flask, current_app, g, has_request_context
from flask_wtf.csrf import CSRFProtect
from sqlalchemy.orm import Session, sessionmaker

from library.catalogue.accounts import bookkeeping_sessions
from library.catalogue.database import WRITE_OPTION, Catalogue, resolve_url
from library.errors import OlibraError

SECRET_KEY_VARIABLE = "OLIBRA_SECRET_KEY"
DEFAULT_MAX_UPLOAD_BYTES = 20 * 1024 * 1024
CONTENT_SECURITY_POLICY = ("default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
                           "object-src 'none'; base-uri 'self'; form-action 'self'; frame-ancestors 'none'")

csrf = CSRFProtect()


class SecretKeyMissing(OlibraError):
    """The app would sign session cookies with no key."""


class IndexCache:
    """The catalogue's similarity index held in memory, plus small results computed from it.

    Each use reads the catalogue revision (one cheap query) and rebuilds the index
    when it moved; `catalogue_index.load_index` builds from one consistent snapshot and the
    new index replaces the old one in a single assignment, so a request sees
    either the old or the new catalogue, never a mixture. One thread rebuilds;
    the others wait for it. Results memoized with `memo` (disagreement lists,
    scorecards, form choices) are dropped with the index they came from.
    """

    MEMO_SIZE = 32

    def __init__(self, state: "WebState", *, vibration_engine: str = "mmff", cache_dir: str | None = None):
        self._state = state
        self.vibration_engine = vibration_engine
        self._cache_dir = cache_dir
        self._build_lock = threading.Lock()
        self._memo_lock = threading.Lock()
        self._current: tuple[Any, int] | None = None  # (CatalogueIndex, catalogue revision it was built from)
        self._memo: OrderedDict = OrderedDict()

    def get(self):
        """(CatalogueIndex, revision) for the catalogue as it is now; SearchError when nothing is indexed.

        Within one request the first answer is kept, so a page is built from one index throughout.
        """
        if has_request_context() and "olibra_index" in g:
            return g.olibra_index
        current = self._fresh()
        if has_request_context():
            g.olibra_index = current
        return current

    def _fresh(self):
        from pathlib import Path

        from library.search.catalogue_index import load_index

        revision = self._state.catalogue.revision()
        current = self._current
        if current is not None and current[1] == revision:
            return current
        with self._build_lock:
            current = self._current
            if current is not None and current[1] == revision:
                return current
            index = load_index(self._state.catalogue, vibration_engine=self.vibration_engine,
                               cache_dir=Path(self._cache_dir) if self._cache_dir else None)
            built_from = index.revision.catalogue_revision
            with self._memo_lock:
                self._memo.clear()
                self._current = (index, built_from)
            return self._current

    def memo(self, key: tuple, compute: Callable[[], Any]):
        """compute() once per key and index revision (a small LRU); the key must hold every input."""
        _, revision = self.get()
        full_key = (revision, *key)
        with self._memo_lock:
            if full_key in self._memo:
                self._memo.move_to_end(full_key)
                return self._memo[full_key]
        value = compute()
        with self._memo_lock:
            if self._current is not None and self._current[1] == revision:
                self._memo[full_key] = value
                while len(self._memo) > self.MEMO_SIZE:
                    self._memo.popitem(last=False)
        return value


class WebState:
    """The catalogue behind one app, opened on first use (so a missing schema becomes an error page)."""

    def __init__(self, url: str, *, vibration_engine: str = "mmff", index_cache_dir: str | None = None):
        self.url = url
        self._catalogue: Catalogue | None = None
        self._bookkeeping: sessionmaker[Session] | None = None
        self.index_cache = IndexCache(self, vibration_engine=vibration_engine, cache_dir=index_cache_dir)

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
        OLIBRA_COMPUTE_ON_ADD=True,  # queue shape and vibration records of materials added or imported
        OLIBRA_JOB_CLUSTER=os.environ.get("OLIBRA_CLUSTER") or None,  # a Dask scheduler for recomputes
        OLIBRA_VIBRATION_ENGINE="mmff",  # vibration records the search pages use
        OLIBRA_INDEX_CACHE_DIR=None,  # folder of the on-disk index cache (default: the user cache folder)
        # A session ends this long after signing in, or after this long unused.
        OLIBRA_SESSION_HOURS=float(os.environ.get("OLIBRA_SESSION_HOURS") or 8),
        OLIBRA_IDLE_MINUTES=float(os.environ.get("OLIBRA_IDLE_MINUTES") or 60),
        OLIBRA_SIGN_IN_FREE_ATTEMPTS=5,  # failed sign-ins per account and address before the back-off starts
        OLIBRA_SIGN_IN_MAX_DELAY_S=900,  # longest back-off
        OLIBRA_HEAVY_WORKERS=None,  # heavy searches running at once (default: cores - 1, at least 1)
        OLIBRA_HEAVY_QUEUE=3,  # heavy searches waiting for a place; more get 503 at once
        OLIBRA_REQUEST_TIME_LIMIT_S=60,  # longest a request waits for a heavy result
    )
    if config:
        app.config.update(config)
    app.config["PERMANENT_SESSION_LIFETIME"] = dt.timedelta(hours=float(app.config["OLIBRA_SESSION_HOURS"]))
    if not app.config.get("SECRET_KEY"):
        if not app.testing:
            raise SecretKeyMissing(
                f"no secret key for signing sessions: set {SECRET_KEY_VARIABLE} to a long random "
                "string (e.g. `python -c 'import secrets; print(secrets.token_hex(32))'`)")
        app.config["SECRET_KEY"] = os.urandom(32)

    app.extensions["olibra"] = WebState(app.config["OLIBRA_DB"],
                                        vibration_engine=app.config["OLIBRA_VIBRATION_ENGINE"],
                                        index_cache_dir=app.config["OLIBRA_INDEX_CACHE_DIR"])
    csrf.init_app(app)
    from webui.heavy import HeavyPool

    app.extensions["olibra_heavy"] = HeavyPool(workers=app.config["OLIBRA_HEAVY_WORKERS"],
                                               queue=int(app.config["OLIBRA_HEAVY_QUEUE"]),
                                               time_limit_s=float(app.config["OLIBRA_REQUEST_TIME_LIMIT_S"]))

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

    from webui import (
        accounts,
        api,
        auth,
        browse,
        compare,
        curation,
        disagreements,
        errors,
        health,
        history,
        jobs,
        observations,
        pair_classes,
        presets,
        scorecard,
        search_api,
        substitutes,
    )

    auth.init_app(app)
    errors.init_app(app)
    for module in (auth, accounts, browse, curation, jobs, history, substitutes, compare, disagreements, scorecard,
                   observations, presets, pair_classes, api, search_api, health):
        app.register_blueprint(module.blueprint)
    return app


def web_state() -> WebState:
    return current_app.extensions["olibra"]


def search_index():
    """(CatalogueIndex, catalogue revision) of the app's in-memory index, current with the catalogue."""
    return web_state().index_cache.get()


def db_session() -> Session:
    """The request's database session, opened on first use and closed at teardown."""
    if "db_session" not in g:
        g.db_session = web_state().catalogue.sessions()
    return g.db_session


def begin_write() -> Session:
    """The request's session in a fresh write transaction (BEGIN IMMEDIATE on SQLite).

    Whatever the request read so far (its user, the form's material) was read in a deferred
    transaction; that one is ended first, so the write waits for other writers instead of failing
    on a stale snapshot. Objects loaded before are reloaded on next use, inside the write."""
    session = db_session()
    if session.in_transaction():
        session.rollback()
    session.connection(execution_options={WRITE_OPTION: True})
    return session


@contextmanager
def write_transaction() -> Iterator[Session]:
    """The request's session as one write transaction: committed on success, rolled back on any error."""
    session = begin_write()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
