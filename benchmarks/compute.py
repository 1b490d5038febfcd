"""Benchmark of `olibra compute` on one machine and on Dask clusters; prints figures, asserts nothing.

The same material set (the first `count` materials of the fixed benchmark set) is computed, shape and
vibration records, by the plain local runner and then on each cluster asked for (e.g. local:1 and
local:2, or tcp://HOST:8786). Printed: materials per second, the scaling ratio against the first
cluster run, the coordinator's write rate, and a projection of the wall time for 1M materials per
engine and number of workers from the measured per-material compute cost.

Run: olibra bench compute --cluster local:1 --cluster local:2 [--engine mmff gfn2] [--count 24]
"""

from __future__ import annotations

import sys

from benchmarks.materials import benchmark_materials, runner_throughput

PROJECTED_MATERIALS = 1_000_000
PROJECTED_WORKERS = (1, 2, 16, 128, 1024)


def _duration(seconds: float) -> str:
    if seconds != seconds:  # NaN: nothing measured
        return "n/a"
    for unit, size in (("years", 365 * 86400), ("days", 86400), ("h", 3600), ("min", 60)):
        if seconds >= size:
            return f"{seconds / size:.1f} {unit}"
    return f"{seconds:.0f} s"


def projection(compute_s_per_material: float, write_materials_per_s: float, workers: int,
               materials: int = PROJECTED_MATERIALS) -> float:
    """Projected wall seconds: the compute spread over `workers` single-threaded workers, and never
    faster than one coordinator can write (the two overlap, so the slower one bounds the run)."""
    compute = materials * compute_s_per_material / workers
    writing = materials / write_materials_per_s if write_materials_per_s > 0 else 0.0
    return max(compute, writing)


def run(*, clusters: list[str], engines: list[str], count: int = 24, processes: int | None = None,
        out=sys.stdout) -> dict:
    """Figures per engine: {engine: {"local": figures, cluster: figures, ...}} (see runner_throughput)."""
    from library import computations

    def say(text: str) -> None:
        print(text, file=out, flush=True)

    names = [name for name, _ in benchmark_materials()][:count]
    say(f"material set: the first {len(names)} materials of the benchmark set (shape and vibration records)")
    results: dict[str, dict] = {}
    for engine in engines:
        plan = computations.Plan(vibration_engine=engine)
        runs = {"local": runner_throughput(plan, names, processes=processes, say=say,
                                           label=f"{engine}, local runner: ")}
        for cluster in clusters:
            runs[cluster] = runner_throughput(plan, names, say=say, label=f"{engine}, cluster {cluster}: ",
                                              cluster=cluster)
        if clusters:
            base = runs[clusters[0]]["materials_per_s"]
            for cluster in clusters[1:]:
                say(f"{engine}: scaling {cluster} against {clusters[0]}: "
                    f"{runs[cluster]['materials_per_s'] / base:.2f}x")
        cost = sum(r["compute_s_per_material"] for r in runs.values()) / len(runs)
        write_rate = min(r["write_materials_per_s"] for r in runs.values())
        say(f"{engine}: PROJECTION (not measured) for {PROJECTED_MATERIALS:,} materials from the measured "
            f"{cost:.2f} s of compute per material and a coordinator writing {write_rate:.0f} materials/s, "
            "assuming ideal scaling:")
        for workers in PROJECTED_WORKERS:
            say(f"    {workers:5d} single-threaded worker(s): {_duration(projection(cost, write_rate, workers))}")
        results[engine] = runs
    return results
