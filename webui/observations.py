"""The observation data sets page: every stored set with its counts; curators import (with the
per-row report of the command line), replace and delete sets."""

from __future__ import annotations

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from library.catalogue import observations
from library.catalogue.models import ObservationSet
from library.errors import OlibraError
from webui import begin_write, db_session, write_transaction
from webui.errors import user_message
from webui.forms import ObservationForm, RemoveForm

blueprint = Blueprint("observations", __name__)


def _page(form: ObservationForm, report=None, status: int = 200):
    sets = observations.set_summaries(db_session())
    return render_template("observations/index.html", form=form, report=report, sets=sets,
                           remove_form=RemoveForm()), status


@blueprint.get("/observations")
def index():
    return _page(ObservationForm())


@blueprint.post("/observations")
def import_set():
    form = ObservationForm()
    if not form.validate():
        return _page(form, status=400)
    session = begin_write()
    try:
        report = observations.import_observations(
            session, form.file.data.read(), form.file.data.filename or "upload", set_name=form.set_name.data,
            kind=form.kind.data, source=form.source.data, unit=(form.unit.data or "").strip() or None,
            description=(form.description.data or "").strip() or None, replace=form.replace.data,
            actor=current_user.username)
        if report.stored:
            session.commit()
        else:
            session.rollback()
    except OlibraError as exc:
        session.rollback()
        form.file.errors = [*form.file.errors, user_message(exc)]
        return _page(form, status=400)
    except BaseException:
        session.rollback()
        raise
    return _page(form, report, 200 if report.stored else 422)


@blueprint.post("/observations/<int:set_id>/delete")
def delete_set(set_id: int):
    if not RemoveForm().validate():
        abort(400, description="The form expired; reload the page and try again.")
    stored = db_session().get(ObservationSet, set_id)
    if stored is None:
        abort(404, description="That data set no longer exists.")
    name = stored.name
    try:
        with write_transaction() as session:
            removed = observations.delete_set(session, name, actor=current_user.username)
    except OlibraError as exc:
        flash(user_message(exc), "error")
    else:
        flash(f"Deleted data set {name!r} ({removed} values).", "success")
    return redirect(url_for("observations.index"))
