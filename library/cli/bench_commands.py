"""`olibra bench`: benchmark commands that print figures (never timed assertions).

The benchmarks live in the `benchmarks` package, loaded only when a benchmark runs.
"""

from __future__ import annotations

import sys


def _header(what: str, processes: int | None) -> None:
    from benchmarks.materials import header

    print(header(what, processes))


def cmd_bench_shape(args) -> int:
    from benchmarks import shape

    _header("shape", args.processes)
    shape.run(processes=args.processes)
    return 0


def cmd_bench_vibration(args) -> int:
    from benchmarks import vibration

    _header("vibration", args.processes)
    vibration.run(processes=args.processes)
    return 0


def cmd_bench_compute(args) -> int:
    from benchmarks import compute

    _header("compute", args.processes)
    compute.run(clusters=args.cluster or [], engines=args.engine or ["mmff"], count=args.count,
                processes=args.processes)
    return 0


def cmd_bench_search(args) -> int:
    from benchmarks import search
    from library.cli.catalogue_commands import open_catalogue

    _header("search", None)
    sizes = tuple(args.sizes) if args.sizes else (10_000, 100_000, 1_000_000)
    search.run(sizes)
    if args.skip_catalogue:
        return 0
    search.overlay_recall(open_catalogue(args), queries=args.queries)
    return 0


def cmd_bench_web(args) -> int:
    from benchmarks import web

    _header("web", None)
    web.run(args.db)
    return 0


def cmd_bench_startup(args) -> int:
    from benchmarks import startup

    _header("startup", None)
    startup.run(args.db, repeats=args.repeats, material=args.material or startup.DEFAULT_MATERIAL)
    return 0


def cmd_bench_load(args) -> int:
    from benchmarks import web_load

    _header("load", None)
    web_load.run(args.db, sign_in_seconds=args.sign_in_seconds)
    return 0


def cmd_bench_ensembles(args) -> int:
    from benchmarks import ensembles

    _header("ensembles", None)
    ensembles.run(count=args.ensemble_count, oversampling=args.oversampling)
    return 0


def cmd_bench_index(args) -> int:
    from benchmarks import index_from_db
    from library.catalogue.database import resolve_url

    _header("index", None)
    try:
        index_from_db.run(resolve_url(args.db), copies=args.copies)
    except ValueError as exc:
        print(f"olibra: error: {exc}", file=sys.stderr)
        return 2
    return 0


def _oversampling(text: str) -> float:
    import argparse

    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value >= 1:
        raise argparse.ArgumentTypeError(f"{text!r} is not a factor of at least 1 (embeddings per kept conformer)")
    return value


def cmd_bench_write(args) -> int:
    from benchmarks import writes

    _header("write", None)
    try:
        writes.run(args.db, materials=args.write_materials)
    except ValueError as exc:
        print(f"olibra: error: {exc}", file=sys.stderr)
        return 2
    return 0


def cmd_bench_scorecard(args) -> int:
    from benchmarks import scorecard

    _header("scorecard", None)
    scorecard.run(materials=args.materials)
    return 0


BENCHES = {"index": cmd_bench_index, "scorecard": cmd_bench_scorecard, "compute": cmd_bench_compute, "ensembles": cmd_bench_ensembles, "shape": cmd_bench_shape, "vibration": cmd_bench_vibration, "search": cmd_bench_search,
            "web": cmd_bench_web, "load": cmd_bench_load, "startup": cmd_bench_startup, "write": cmd_bench_write}


def cmd_bench(args) -> int:
    return BENCHES[args.what](args)


def register(commands) -> None:
    p = commands.add_parser("bench")
    p.add_argument("what", choices=sorted(BENCHES))
    p.add_argument("--processes", type=int, default=None, help="worker processes (default: one per core)")
    p.add_argument("--sizes", type=int, nargs="+", help="search: synthetic catalogue sizes (default 10k 100k 1M)")
    p.add_argument("--cluster", action="append", metavar="ADDRESS",
                   help="compute: also run on this Dask cluster (local:N or tcp://HOST:8786); repeatable")
    p.add_argument("--engine", action="append", metavar="ENGINE",
                   help="compute: vibration engine(s) to measure (default mmff); repeatable")
    p.add_argument("--count", type=int, default=24, help="compute: materials in the set (default 24)")
    p.add_argument("--ensemble-count", type=int, default=None,
                   help="ensembles: only the first N benchmark materials (default: all)")
    p.add_argument("--copies", type=int, default=50,
                   help="index: copies of the catalogue in the synthetic one it is built from (default 50)")
    p.add_argument("--oversampling", type=_oversampling, default=None,
                   help="ensembles: embeddings per kept conformer to try instead of the product's setting "
                        "(measures what a more thorough search buys and costs)")
    p.add_argument("--materials", type=int, default=1000,
                   help="scorecard: materials in the synthetic catalogue (default 1000)")
    p.add_argument("--write-materials", type=int, default=200,
                   help="write: seed materials stored in the scratch catalogue (default 200, at most the seed's)")
    p.add_argument("--queries", type=int, default=20, help="search: queries for the overlay recall figure")
    p.add_argument("--skip-catalogue", action="store_true",
                   help="search: skip the recall figure on the real catalogue (--db, with computed records)")
    p.add_argument("--repeats", type=int, default=7,
                   help="startup: timed runs per command, after one warm-up run (default 7)")
    p.add_argument("--material",
                   help="startup: the material to show and search for (default Citral, in the demo catalogue)")
    p.add_argument("--sign-in-seconds", type=float, default=60.0,
                   help="load: length of the wrong-password burst against the sign-in throttle (0 skips it)")
    p.set_defaults(handler=cmd_bench)
