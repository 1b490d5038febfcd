"""Signing in and out, and the one rule for every request: who may read and who may write.

Reading needs a signed-in reader, curator or admin; every state-changing request
(POST, PUT, PATCH, DELETE) needs a signed-in curator or admin, except signing in and
out themselves. CSRF tokens are checked before this rule (Flask-WTF).

A session is valid only while (1) the account exists, is enabled and still has the
session generation written into the cookie at sign-in (signing out, a new password,
a role change or disabling moves it on, which ends every copy of the cookie), (2) it
is younger than OLIBRA_SESSION_HOURS and (3) it was used within OLIBRA_IDLE_MINUTES.
Signing in starts a fresh session (a new CSRF token) and is throttled per account and
client address (webui.throttle).
"""

from __future__ import annotations

import logging
import math
import time
import unicodedata
from dataclasses import dataclass
from urllib.parse import urlsplit

from flask import (
    Blueprint,
    abort,
    current_app,
    flash,
    g,
    jsonify,
    redirect,
    render_template,
    request,
    session,
    url_for,
)
from flask_login import LoginManager, UserMixin, current_user, login_user, logout_user
from flask_wtf import FlaskForm
from wtforms import PasswordField, StringField
from wtforms.validators import DataRequired, Length

from library.catalogue import accounts
from library.catalogue.models import AuditEntry, User
from library.errors import OlibraError
from webui import db_session, web_state
from webui.throttle import SignInThrottle

blueprint = Blueprint("auth", __name__)
login_manager = LoginManager()
log = logging.getLogger(__name__)
DEFAULT_SESSION_HOURS = 8.0
DEFAULT_IDLE_MINUTES = 60.0
SEEN_EVERY_S = 60  # how often the last-use time in the cookie is refreshed
GENERATION_KEY, SIGNED_IN_KEY, SEEN_KEY = "olibra_generation", "olibra_signed_in_at", "olibra_seen_at"


def now() -> float:
    """Wall-clock seconds (one place, so tests can move time)."""
    return time.time()


class SignInThrottled(OlibraError):
    """Too many failed sign-ins: the answer is 429 with a Retry-After header."""

    def __init__(self, wait_s: float):
        self.wait_s = max(1, math.ceil(wait_s))
        super().__init__(f"too many failed sign-ins for this account from your address; wait {self.wait_s} s "
                         "before trying again (failed sign-ins are slowed down, not blocked for good)")

WRITE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
# Anyone may open these (the health probe, static files, the sign-in page and session API).
PUBLIC_ENDPOINTS = frozenset({"static", "health.health", "auth.sign_in", "api.session_state",
                              "api.sign_in"})
# State-changing requests that do not need a curator: signing in and out.
SESSION_ENDPOINTS = frozenset({"auth.sign_in", "auth.sign_out", "api.sign_in", "api.sign_out"})


@dataclass(frozen=True)
class SignedInUser(UserMixin):
    """The signed-in person as the views see it (detached from any database session)."""

    id: int
    username: str
    role: str

    @property
    def is_curator(self) -> bool:
        """May change the catalogue (curators and admins)."""
        return self.role in ("curator", "admin")

    @property
    def is_admin(self) -> bool:
        return self.role == "admin"

    def get_id(self) -> str:
        return str(self.id)

    @classmethod
    def of(cls, user: User) -> SignedInUser:
        return cls(user.id, user.username, user.role)


class SignInForm(FlaskForm):
    username = StringField("User name", validators=[DataRequired(message="Enter your user name."),
                                                    Length(max=60)])
    password = PasswordField("Password", validators=[DataRequired(message="Enter your password."),
                                                     Length(max=accounts.MAX_PASSWORD_CHARS)])


def wants_json() -> bool:
    return request.path.startswith("/api/")


def safe_next(target: str | None) -> str:
    """Only a relative path on this site is followed after signing in: it starts with one '/', holds no
    control character, space or backslash (browsers drop tabs and newlines and read '\\' as '/', which
    turns '/%09/evil.example' into '//evil.example'), and parses with no scheme and no host."""
    fallback = url_for("browse.index")
    if not target or len(target) > 2000 or not target.startswith("/") or target.startswith("//"):
        return fallback
    if any(c == "\\" or unicodedata.category(c)[0] in "CZ" for c in target):  # controls, format marks, spaces
        return fallback
    parts = urlsplit(target)
    if parts.scheme or parts.netloc or not parts.path.startswith("/") or parts.path.startswith("//"):
        return fallback
    return target


def throttle() -> SignInThrottle:
    return current_app.extensions["olibra_throttle"]


def checked_sign_in(username: str, password: str) -> User | None:
    """The user for a sign-in attempt, throttled per account and address; raises SignInThrottled or
    returns None for a wrong name or password (each failure and each back-off it starts is audited)."""
    address = request.remote_addr or "unknown"
    wait = throttle().wait_s(username, address)
    if wait > 0:
        raise SignInThrottled(wait)
    user = accounts.authenticate(db_session(), username, password)
    if user is None:
        delay = throttle().failed(username, address)
        known = accounts.find_user(db_session(), username) if username else None
        if delay:
            _audit_sign_in(known, username, address,
                           f"failed sign-in; this address now waits {delay:g} s before trying {username[:60]!r}")
        return None
    throttle().succeeded(username, address)
    return user


def _audit_sign_in(user, username: str, address: str, text: str) -> None:
    try:
        with web_state().bookkeeping.begin() as bookkeeping:
            bookkeeping.add(AuditEntry(actor=f"address {address}"[:100], action="sign-in throttled", entity="user",
                                       entity_id=user.id if user is not None else None, field="sign-in",
                                       new_value=text))
    except Exception:  # the audit must never turn a refused sign-in into an error page
        log.exception("could not audit a throttled sign-in")


def start_session(user: User) -> None:
    """A fresh session for `user`: nothing carried over from before (a new CSRF token), the account's
    current session generation, and the times that bound its lifetime."""
    session.clear()
    g.pop(current_app.config.get("WTF_CSRF_FIELD_NAME", "csrf_token"), None)
    login_user(SignedInUser.of(user))
    session.permanent = True
    session[GENERATION_KEY] = user.session_generation or 0
    session[SIGNED_IN_KEY] = session[SEEN_KEY] = int(now())


def end_session() -> None:
    """Sign out here and everywhere: the account's session generation moves on."""
    if current_user.is_authenticated:
        with web_state().bookkeeping.begin() as bookkeeping:
            accounts.sign_out_everywhere(bookkeeping, current_user.id)
    logout_user()
    session.clear()
    g.pop(current_app.config.get("WTF_CSRF_FIELD_NAME", "csrf_token"), None)


def _session_expired() -> str | None:
    config = current_app.config
    moment = now()
    signed_in, seen = session.get(SIGNED_IN_KEY), session.get(SEEN_KEY)
    if not isinstance(signed_in, int) or not isinstance(seen, int):
        return "your session is from an older olibra; sign in again"
    if moment - signed_in > float(config["OLIBRA_SESSION_HOURS"]) * 3600:
        return f"your session is older than {config['OLIBRA_SESSION_HOURS']:g} hours; sign in again"
    if moment - seen > float(config["OLIBRA_IDLE_MINUTES"]) * 60:
        return f"your session was idle for more than {config['OLIBRA_IDLE_MINUTES']:g} minutes; sign in again"
    if moment - seen > SEEN_EVERY_S:
        session[SEEN_KEY] = int(moment)
    return None


def init_app(app) -> None:
    login_manager.init_app(app)
    login_manager.session_protection = "basic"
    app.extensions["olibra_throttle"] = SignInThrottle(
        free_attempts=int(app.config["OLIBRA_SIGN_IN_FREE_ATTEMPTS"]),
        max_delay_s=float(app.config["OLIBRA_SIGN_IN_MAX_DELAY_S"]))

    @login_manager.user_loader
    def load_user(user_id: str):
        if not user_id.isdigit():
            return None
        user = db_session().get(User, int(user_id))
        expired = None
        if user is None or user.disabled or session.get(GENERATION_KEY) != user.session_generation:
            expired = "your session was ended (signed out, password or role changed, or account disabled)"
        else:
            expired = _session_expired()
        if expired:
            session.clear()
            g.olibra_session_ended = expired
            return None
        return SignedInUser.of(user)

    @login_manager.unauthorized_handler
    def unauthorized():
        ended = g.get("olibra_session_ended")
        if wants_json():
            return jsonify(error={"status": 401, "message": (
                (f"{ended}: " if ended else "") + "sign in first: POST /api/session with your user name "
                "and password")}), 401
        if request.method in WRITE_METHODS:
            flash(f"{ended[0].upper()}{ended[1:]}." if ended else "Sign in as a curator to make changes.", "notice")
            return redirect(url_for("auth.sign_in", next=request.referrer and _path_of(request.referrer)))
        flash(f"{ended[0].upper()}{ended[1:]}." if ended else "Sign in to open the catalogue.", "notice")
        return redirect(url_for("auth.sign_in", next=request.full_path.rstrip("?")))

    @app.before_request
    def require_roles():
        endpoint = request.endpoint
        if endpoint is None:  # no such page: the 404 handler answers
            return None
        if request.method in WRITE_METHODS and endpoint not in SESSION_ENDPOINTS:
            if not current_user.is_authenticated:
                return login_manager.unauthorized()
            if not current_user.is_curator:
                abort(403, description=("Your account can read the catalogue but not change it; "
                                        "ask a curator to make this change."))
            return None
        if endpoint not in PUBLIC_ENDPOINTS and not current_user.is_authenticated:
            return login_manager.unauthorized()
        return None

    @app.context_processor
    def roles():
        return {"is_curator": bool(current_user.is_authenticated and current_user.is_curator),
                "is_admin": bool(current_user.is_authenticated and current_user.is_admin)}


def _path_of(url: str) -> str | None:
    parts = urlsplit(url)
    return (parts.path + ("?" + parts.query if parts.query else "")) or None


@blueprint.route("/sign-in", methods=["GET", "POST"])
def sign_in():
    form = SignInForm()
    status = 400 if request.method == "POST" else 200
    headers = {}
    if form.validate_on_submit():
        try:
            user = checked_sign_in(form.username.data, form.password.data)
        except SignInThrottled as exc:
            form.password.errors.append(f"{str(exc)[0].upper()}{str(exc)[1:]}.")
            status, headers = 429, {"Retry-After": str(exc.wait_s)}
        else:
            if user is not None:
                start_session(user)
                flash(f"Signed in as {user.username} ({user.role}).", "success")
                return redirect(safe_next(request.args.get("next")))
            form.password.errors.append("The user name or password is not right; try again.")
    return render_template("auth/sign_in.html", form=form), status, headers


@blueprint.post("/sign-out")
def sign_out():
    end_session()
    flash("Signed out.", "success")
    return redirect(url_for("auth.sign_in"))
