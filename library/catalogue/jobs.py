"""Long computations over the catalogue, in worker processes.

Workers compute; only the parent process writes. Finished materials are
committed in short transactions of up to BATCH_SIZE materials or BATCH_SECONDS
(every record of a material or none), so an interrupted run (Ctrl-C) keeps the
finished materials, leaves no half-written rows, and the next run resumes with
the materials still missing or stale.
"""

from __future__ import annotations

import multiprocessing
import os
import signal
import threading
import time
from collections import deque
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Callable, Iterable

from sqlalchemy import select

from library.catalogue.curation import find_material
from library.catalogue.database import Catalogue
from library.catalogue.models import ComputedRecord, Material
from library.catalogue.records import EngineStamp, is_current, record_state, save_records
from library.errors import OlibraError

# Worker result: for each kind, (arrays, summary); or an error message.
WorkerResult = dict[str, tuple[dict, dict]]
BATCH_SIZE = 50  # materials per write transaction
BATCH_SECONDS = 2.0  # ... or whatever finished within this long, whichever comes first
LOCAL_BATCH_SECONDS = 0.5  # the same for the local worker processes


@dataclass
class JobReport:
    planned: int = 0
    done: int = 0
    failures: list[tuple[int, str, str]] = field(default_factory=list)  # (material id, name, reason)
    elapsed_s: float = 0.0
    write_s: float = 0.0  # wall time the parent spent storing records
    setup_s: float = 0.0  # of elapsed_s: connecting to a cluster (or starting a local one)
    interrupted: bool = False

    @property
    def rate_per_s(self) -> float:
        return self.done / self.elapsed_s if self.elapsed_s > 0 else 0.0

    def summary(self) -> str:
        text = (f"{self.done} of {self.planned} material(s) computed in {self.elapsed_s:.1f} s"
                f" ({self.rate_per_s:.2f} per second), {len(self.failures)} failed")
        if self.interrupted:
            text += "; interrupted: finished materials were saved, run the command again to resume"
        return text


PARENT_CHECK_S = 1.0


def _worker_setup(parent_pid: int | None = None) -> None:
    """Workers leave Ctrl-C to the parent, use one thread each (the parent runs one worker per core),
    and die with their parent: the kernel sends SIGKILL when it dies (Linux PR_SET_PDEATHSIG), and a
    watchdog thread checks every second that the parent is still there (every platform)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[variable] = "1"
    if parent_pid is None:
        return
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent_pid:  # the parent died before we got here
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(PARENT_CHECK_S)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="olibra-parent-watch", daemon=True).start()


def guarded(worker: Callable[[str], WorkerResult], smiles: str):
    """Run the worker, turning a refusal (ValueError) into a message instead of an exception."""
    started = time.perf_counter()
    try:
        result = worker(smiles)
    except ValueError as exc:
        return None, str(exc) or type(exc).__name__, time.perf_counter() - started
    except Exception as exc:  # a bug or an engine crash: report it per material, keep going
        return None, f"internal error {type(exc).__name__}: {exc}", time.perf_counter() - started
    return result, None, time.perf_counter() - started


def select_materials(catalogue: Catalogue, stamps: list[EngineStamp], *, which: str = "stale",
                     keys: Iterable[str] = ()) -> list[tuple[int, str, str]]:
    """(id, name, smiles) of the materials to compute: 'stale' (missing or out of date), 'all', or `keys`."""
    with catalogue.reading() as session:
        keys = list(keys)
        if keys:
            chosen = {find_material(session, key).id for key in keys}
        elif which == "all":
            chosen = set(session.scalars(select(Material.id).where(Material.status == "active")))
        elif which == "stale":
            chosen = set()
            for stamp in stamps:
                chosen |= {i for i, state in record_state(session, stamp).items() if state != "current"}
        else:
            raise ValueError(f"unknown selection {which!r}; use 'stale' or 'all'")
        rows = session.execute(select(Material.id, Material.preferred_name, Material.smiles)
                               .where(Material.id.in_(chosen)).order_by(Material.id)).all()
    return [tuple(r) for r in rows]


def store_batch(catalogue: Catalogue, stamps: list[EngineStamp],
                items: list[tuple[int, str, WorkerResult, float]], *, keep_current: bool = False) -> int:
    """Store finished materials, (id, smiles, result, seconds) each, in one short transaction: every
    record of a material or none. A material deleted or edited while it was computed is left for the
    next run. Each material's row is locked first (FOR UPDATE on PostgreSQL; SQLite's write transaction
    holds the whole file), so two coordinators storing one material take turns. With `keep_current`
    (a run over the missing and stale records), a material whose records are current by now (another
    coordinator stored them meanwhile) is left as it is: it is written once. Returns how many materials
    were stored."""
    entries = []
    with catalogue.transaction() as session:
        # one locking read, in id order: two coordinators storing overlapping batches cannot deadlock
        locked = {m.id: m for m in session.scalars(select(Material).where(
            Material.id.in_(sorted({item[0] for item in items}))).order_by(Material.id).with_for_update())}
        done: set[int] = set()
        for material_id, smiles, result, elapsed_s in items:
            material = locked.get(material_id)
            if material is None or material.smiles != smiles or material_id in done:
                continue
            if keep_current and _all_current(session, material, stamps):
                continue
            done.add(material_id)
            entries.extend((material, stamp, *result[stamp.kind], elapsed_s) for stamp in stamps)
        if entries:
            save_records(session, entries)
    return len(done)


class BatchWriter:
    """Finished materials gathered and stored by `store_batch` in short transactions: when `size` are
    waiting or `seconds` have passed since the last write; `flush()` stores what is waiting."""

    def __init__(self, catalogue: Catalogue, stamps: list[EngineStamp], report: JobReport, *,
                 keep_current: bool = False, progress: Callable[[int], None] | None = None,
                 size: int = BATCH_SIZE, seconds: float = BATCH_SECONDS):
        self.catalogue, self.stamps, self.report = catalogue, stamps, report
        self.keep_current, self.progress, self.size, self.seconds = keep_current, progress, size, seconds
        self.waiting: list[tuple[int, str, WorkerResult, float]] = []
        self.last_write = time.monotonic()

    def add(self, material_id: int, smiles: str, result: WorkerResult, elapsed_s: float) -> None:
        self.waiting.append((material_id, smiles, result, elapsed_s))
        self.flush_if_due()

    def flush_if_due(self) -> None:
        if len(self.waiting) >= self.size or time.monotonic() - self.last_write >= self.seconds:
            self.flush()

    def flush(self) -> None:
        if self.waiting:
            started = time.perf_counter()
            self.report.done += store_batch(self.catalogue, self.stamps, self.waiting,
                                            keep_current=self.keep_current)
            self.report.write_s += time.perf_counter() - started
            if self.progress:
                self.progress(len(self.waiting))
            self.waiting = []
        self.last_write = time.monotonic()


def _all_current(session, material: Material, stamps: list[EngineStamp]) -> bool:
    found = {(r.kind, r.engine_name): r for r in session.scalars(select(ComputedRecord).where(
        ComputedRecord.material_id == material.id))}
    return all(is_current(found.get((s.kind, s.engine_name)), s, material.inchikey) for s in stamps)


def run(catalogue: Catalogue, stamps: list[EngineStamp], worker: Callable[[str], WorkerResult],
        materials: list[tuple[int, str, str]], *, processes: int | None = None,
        progress: Callable[[int], None] | None = None, cluster: str | None = None,
        keep_current: bool = False) -> JobReport:
    """Compute `worker(smiles)` for each material in worker processes and store the records.

    With `cluster` (a Dask scheduler address such as tcp://host:8786, or local:N), the materials are
    computed on that Dask cluster instead (`library.catalogue.cluster`). `keep_current`: the materials
    were chosen as missing or stale, so one another writer made current meanwhile is not written again."""
    if cluster:
        from library.catalogue import cluster as cluster_jobs

        return cluster_jobs.run(catalogue, stamps, worker, materials, address=cluster, progress=progress,
                                keep_current=keep_current)
    report = JobReport(planned=len(materials))
    started = time.perf_counter()
    if not materials:
        return report
    processes = max(1, min(processes or os.cpu_count() or 1, len(materials)))
    context = multiprocessing.get_context("spawn")
    executor = ProcessPoolExecutor(max_workers=processes, mp_context=context, initializer=_worker_setup,
                                   initargs=(os.getpid(),))
    pending: dict[Future, tuple[int, str, str]] = {}
    queue = deque(materials)
    # on one machine materials finish a few per second: write at least twice a second, so the progress bar
    # and an interrupted run lose little
    writer = BatchWriter(catalogue, stamps, report, keep_current=keep_current, progress=progress,
                         seconds=LOCAL_BATCH_SECONDS)
    try:
        while queue or pending:
            while queue and len(pending) < 2 * processes:
                item = queue.popleft()
                pending[executor.submit(guarded, worker, item[2])] = item
            finished, _ = wait(pending, return_when=FIRST_COMPLETED, timeout=writer.seconds)
            for future in finished:
                material_id, name, smiles = pending.pop(future)
                try:
                    result, error, elapsed = future.result()
                except BrokenProcessPool:
                    writer.flush()
                    raise OlibraError(
                        f"a worker process died while computing #{material_id} {name} (out of memory or an "
                        "engine crash); finished materials were saved; rerun to resume, or skip this material "
                        "by retiring it") from None
                if error is not None:
                    report.failures.append((material_id, name, error))
                    if progress:
                        progress(1)
                else:
                    writer.add(material_id, smiles, result, elapsed)
            writer.flush_if_due()
        writer.flush()
        executor.shutdown(wait=True)
    except KeyboardInterrupt:
        report.interrupted = True
        writer.flush()  # the results already received are whole: keep them
        for future in pending:
            future.cancel()
        for process in list(getattr(executor, "_processes", {}).values()):
            process.terminate()
        executor.shutdown(wait=False, cancel_futures=True)
    except BaseException:
        executor.shutdown(wait=False, cancel_futures=True)
        raise
    finally:
        report.elapsed_s = time.perf_counter() - started
    return report
