"""Worker processes die with their parent: `kill -9` of `olibra compute` leaves no worker behind.

Reproduction: after `kill -9` of `compute` (or of the server during a recompute) idle worker processes
remained. The test starts a real `olibra compute` on seed materials, waits until its spawned workers
exist, kills the parent with SIGKILL and checks that every worker is gone within a bounded wait.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from library.cli import main
from library.seed_catalog import MATERIALS_FILE

SEED_FILE = MATERIALS_FILE


def children_of(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                found.append(int(entry.name))
    return found


def alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc (Linux) to list child processes")
def test_kill_9_of_compute_leaves_no_worker(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'catalogue.sqlite'}"
    assert main(["--db", url, "init"]) == 0
    assert main(["--db", url, "import", str(SEED_FILE), "--quiet"]) in (0, 1)
    capsys.readouterr()
    parent = subprocess.Popen([sys.executable, "-m", "library.cli", "--db", url, "compute", "all", "--processes",
                               "2", "--quiet"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        workers: list[int] = []
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and parent.poll() is None:
            # spawn start method: the resource tracker plus the pool's workers are the children
            workers = [p for p in children_of(parent.pid)
                       if "multiprocessing" in Path(f"/proc/{p}/cmdline").read_bytes().decode(errors="replace")
                       and "spawn_main" in Path(f"/proc/{p}/cmdline").read_bytes().decode(errors="replace")]
            if len(workers) >= 2:
                break
            time.sleep(0.2)
        assert len(workers) >= 2, "the compute command did not start its workers"
        os.kill(parent.pid, signal.SIGKILL)
        parent.wait(10)
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and any(alive(w) for w in workers):
            time.sleep(0.2)
        survivors = [w for w in workers if alive(w)]
        assert not survivors, f"worker processes {survivors} outlived their parent"
    finally:
        if parent.poll() is None:
            parent.kill()
