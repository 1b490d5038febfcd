"""Background jobs: start a recompute of stale records, follow its progress."""

from __future__ import annotations

from flask import Blueprint, abort, current_app, flash, redirect, render_template, url_for
from flask_login import current_user
from sqlalchemy import select

from library import computations
from library.catalogue.models import BackgroundJob, Material
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


def start(kinds: str, engine: str, *, material_ids: list[int] | None = None) -> int:
    """Start a recompute; for `material_ids` (new or chosen materials) it waits behind a running job."""
    state = web_state()
    return background.start_recompute(state.catalogue, state.bookkeeping, kinds=kinds, engine=engine,
                                      actor=current_user.username,
                                      processes=current_app.config.get("OLIBRA_JOB_PROCESSES"),
                                      cluster=current_app.config.get("OLIBRA_JOB_CLUSTER"),
                                      material_ids=material_ids, queue_if_busy=material_ids is not None)


def queue_new_materials(material_ids: list[int]) -> int | None:
    """Queue the shape and vibration records of materials just added or imported (unless the app is
    configured not to, OLIBRA_COMPUTE_ON_ADD=False); returns the job id, or None with a notice."""
    if not material_ids or not current_app.config.get("OLIBRA_COMPUTE_ON_ADD", True):
        return None
    try:
        return start("all", computations.Plan().vibration_engine, material_ids=material_ids)
    except OlibraError as exc:
        flash(f"The records were not queued: {exc}; start them with \"Compute now\" or on the jobs page.",
              "error")
        return None


@blueprint.post("/materials/<int:material_id>/compute")
def compute_material(material_id: int):
    """Compute one material's missing or stale records now (curators; the write guard refuses readers)."""
    if db_session().get(Material, material_id) is None:
        abort(404, description=f"There is no material #{material_id} to compute.")
    try:
        job_id = start("all", computations.Plan().vibration_engine, material_ids=[material_id])
    except OlibraError as exc:
        flash(f"The computation was not started: {exc}", "error")
    else:
        flash(f"Job #{job_id} computes this material's records.", "success")
    return redirect(url_for("browse.material", material_id=material_id))


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
