"""`olibra bench startup`: wall time of starting the real `olibra` process, per command.

Each command runs once to warm the caches (bytecode, the on-disk search index),
then `repeats` more times; the figures are the median, min and max wall time of
those runs, from starting the process to its exit. The catalogue is the demo
catalogue (built or brought up to date with `olibra demo --no-serve` in a cache
folder) unless a catalogue URL is given.

    from benchmarks import startup
    figures = startup.run(None, repeats=7)
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

from library.errors import OlibraError

DEFAULT_MATERIAL = "Citral"
# The targets of the fast command line (issue 10), in seconds; printed beside the figures.
TARGETS_S = {"--help": 0.4, "show": 1.2, "search": 2.0}


def olibra_command() -> list[str]:
    """The installed `olibra` script next to this Python, else `python -m library.cli`."""
    script = Path(sys.executable).with_name("olibra")
    if script.exists():
        return [str(script)]
    found = shutil.which("olibra")
    return [found] if found else [sys.executable, "-m", "library.cli"]


def default_folder() -> Path:
    from library import user_cache

    return user_cache.folder() / "bench-startup"


def _run(argv: list[str], *, timeout_s: float = 600.0) -> float:
    """Wall time (s) of one run of `argv`; a failed run is an error naming the command."""
    started = time.perf_counter()
    done = subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, timeout=timeout_s)
    elapsed = time.perf_counter() - started
    if done.returncode != 0:
        last = (done.stderr.strip().splitlines() or ["(no message)"])[-1]
        raise OlibraError(f"`{' '.join(argv[-3:])}` failed with exit code {done.returncode}: {last}")
    return elapsed


def demo_catalogue(folder: Path, out=sys.stdout) -> str:
    """Build or bring up to date the demo catalogue in `folder` with the real `olibra demo --no-serve`."""
    folder.mkdir(parents=True, exist_ok=True)
    print(f"demo catalogue in {folder} (olibra demo --no-serve) ...", file=out, flush=True)
    elapsed = _run([*olibra_command(), "demo", "--no-serve", "--folder", str(folder)], timeout_s=1800.0)
    print(f"demo catalogue ready in {elapsed:.1f} s", file=out, flush=True)
    return f"sqlite:///{folder / 'catalogue.sqlite'}"


def run(catalogue_url: str | None = None, *, repeats: int = 7, material: str = DEFAULT_MATERIAL,
        folder: Path | None = None, out=sys.stdout) -> dict[str, dict[str, float]]:
    """Median, min and max wall time (s) of `olibra --help`, `olibra show MATERIAL` and `olibra search
    MATERIAL` on `catalogue_url` (default: the demo catalogue in `folder`). Returns the figures; prints them."""
    if repeats < 1:
        raise OlibraError(f"--repeats must be at least 1, not {repeats}")
    url = catalogue_url or demo_catalogue(Path(folder or default_folder()), out=out)
    olibra = olibra_command()
    commands = {
        "--help": [*olibra, "--help"],
        "show": [*olibra, "--db", url, "show", material],
        "search": [*olibra, "--db", url, "search", material],
    }
    print(f"{' '.join(olibra)}: {repeats} run(s) per command after one warm-up run (which also fills the "
          f"search index cache); catalogue {url}", file=out, flush=True)
    figures: dict[str, dict[str, float]] = {}
    width = max(len(f"olibra {name} {material}") for name in commands)
    print(f"{'command':<{width}}  {'median':>8}  {'min':>8}  {'max':>8}  {'target':>8}", file=out)
    for name, argv in commands.items():
        _run(argv)
        times = [_run(argv) for _ in range(repeats)]
        figures[name] = {"median_s": statistics.median(times), "min_s": min(times), "max_s": max(times)}
        label = f"olibra {name}" + ("" if name == "--help" else f" {material}")
        print(f"{label:<{width}}  {figures[name]['median_s']:>6.2f} s  {figures[name]['min_s']:>6.2f} s  "
              f"{figures[name]['max_s']:>6.2f} s  {TARGETS_S[name]:>6.1f} s", file=out, flush=True)
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} core(s)", file=out)
    return figures
