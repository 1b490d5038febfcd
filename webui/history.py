"""The catalogue-wide change history: every audited change, filtered by user, dates and material."""

from __future__ import annotations

from flask import Blueprint, render_template, request

from library.catalogue import curation
from library.errors import OlibraError
from webui import db_session
from webui.errors import user_message

blueprint = Blueprint("history", __name__)
FILTERS = ("user", "since", "until", "material")


@blueprint.get("/history")
def index():
    """Readers and curators alike: the history is part of reading the catalogue."""
    chosen = {key: (request.args.get(key) or "").strip()[:200] for key in FILTERS}
    page_text = request.args.get("page", "1")
    error, found = None, None
    try:
        page = int(page_text) if page_text.isdigit() else 0
        found = curation.change_history(db_session(), actor=chosen["user"], since=chosen["since"],
                                        until=chosen["until"], material=chosen["material"], page=page)
    except OlibraError as exc:
        error = user_message(exc)
    return render_template("history/index.html", chosen=chosen, found=found, error=error), 400 if error else 200
