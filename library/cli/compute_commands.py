"""`olibra compute`: fill shape and vibration records, in worker processes, resumable."""

from __future__ import annotations

from library import computations
from library.vibration import engines
from library.catalogue import jobs
from library.catalogue.records import record_state
from library.cli.catalogue_commands import open_catalogue
from library.cli.output import FORMATS, emit, progress_bar
from library.errors import OlibraError


def plan_from_args(args) -> computations.Plan:
    kinds = computations.KINDS if args.what == "all" else (args.what,)
    try:
        return computations.Plan(kinds=kinds, vibration_engine=args.engine)
    except ValueError as exc:
        raise OlibraError(str(exc)) from None


def cmd_compute(args) -> int:
    catalogue = open_catalogue(args)
    plan = plan_from_args(args)
    stamps = computations.stamps(plan)
    materials = jobs.select_materials(catalogue, stamps, which="all" if args.all else "stale",
                                      keys=args.materials)
    if not materials:
        print("every record is up to date; nothing to compute (use --all to recompute)")
        return 0
    with progress_bar(len(materials), f"{args.what} records", unit="material",
                      enabled=not args.quiet) as bar:
        report = jobs.run(catalogue, stamps, computations.worker(plan), materials,
                          processes=args.processes, progress=bar.update,
                          cluster=args.cluster, keep_current=not (args.all or args.materials))
    for material_id, name, reason in report.failures:
        print(f"failed: #{material_id} {name}: {reason}")
    print(report.summary())
    if report.interrupted:
        return 130
    return 1 if report.failures else 0


def cmd_status(args) -> int:
    catalogue = open_catalogue(args)
    rows = []
    with catalogue.reading() as session:
        for (kind, engine_name), stamp in sorted(computations.current_stamps().items()):
            states = list(record_state(session, stamp).values())
            rows.append({"kind": kind, "engine": engine_name, "current": states.count("current"),
                         "stale": states.count("stale"), "missing": states.count("missing")})
    emit(rows, ["kind", "engine", "current", "stale", "missing"], args.format)
    return 0


def register(commands) -> None:
    p = commands.add_parser("compute")
    p.add_argument("what", choices=(*computations.KINDS, "all"))
    p.add_argument("materials", nargs="*", metavar="MATERIAL",
                   help="only these materials (id, name, synonym, CAS RN or InChIKey)")
    p.add_argument("--all", action="store_true", help="recompute every active material, even if current")
    p.add_argument("--engine", choices=engines.keys(), default=engines.DEFAULT_ENGINE,
                   help=f"vibration engine (default {engines.DEFAULT_ENGINE}): {engines.help_text()}")
    p.add_argument("--processes", type=int, default=None, help="worker processes (default: one per core)")
    p.add_argument("--cluster", metavar="ADDRESS", default=None,
                   help="compute on a Dask cluster: its scheduler (tcp://HOST:8786) or local:N to start N "
                        "worker processes here (needs olibra[cluster])")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(handler=cmd_compute)

    p = commands.add_parser("compute-status")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_status)
