"""Recomputing stale records from the web process, with progress persisted in `background_job`.

A request starts the job and returns at once; a thread of the web process runs
library.catalogue.jobs.run (which computes in worker processes and writes one
transaction per finished material) and writes the progress to the job's row,
so a progress bar survives a page reload and the JSON endpoint can be polled.
One recompute runs at a time. A server stopped mid-job leaves the finished
materials stored; `olibra serve` marks such a job interrupted when it starts
again, and a new recompute resumes with what is still stale.
"""

from __future__ import annotations

import json
import logging
import threading

from sqlalchemy import select, update
from sqlalchemy.orm import Session, sessionmaker

from library import computations
from library.catalogue import jobs
from library.catalogue.database import Catalogue
from library.catalogue.models import BackgroundJob, utc_now
from library.errors import OlibraError

log = logging.getLogger(__name__)
ACTIVE_STATES = ("queued", "running")
MAX_FAILURES_LISTED = 20
_start_lock = threading.Lock()


class JobError(OlibraError):
    """A job that cannot be started as asked."""


def recompute_plan(kinds: str, engine: str) -> computations.Plan:
    """The computation plan for 'shape', 'vibration' or 'all' with a vibration engine."""
    chosen = computations.KINDS if kinds == "all" else (kinds,)
    try:
        return computations.Plan(kinds=chosen, vibration_engine=engine)
    except ValueError as exc:
        raise JobError(str(exc)) from None


def active_job(session: Session) -> BackgroundJob | None:
    return session.scalar(select(BackgroundJob).where(BackgroundJob.state.in_(ACTIVE_STATES))
                          .order_by(BackgroundJob.id))


def start_recompute(catalogue: Catalogue, bookkeeping: sessionmaker[Session], *, kinds: str,
                    engine: str, actor: str, processes: int | None = None,
                    cluster: str | None = None, material_ids: list[int] | None = None,
                    queue_if_busy: bool = False) -> int:
    """Start computing missing or stale records; returns the job id.

    Without `material_ids` every active material is considered; with them only
    those (a material just added or imported, or "compute now" on its page).
    With `queue_if_busy` a job started while another runs waits as 'queued' and
    starts when the running one ends; otherwise JobError says to wait."""
    plan = recompute_plan(kinds, engine)
    try:
        stamps = computations.stamps(plan)
    except ImportError as exc:
        raise JobError(f"the {kinds} computation is not available in this installation ({exc}); "
                       "choose another kind or engine") from None
    description = (f"recompute {', '.join(plan.kinds)} records"
                   + (f" (vibration engine {plan.vibration_engine})" if "vibration" in plan.kinds else ""))
    if material_ids is not None:
        description = (f"compute {', '.join(plan.kinds)} records of "
                       + (f"material #{material_ids[0]}" if len(material_ids) == 1
                          else f"{len(material_ids)} materials"))
    materials = _materials_for(catalogue, stamps, material_ids)
    with _start_lock, bookkeeping.begin() as session:
        running = active_job(session)
        if running is not None and not queue_if_busy:
            raise JobError(f"job #{running.id} ({running.description}) is still running; "
                           "wait for it to finish, then start another")
        parameters = {"kinds": list(plan.kinds), "vibration_engine": plan.vibration_engine}
        if material_ids is not None:
            parameters["material_ids"] = sorted(set(material_ids))
        job = BackgroundJob(kind="recompute", description=description, state="queued",
                            total=len(materials), created_by=actor,
                            parameters_json=json.dumps(parameters))
        if not materials:
            job.state, job.started_at, job.finished_at = "finished", utc_now(), utc_now()
            job.message = "nothing to compute: every record is current"
        session.add(job)
        session.flush()
        job_id = job.id
        if running is not None or not materials:
            return job_id  # a queued job is started by the running job's thread when that one ends
        # Started inside the lock so that a second request sees this job as active.
        thread = threading.Thread(target=_run, name=f"olibra-job-{job_id}", daemon=True,
                                  args=(catalogue, bookkeeping, job_id, processes, cluster))
    thread.start()
    return job_id


def _materials_for(catalogue: Catalogue, stamps, material_ids: list[int] | None) -> list[tuple[int, str, str]]:
    materials = jobs.select_materials(catalogue, stamps, which="stale")
    if material_ids is not None:
        wanted = set(material_ids)
        materials = [m for m in materials if m[0] in wanted]
    return materials


def _start_next(catalogue, bookkeeping, processes, cluster) -> None:
    """Start the oldest queued job (one that waited for the job that just ended)."""
    with _start_lock, bookkeeping.begin() as session:
        if session.scalar(select(BackgroundJob.id).where(BackgroundJob.state == "running")) is not None:
            return
        queued = session.scalar(select(BackgroundJob.id).where(BackgroundJob.state == "queued")
                                .order_by(BackgroundJob.id))
        if queued is None:
            return
        session.execute(update(BackgroundJob).where(BackgroundJob.id == queued).values(state="running"))
    threading.Thread(target=_run, name=f"olibra-job-{queued}", daemon=True,
                     args=(catalogue, bookkeeping, queued, processes, cluster)).start()


def _update(bookkeeping: sessionmaker[Session], job_id: int, **values) -> None:
    with bookkeeping.begin() as session:
        session.execute(update(BackgroundJob).where(BackgroundJob.id == job_id).values(**values))


def _run(catalogue, bookkeeping, job_id, processes, cluster) -> None:
    try:
        _compute(catalogue, bookkeeping, job_id, processes, cluster)
    finally:
        _start_next(catalogue, bookkeeping, processes, cluster)


def _compute(catalogue, bookkeeping, job_id, processes, cluster) -> None:
    processed = 0

    def progress(step: int) -> None:
        nonlocal processed
        processed += step
        _update(bookkeeping, job_id, done=processed)

    try:
        with bookkeeping() as session:
            parameters = json.loads(session.get(BackgroundJob, job_id).parameters_json or "{}")
        plan = computations.Plan(kinds=tuple(parameters["kinds"]), vibration_engine=parameters["vibration_engine"])
        stamps = computations.stamps(plan)
        materials = _materials_for(catalogue, stamps, parameters.get("material_ids"))
        if not materials:
            _update(bookkeeping, job_id, state="finished", started_at=utc_now(), finished_at=utc_now(),
                    total=0, message="nothing to compute: every record is current")
            return
        _update(bookkeeping, job_id, state="running", started_at=utc_now(), total=len(materials))
        report = jobs.run(catalogue, stamps, computations.worker(plan), materials,
                          processes=processes, progress=progress, cluster=cluster,
                          keep_current=True)
    except OlibraError as exc:  # e.g. the configured Dask scheduler does not answer
        _update(bookkeeping, job_id, state="failed", finished_at=utc_now(), message=str(exc))
        return
    except Exception as exc:  # a bug or a crashed pool: say so on the job page, keep the server up
        log.exception("background job %s failed", job_id)
        _update(bookkeeping, job_id, state="failed", finished_at=utc_now(),
                message=f"internal error ({type(exc).__name__}); finished materials were kept. "
                        "See the server log, then start the recompute again to resume.")
        return
    lines = [report.summary()]
    lines += [f"failed: #{i} {name}: {reason}" for i, name, reason in report.failures[:MAX_FAILURES_LISTED]]
    if len(report.failures) > MAX_FAILURES_LISTED:
        lines.append(f"... and {len(report.failures) - MAX_FAILURES_LISTED} more failures")
    _update(bookkeeping, job_id, state="interrupted" if report.interrupted else "finished",
            done=report.done, failed=len(report.failures), finished_at=utc_now(), message="\n".join(lines))


def mark_abandoned(bookkeeping: sessionmaker[Session]) -> int:
    """Jobs left queued or running by a server that stopped: mark them interrupted; returns how many."""
    with bookkeeping.begin() as session:
        result = session.execute(
            update(BackgroundJob).where(BackgroundJob.state.in_(ACTIVE_STATES)).values(
                state="interrupted", finished_at=utc_now(),
                message="the server stopped during this job; finished materials were kept. "
                        "Start the recompute again to resume."))
        return result.rowcount or 0
