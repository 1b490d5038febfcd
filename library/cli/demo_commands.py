"""`olibra demo`: a working catalogue from the seed files in one command."""

from __future__ import annotations

import time
from pathlib import Path

from library import computations
from library.catalogue import curation, jobs
from library.catalogue.database import initialize
from library.catalogue.seed import load_seed
from library.cli.output import progress_bar
from library.seed_catalog import SEED_DIR

DEMO_QUERY = "Citral"


def cmd_demo(args) -> int:
    started = time.perf_counter()
    folder = Path(args.folder).expanduser().resolve()
    folder.mkdir(parents=True, exist_ok=True)
    url = args.db or f"sqlite:///{folder / 'catalogue.sqlite'}"
    catalogue = initialize(url)
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
    report = load_seed(catalogue)
    print(f"seed catalogue: {report.count('added')} added, {report.count('present')} already present")
    for line in report.kept_local:
        print(f"  {line}")
    plan = computations.Plan(kinds=computations.KINDS, vibration_engine="mmff")
    stamps = computations.stamps(plan)
    materials = jobs.select_materials(catalogue, stamps, which="stale")
    if materials:
        with progress_bar(len(materials), "shape and vibration records", unit="material") as bar:
            job = jobs.run(catalogue, stamps, computations.worker(plan), materials,
                           processes=args.processes, progress=bar.update)
        print(job.summary())
        for material_id, name, reason in job.failures:
            print(f"  failed: #{material_id} {name}: {reason}")
        if job.interrupted:
            return 130
    else:
        print("shape and vibration records: all up to date")
    print(f"catalogue ready at {url} in {time.perf_counter() - started:.1f} s")
    for step in DEMO_STEPS:
        step(catalogue, args)
    return 0


def first_search(catalogue, args) -> None:
    """Show what olibra is for: substitutes for a material a fictional brief must replace."""
    from library.cli.search_commands import print_substitutes
    from library.search.substitutes import find_substitutes

    print()
    outcome = find_substitutes(catalogue, DEMO_QUERY, metric="blend", weight=0.5, k=8)
    print_substitutes(outcome)
    print(f"\nnext: point olibra at this catalogue and follow {SEED_DIR / 'DEMO.md'}, e.g.\n"
          f"  export OLIBRA_DB={catalogue.url}\n"
          f"  olibra compare Citral 'Geranyl nitrile'")


DEMO_ACCOUNT = "demo"


def serve_web(catalogue, args) -> None:
    """Start the web interface on this machine with a fresh password for the demo curator account."""
    import argparse
    import secrets

    from library.catalogue import accounts
    from library.cli.web_commands import cmd_serve

    if args.no_serve:
        return
    password = secrets.token_urlsafe(12)
    with accounts.bookkeeping_sessions(catalogue.engine)() as session:
        with session.begin():
            if accounts.find_user(session, DEMO_ACCOUNT) is None:
                accounts.create_user(session, DEMO_ACCOUNT, password, "curator", actor="olibra demo")
            else:
                accounts.set_password(session, DEMO_ACCOUNT, password, actor="olibra demo")
    print(f"\nweb interface: sign in as {DEMO_ACCOUNT!r} with password {password} (new on every demo run)")
    catalogue.dispose()
    cmd_serve(argparse.Namespace(db=catalogue.url, here=False, host="127.0.0.1", port=args.port,
                                 threads=4, processes=args.processes, cluster=None))


# Steps after the catalogue is ready.
DEMO_STEPS: list = [first_search, serve_web]


def register(commands) -> None:
    p = commands.add_parser("demo")
    p.add_argument("--folder", default="olibra-demo", help="folder for the demo catalogue (default ./olibra-demo)")
    p.add_argument("--processes", type=int, default=None, help="worker processes (default: one per core)")
    p.add_argument("--port", type=int, default=8150, help="web interface port on 127.0.0.1 (default 8150)")
    p.add_argument("--no-serve", action="store_true", help="stop after the first search; do not start the web server")
    p.set_defaults(handler=cmd_demo)
