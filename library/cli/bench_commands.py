"""`olibra bench`: benchmark commands that print figures (never timed assertions)."""

from __future__ import annotations

import os
import platform

from library.benchmark_set import benchmark_materials


def _header(what: str, processes: int | None) -> None:
    print(f"olibra bench {what}: {platform.machine()} {os.cpu_count()} core(s), "
          f"{processes or os.cpu_count()} process(es), Python {platform.python_version()}")


def cmd_bench_shape(args) -> int:
    from library import shape_bench

    materials = benchmark_materials()
    _header("shape", args.processes)
    print(f"benchmark set: {len(materials)} seed materials with at most 25 heavy atoms")
    shape_bench.run([smiles for _, smiles in materials], processes=args.processes)
    return 0


BENCHES = {"shape": cmd_bench_shape}


def cmd_bench(args) -> int:
    return BENCHES[args.what](args)


def register(commands) -> None:
    p = commands.add_parser("bench", help="print performance figures (shape, vibration, search, web)")
    p.add_argument("what", choices=sorted(BENCHES))
    p.add_argument("--processes", type=int, default=None, help="worker processes (default: one per core)")
    p.set_defaults(handler=cmd_bench)
