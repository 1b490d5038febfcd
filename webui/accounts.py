"""The accounts page (admins only): change a user's role, disable, enable or remove them.

Each change ends that user's open sessions (library.catalogue.accounts moves the session
generation on). Admins cannot change their own account here, so the last admin cannot lock
everyone out by a slip; `olibra user ...` does everything.
"""

from __future__ import annotations

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from library.catalogue import accounts
from library.catalogue.models import USER_ROLES
from library.errors import OlibraError
from webui import web_state
from webui.errors import user_message

blueprint = Blueprint("accounts", __name__)
ACTIONS = ("role", "disable", "enable", "remove")


def _admins_only() -> None:
    if not (current_user.is_authenticated and current_user.is_admin):
        abort(403, description="Only admins can manage accounts; ask one, or use `olibra user` on the server.")


@blueprint.route("/accounts", methods=["GET", "POST"])
def index():
    _admins_only()
    error = None
    if request.method == "POST":
        username = (request.form.get("username") or "").strip()
        action = request.form.get("action") or ""
        try:
            if action not in ACTIONS:
                raise OlibraError(f"unknown change {action[:20]!r}; choose one of {', '.join(ACTIONS)}")
            if username.lower() == current_user.username.lower():
                raise OlibraError("you cannot change your own account here; use `olibra user` on the server")
            actor = current_user.username
            with web_state().bookkeeping.begin() as session:
                if action == "role":
                    accounts.set_role(session, username, request.form.get("role") or "", actor=actor)
                elif action == "remove":
                    accounts.remove_user(session, username, actor=actor)
                else:
                    accounts.set_disabled(session, username, action == "disable", actor=actor)
        except OlibraError as exc:
            error = user_message(exc)
        else:
            flash(f"{username}: {action} done; their open sessions were ended.", "success")
            return redirect(url_for("accounts.index"))
    with web_state().bookkeeping() as session:
        users = accounts.list_users(session)
    return render_template("accounts/index.html", users=users, roles=USER_ROLES, error=error), 400 if error else 200
