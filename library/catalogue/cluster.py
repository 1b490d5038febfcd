"""Compute catalogue records on a Dask cluster (dask.distributed, the `cluster` extra).

The coordinator (this process) submits one task per material to an existing Dask scheduler
(tcp://host:8786) or to a LocalCluster it starts (local:N), keeps a bounded window of tasks in flight,
and writes the results as they finish, in batches, each batch one short transaction (every record of a
material or none). Workers never touch the catalogue. A worker that dies mid-task is Dask's business:
the scheduler gives the task to another worker, and since only the coordinator writes, each material
is stored once. Ctrl-C cancels the outstanding tasks and keeps the stored batches; a rerun computes
only what is still missing or stale.
"""

from __future__ import annotations

import os
import time
from contextlib import contextmanager
from typing import Callable, Iterator

from library.catalogue.database import Catalogue
from library.catalogue.jobs import BATCH_SECONDS, BATCH_SIZE, BatchWriter, JobReport, WorkerResult, guarded
from library.catalogue.records import EngineStamp
from library.errors import OlibraError

TASKS_PER_WORKER_THREAD = 4  # tasks in flight per worker thread: enough to keep workers busy


def _distributed():
    try:
        import distributed
    except ImportError:
        raise OlibraError("computing on a Dask cluster needs the cluster extra: "
                          "pip install 'olibra[cluster]'") from None
    return distributed


def parse_address(address: str) -> tuple[str, int | None]:
    """('local', N) for local:N, else ('remote', None) for a scheduler address such as tcp://host:8786."""
    address = address.strip()
    if address.startswith("local:"):
        count = address.split(":", 1)[1]
        if not count.isdigit() or int(count) < 1:
            raise OlibraError(f"cluster {address!r}: write local:N with N the number of worker processes, "
                              "e.g. local:2")
        return "local", int(count)
    if "://" not in address or not address.split("://", 1)[1]:
        raise OlibraError(f"cluster {address!r} is not a Dask scheduler address; write tcp://HOST:8786 "
                          "(or local:N to start N worker processes here)")
    return "remote", None


def _single_threaded_worker() -> None:
    """On each worker: one BLAS thread per task thread (a worker runs one task per thread)."""
    for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[variable] = "1"
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(1)
    except Exception:  # noqa: BLE001 - a tuning step; a worker without it still computes correctly
        pass


@contextmanager
def connect(address: str) -> Iterator:
    """A dask.distributed Client for `address`; local:N starts (and stops) a LocalCluster of N processes."""
    distributed = _distributed()
    kind, count = parse_address(address)
    if kind == "local":
        with distributed.LocalCluster(n_workers=count, threads_per_worker=1, processes=True,
                                      dashboard_address=":0") as local, distributed.Client(local) as client:
            yield client
        return
    try:
        client = distributed.Client(address, timeout="15s")
    except (OSError, TimeoutError) as exc:
        raise OlibraError(f"no Dask scheduler answers at {address} ({exc}); start one with `dask scheduler` "
                          "and its workers with `dask worker ADDRESS`, or check the address") from None
    try:
        yield client
    finally:
        client.close()


def run(catalogue: Catalogue, stamps: list[EngineStamp], worker: Callable[[str], WorkerResult],
        materials: list[tuple[int, str, str]], *, address: str,
        progress: Callable[[int], None] | None = None, batch_size: int = BATCH_SIZE,
        batch_seconds: float = BATCH_SECONDS, keep_current: bool = False) -> JobReport:
    """Compute `worker(smiles)` for each material on the Dask cluster at `address` and store the records
    (`keep_current`: see `jobs.store_batch`)."""
    report = JobReport(planned=len(materials))
    if not materials:
        return report
    distributed = _distributed()
    started = time.perf_counter()
    with connect(address) as client:
        client.run(_single_threaded_worker)
        report.setup_s = time.perf_counter() - started
        threads = max(1, sum(client.nthreads().values()))
        window = TASKS_PER_WORKER_THREAD * threads
        queue = list(reversed(materials))
        in_flight: dict = {}
        finished = distributed.as_completed()
        writer = BatchWriter(catalogue, stamps, report, keep_current=keep_current, progress=progress,
                             size=batch_size, seconds=batch_seconds)

        def submit_more() -> None:
            while queue and len(in_flight) < window:
                material_id, name, smiles = queue.pop()
                # a key per material and run: Dask never mixes this task with another coordinator's
                future = client.submit(guarded, worker, smiles, pure=False,
                                       key=f"olibra-material-{material_id}-{os.getpid()}-{time.time_ns()}")
                in_flight[future] = (material_id, name, smiles)
                finished.add(future)

        try:
            submit_more()
            for future in finished:
                material_id, name, smiles = in_flight.pop(future)
                try:
                    result, error, elapsed = future.result()
                except distributed.KilledWorker:
                    result, error = None, ("the workers computing it died again and again (out of memory "
                                           "or an engine crash); retire it or compute it alone")
                except Exception as exc:  # noqa: BLE001 - a task the cluster could not run, per material
                    result, error = None, f"the cluster could not run it: {type(exc).__name__}: {exc}"
                future.release()
                if error is not None:
                    report.failures.append((material_id, name, error))
                    if progress:
                        progress(1)
                else:
                    writer.add(material_id, smiles, result, elapsed)
                writer.flush_if_due()
                submit_more()
            writer.flush()
        except KeyboardInterrupt:
            report.interrupted = True
            client.cancel(list(in_flight))
            writer.flush()  # the results already received are whole: keep them
        finally:
            report.elapsed_s = time.perf_counter() - started
    return report
