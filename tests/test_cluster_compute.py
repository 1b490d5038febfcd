"""Computing records on a Dask cluster (dask.distributed, loopback only): the same records as the local
runner, each material written once even when a worker is SIGKILLed mid-run, on SQLite and PostgreSQL.

The reference is the local job runner (worker processes of one machine) and the Dask scheduler's own
rescheduling of the tasks of a dead worker."""

import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import func, select

from library import computations
from catalogue_helpers import draft, interrupt_compute
from library.catalogue import curation, jobs, transfer
from library.catalogue.cluster import parse_address
from library.catalogue.database import initialize
from library.catalogue.models import ComputedArray, ComputedRecord
from library.catalogue.records import load_records
from library.errors import OlibraError
from library.seed_catalog import MATERIALS_FILE

pytest.importorskip("distributed", reason="the cluster extra (dask.distributed) is not installed")


def seed_catalogue(url, count):
    """A catalogue holding the first `count` materials of the shipped seed catalogue."""
    catalogue = initialize(url)
    with catalogue.transaction() as session:
        for row in transfer.read_rows(MATERIALS_FILE)[:count]:
            curation.add_material(session, draft(row.fields["smiles"], row.fields["name"]))
    return catalogue


def stored(catalogue):
    """{(material id, kind): (engine version, parameter hash, {array name: values})} of every record."""
    out = {}
    with catalogue.reading() as session:
        for stamp in computations.stamps(computations.Plan()):
            for material_id, record in load_records(session, stamp.kind, stamp.engine_name).items():
                out[(material_id, stamp.kind)] = (record.engine_version, record.parameter_hash, record.arrays)
    return out


def record_counts(catalogue):
    """(records, highest record id, distinct array counts per record kind)."""
    with catalogue.reading() as session:
        records = session.scalar(select(func.count()).select_from(ComputedRecord))
        highest = session.scalar(select(func.max(ComputedRecord.id)))
        sizes = session.execute(select(ComputedRecord.kind, func.count())
                                .join(ComputedArray).group_by(ComputedRecord.id, ComputedRecord.kind)).all()
    per_kind = {}
    for kind, size in sizes:
        per_kind.setdefault(kind, set()).add(size)
    return records, highest, per_kind


def test_a_local_dask_cluster_stores_the_records_the_local_runner_stores(tmp_path):
    count = 6
    plan = computations.Plan()
    stamps = computations.stamps(plan)
    local = seed_catalogue(f"sqlite:///{tmp_path / 'local.sqlite'}", count)
    on_cluster = seed_catalogue(f"sqlite:///{tmp_path / 'cluster.sqlite'}", count)
    first = jobs.run(local, stamps, computations.worker(plan), jobs.select_materials(local, stamps), processes=2)
    second = jobs.run(on_cluster, stamps, computations.worker(plan), jobs.select_materials(on_cluster, stamps),
                      cluster="local:2")
    assert first.done == second.done == count and not first.failures and not second.failures
    expected, found = stored(local), stored(on_cluster)
    assert expected.keys() == found.keys() and len(found) == len(computations.KINDS) * count
    for key, (version, parameter_hash, arrays) in expected.items():
        assert found[key][:2] == (version, parameter_hash)  # the same stamps
        assert found[key][2].keys() == arrays.keys()
        for name, values in arrays.items():
            # stored as float32: equal to float32 precision (same code, same seeds, other processes)
            np.testing.assert_allclose(found[key][2][name], values, rtol=1e-6, atol=1e-6, err_msg=f"{key} {name}")
    # a rerun finds nothing to compute
    assert jobs.select_materials(on_cluster, stamps) == []
    local.dispose()
    on_cluster.dispose()


@pytest.mark.parametrize("address", ["local", "local:0", "local:x", "127.0.0.1:8786", "tcp://"])
def test_a_bad_cluster_address_is_refused_with_what_to_write(address):
    with pytest.raises(OlibraError, match="local:N|tcp://HOST:8786"):
        parse_address(address)


def free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def dask_command():
    command = Path(sys.executable).with_name("dask")
    return str(command) if command.exists() else shutil.which("dask")


@pytest.fixture
def dask_scheduler_and_workers(tmp_path):
    """A `dask scheduler` and two `dask worker` processes (one thread each, no nanny: a killed worker
    stays dead) on 127.0.0.1; yields (address, worker processes)."""
    command = dask_command()
    assert command, "the dask command of the cluster extra is not installed"
    port = free_port()
    address = f"tcp://127.0.0.1:{port}"
    logs = tmp_path / "dask-logs"
    logs.mkdir()
    environment = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    processes = [subprocess.Popen([command, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                                   "--dashboard-address", ":0", "--no-show"], env=environment,
                                  stdout=subprocess.DEVNULL, stderr=open(logs / "scheduler.log", "w"))]
    workers = [subprocess.Popen([command, "worker", address, "--nthreads", "1", "--no-nanny",
                                 "--host", "127.0.0.1", "--dashboard-address", ":0", "--death-timeout", "60"],
                                env=environment, stdout=subprocess.DEVNULL,
                                stderr=open(logs / f"worker-{n}.log", "w")) for n in range(2)]
    processes += workers
    from distributed import Client

    with Client(address, timeout="60s") as client:
        client.wait_for_workers(2, timeout=120)
    try:
        yield address, workers
    finally:
        for process in reversed(processes):
            if process.poll() is None:
                process.terminate()
        for process in processes:
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()


@pytest.mark.slow
def test_a_worker_killed_mid_run_leaves_every_material_computed_once(catalogue_url, dask_scheduler_and_workers):
    address, workers = dask_scheduler_and_workers
    count = 16
    catalogue = seed_catalogue(catalogue_url, count)
    environment = dict(os.environ, PYTHONUNBUFFERED="1")
    coordinator = subprocess.Popen([sys.executable, "-m", "library.cli", "--db", catalogue_url, "compute", "all",
                                    "--cluster", address, "--quiet"],
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=environment)
    from distributed import Client

    victim = workers[0]
    with Client(address, timeout="60s") as watcher:
        # mid-run: both workers hold olibra tasks (one running, more queued on each)
        deadline = time.monotonic() + 300
        while time.monotonic() < deadline and coordinator.poll() is None:
            processing = watcher.processing()
            busy = [w for w, tasks in processing.items() if any(str(t).startswith("olibra-material") for t in tasks)]
            if len(busy) == 2:
                break
            time.sleep(0.05)
        assert coordinator.poll() is None, coordinator.communicate()
        # the worker process of the first `dask worker` command (the command may run it as a child)
        pids = watcher.run(lambda: (os.getpid(), os.getppid()))
        victim_address, victim_pid = next((a, pid) for a, (pid, parent) in pids.items() if victim.pid in (pid, parent))
        assert any(str(t).startswith("olibra-material") for t in watcher.processing()[victim_address])
        os.kill(victim_pid, signal.SIGKILL)
        deadline = time.monotonic() + 60
        while len(watcher.scheduler_info()["workers"]) > 1 and time.monotonic() < deadline:
            time.sleep(0.1)
        assert victim_address not in watcher.scheduler_info()["workers"]  # the scheduler saw it die
    out, err = coordinator.communicate(timeout=600)
    assert coordinator.returncode == 0, (out, err)
    assert f"{count} of {count} material(s) computed" in out and "Traceback" not in err
    records, highest, per_kind = record_counts(catalogue)
    # every material has one record per kind, written once (no record was replaced: ids 1..2N)
    assert records == highest == len(computations.KINDS) * count
    # every record is whole: each kind has one fixed set of arrays
    assert set(per_kind) == set(computations.KINDS) and all(len(sizes) == 1 for sizes in per_kind.values())
    stamps = computations.stamps(computations.Plan())
    assert jobs.select_materials(catalogue, stamps) == []
    catalogue.dispose()


@pytest.mark.slow
def test_ctrl_c_on_the_coordinator_keeps_whole_records_and_a_rerun_resumes(tmp_path):
    count = 16
    url = f"sqlite:///{tmp_path / 'interrupted.sqlite'}"
    catalogue = seed_catalogue(url, count)
    command = interrupt_compute(url, ["--cluster", "local:2"], lambda: record_counts(catalogue)[0], 2)
    records, _, per_kind = record_counts(catalogue)
    assert len(computations.KINDS) <= records < len(computations.KINDS) * count and records % len(computations.KINDS) == 0  # whole materials: every record or none
    assert all(len(sizes) == 1 for sizes in per_kind.values())  # every stored record is whole
    again = subprocess.run(command, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert f"{count - records // len(computations.KINDS)} of {count - records // len(computations.KINDS)} material(s) computed" in again.stdout
    assert record_counts(catalogue)[0] == len(computations.KINDS) * count
    catalogue.dispose()


@pytest.mark.slow
def test_two_coordinators_computing_one_catalogue_at_once_write_each_record_once(catalogue_url,
                                                                             dask_scheduler_and_workers):
    address, _ = dask_scheduler_and_workers
    count = 12
    catalogue = seed_catalogue(catalogue_url, count)
    # both compute the missing records of the whole catalogue at once, on one cluster
    coordinators = [subprocess.Popen([sys.executable, "-m", "library.cli", "--db", catalogue_url, "compute", "all",
                                      "--cluster", address, "--quiet"], stdout=subprocess.PIPE,
                                     stderr=subprocess.PIPE, text=True) for _ in range(2)]
    outputs = [process.communicate(timeout=600) for process in coordinators]
    for process, (out, err) in zip(coordinators, outputs):
        assert process.returncode == 0 and "Traceback" not in err, (out, err)
    stored_by_each = [int(out.split(" of ")[0].split()[-1]) for out, _ in outputs]
    assert sum(stored_by_each) == count  # each material is stored by one of the two
    records, highest, per_kind = record_counts(catalogue)
    assert records == highest == len(computations.KINDS) * count  # one record per material and kind, none replaced
    assert all(len(sizes) == 1 for sizes in per_kind.values())
    catalogue.dispose()
