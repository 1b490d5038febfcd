"""Background jobs: start a recompute of stale records, follow its progress."""

from __future__ import annotations

from flask import Blueprint, abort, current_app, flash, redirect, render_template, url_for
from flask_login import current_user
from sqlalchemy import select

from library import computations
from library.catalogue.models import BackgroundJob
from library.catalogue.records import record_state
from library.errors import OlibraError
from webui import background, db_session, queries, web_state
from webui.forms import RecomputeForm

blueprint = Blueprint("jobs", __name__)


def record_counts() -> list[dict]:
    """Current, stale and missing record counts per kind and engine available here."""
    session = db_session()
    rows = []
    for (kind, engine_name), stamp in sorted(computations.current_stamps().items()):
        states = list(record_state(session, stamp).values())
        rows.append({"kind": kind, "engine": engine_name, "current": states.count("current"),
                     "stale": states.count("stale"), "missing": states.count("missing")})
    return rows


def start(kinds: str, engine: str) -> int:
    state = web_state()
    return background.start_recompute(state.catalogue, state.bookkeeping, kinds=kinds, engine=engine,
                                      actor=current_user.username,
                                      processes=current_app.config.get("OLIBRA_JOB_PROCESSES"),
                                      cluster=current_app.config.get("OLIBRA_JOB_CLUSTER"))


@blueprint.get("/jobs")
def index():
    recent = db_session().scalars(select(BackgroundJob).order_by(BackgroundJob.id.desc()).limit(20)).all()
    return render_template("jobs/index.html", form=RecomputeForm(), jobs=recent, counts=record_counts())


@blueprint.post("/jobs/recompute")
def recompute():
    form = RecomputeForm()
    if not form.validate():
        problems = "; ".join(e for errors in form.errors.values() for e in errors)
        flash(f"The recompute was not started: {problems}.", "error")
        return redirect(url_for("jobs.index"))
    try:
        job_id = start(form.kinds.data, form.engine.data)
    except OlibraError as exc:
        flash(f"The recompute was not started: {exc}", "error")
        return redirect(url_for("jobs.index"))
    return redirect(url_for("jobs.job", job_id=job_id))


@blueprint.get("/jobs/<int:job_id>")
def job(job_id: int):
    found = db_session().get(BackgroundJob, job_id)
    if found is None:
        abort(404, description=f"There is no job #{job_id}; see the list of recent jobs.")
    return render_template("jobs/job.html", job=found, job_data=queries.job_json(found))
