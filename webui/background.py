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
                    cluster: str | None = None) -> int:
    """Start recomputing the missing or stale records of every active material; returns the job id."""
    plan = recompute_plan(kinds, engine)
    try:
        stamps = computations.stamps(plan)
    except ImportError as exc:
        raise JobError(f"the {kinds} computation is not available in this installation ({exc}); "
                       "choose another kind or engine") from None
    materials = jobs.select_materials(catalogue, stamps, which="stale")
    description = (f"recompute {', '.join(plan.kinds)} records"
                   + (f" (vibration engine {plan.vibration_engine})" if "vibration" in plan.kinds else ""))
    with _start_lock, bookkeeping.begin() as session:
        running = active_job(session)
        if running is not None:
            raise JobError(f"job #{running.id} ({running.description}) is still running; "
                           "wait for it to finish, then start another")
        job = BackgroundJob(kind="recompute", description=description, state="queued",
                            total=len(materials), created_by=actor,
                            parameters_json=json.dumps({"kinds": list(plan.kinds),
                                                        "vibration_engine": plan.vibration_engine}))
        if not materials:
            job.state, job.started_at, job.finished_at = "finished", utc_now(), utc_now()
            job.message = "nothing to compute: every record is current"
        session.add(job)
        session.flush()
        job_id = job.id
        if materials:
            # Started inside the lock so that a second request sees this job as active.
            thread = threading.Thread(target=_run, name=f"olibra-job-{job_id}", daemon=True,
                                      args=(catalogue, bookkeeping, job_id, plan, stamps, materials, processes,
                                            cluster))
    if materials:
        thread.start()
    return job_id


def _update(bookkeeping: sessionmaker[Session], job_id: int, **values) -> None:
    with bookkeeping.begin() as session:
        session.execute(update(BackgroundJob).where(BackgroundJob.id == job_id).values(**values))


def _run(catalogue, bookkeeping, job_id, plan, stamps, materials, processes, cluster) -> None:
    processed = 0

    def progress(step: int) -> None:
        nonlocal processed
        processed += step
        _update(bookkeeping, job_id, done=processed)

    try:
        _update(bookkeeping, job_id, state="running", started_at=utc_now())
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
