"""Signing in and out, and the one rule for every request: who may read and who may write.

Reading needs a signed-in reader or curator; every state-changing request
(POST, PUT, PATCH, DELETE) needs a signed-in curator, except signing in and
out themselves. CSRF tokens are checked before this rule (Flask-WTF).
"""

from __future__ import annotations

from dataclasses import dataclass

from flask import Blueprint, abort, flash, jsonify, redirect, render_template, request, url_for
from flask_login import LoginManager, UserMixin, current_user, login_user, logout_user
from flask_wtf import FlaskForm
from wtforms import PasswordField, StringField
from wtforms.validators import DataRequired, Length

from library.catalogue import accounts
from library.catalogue.models import User
from webui import db_session

blueprint = Blueprint("auth", __name__)
login_manager = LoginManager()

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
        return self.role == "curator"

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
    """Only a path on this site (never another host) is followed after signing in."""
    if target and target.startswith("/") and not target.startswith("//") and "\\" not in target:
        return target
    return url_for("browse.index")


def init_app(app) -> None:
    login_manager.init_app(app)
    login_manager.session_protection = "basic"

    @login_manager.user_loader
    def load_user(user_id: str):
        if not user_id.isdigit():
            return None
        user = db_session().get(User, int(user_id))
        return SignedInUser.of(user) if user is not None else None

    @login_manager.unauthorized_handler
    def unauthorized():
        if wants_json():
            return jsonify(error={"status": 401, "message": (
                "sign in first: POST /api/session with your user name and password")}), 401
        if request.method in WRITE_METHODS:
            flash("Sign in as a curator to make changes.", "notice")
            return redirect(url_for("auth.sign_in", next=request.referrer and _path_of(request.referrer)))
        flash("Sign in to open the catalogue.", "notice")
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
        return {"is_curator": bool(current_user.is_authenticated and current_user.is_curator)}


def _path_of(url: str) -> str | None:
    from urllib.parse import urlsplit

    parts = urlsplit(url)
    return (parts.path + ("?" + parts.query if parts.query else "")) or None


@blueprint.route("/sign-in", methods=["GET", "POST"])
def sign_in():
    form = SignInForm()
    if form.validate_on_submit():
        user = accounts.authenticate(db_session(), form.username.data, form.password.data)
        if user is not None:
            login_user(SignedInUser.of(user))
            flash(f"Signed in as {user.username} ({user.role}).", "success")
            return redirect(safe_next(request.args.get("next")))
        form.password.errors.append("The user name or password is not right; try again.")
    status = 400 if request.method == "POST" else 200
    return render_template("auth/sign_in.html", form=form), status


@blueprint.post("/sign-out")
def sign_out():
    logout_user()
    flash("Signed out.", "success")
    return redirect(url_for("auth.sign_in"))
