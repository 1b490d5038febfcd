"""`olibra bench`: benchmark commands that print figures (never timed assertions)."""

from __future__ import annotations

import os
import platform

from library.benchmark_set import benchmark_materials


def _header(what: str, processes: int | None) -> None:
    print(f"olibra bench {what}: {platform.machine()} {os.cpu_count()} core(s), "
          f"{processes or os.cpu_count()} process(es), Python {platform.python_version()}")


def _benchmark_smiles(what: str, processes: int | None) -> list[str]:
    materials = benchmark_materials()
    _header(what, processes)
    print(f"benchmark set: {len(materials)} seed materials with at most 25 heavy atoms")
    return [smiles for _, smiles in materials]


def cmd_bench_shape(args) -> int:
    from library import shape_bench

    shape_bench.run(_benchmark_smiles("shape", args.processes), processes=args.processes)
    return 0


def cmd_bench_vibration(args) -> int:
    from library.vibration import bench

    bench.run(_benchmark_smiles("vibration", args.processes), processes=args.processes)
    return 0


def cmd_bench_search(args) -> int:
    from library.cli.catalogue_commands import open_catalogue
    from library.search import bench, service

    _header("search", None)
    sizes = tuple(args.sizes) if args.sizes else (10_000, 100_000, 1_000_000)
    bench.run(sizes)
    if args.skip_catalogue:
        return 0
    catalogue = open_catalogue(args)
    service.overlay_recall_benchmark(catalogue, queries=args.queries)
    return 0


def cmd_bench_web(args) -> int:
    from webui import bench

    _header("web", None)
    bench.run(args.db)
    return 0


def cmd_bench_load(args) -> int:
    from benchmarks import web_load

    _header("load", None)
    web_load.run(args.db, sign_in_seconds=args.sign_in_seconds)
    return 0


BENCHES = {"shape": cmd_bench_shape, "vibration": cmd_bench_vibration, "search": cmd_bench_search,
           "web": cmd_bench_web, "load": cmd_bench_load}


def cmd_bench(args) -> int:
    return BENCHES[args.what](args)


def register(commands) -> None:
    p = commands.add_parser("bench", help="print performance figures (shape, vibration, search, web, load)")
    p.add_argument("what", choices=sorted(BENCHES))
    p.add_argument("--processes", type=int, default=None, help="worker processes (default: one per core)")
    p.add_argument("--sizes", type=int, nargs="+", help="search: synthetic catalogue sizes (default 10k 100k 1M)")
    p.add_argument("--queries", type=int, default=20, help="search: queries for the overlay recall figure")
    p.add_argument("--skip-catalogue", action="store_true",
                   help="search: skip the recall figure on the real catalogue (--db, with computed records)")
    p.add_argument("--sign-in-seconds", type=float, default=60.0,
                   help="load: length of the wrong-password burst against the sign-in throttle (0 skips it)")
    p.set_defaults(handler=cmd_bench)
