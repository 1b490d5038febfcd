"""`olibra receptors`: virtual receptor panels and a material's activation profile over one."""

from __future__ import annotations

from library.cli.catalogue_commands import open_catalogue
from library.cli.output import FORMATS, emit
from library.vibration import engines

PROFILE_COLUMNS = ["gap_ev", "lambda_ev", "mode_cm1", "rate_s", "relative"]


def cmd_profile(args) -> int:
    from library.search.receptor_profiles import activation_profile
    from library.vibration import tunnelling

    catalogue = open_catalogue(args)
    profiles = [activation_profile(catalogue, key, panel=args.panel, vibration_engine=args.engine)
                for key in args.material]
    panel = profiles[0].panel
    if args.format != "json":
        print(f"panel {panel.name} ({len(panel.receptors)} receptors); {tunnelling.CAUTION}")
    if len(profiles) == 1:
        emit(profiles[0].rows, PROFILE_COLUMNS, args.format)
        return 0
    # several materials side by side: one row per receptor, each material's rate and relative activation
    rows = []
    for i, receptor_row in enumerate(profiles[0].rows):
        row = {k: receptor_row[k] for k in ("gap_ev", "lambda_ev", "mode_cm1")}
        for p in profiles:
            row[f"{p.name} rate_s"] = p.rows[i]["rate_s"]
            row[f"{p.name} relative"] = p.rows[i]["relative"]
        rows.append(row)
    emit(rows, list(rows[0]), args.format)
    return 0


def cmd_panel(args) -> int:
    from library.catalogue import receptor_panel_store

    catalogue = open_catalogue(args)
    if args.panel_action == "list":
        with catalogue.reading() as session:
            found = receptor_panel_store.panels(session)
        rows = [{"name": p.name, "receptors": len(p.receptors),
                 "gaps_ev": " ".join(f"{g:g}" for g in p.gaps_ev),
                 "lambda_ev": " ".join("-" if r.lambda_ev is None else f"{r.lambda_ev:g}" for r in p.receptors),
                 "note": p.note} for p in found]
        emit(rows, ["name", "receptors", "gaps_ev", "lambda_ev", "note"], args.format)
        return 0
    with catalogue.transaction() as session:
        if args.panel_action == "add":
            panel = receptor_panel_store.add_panel(session, args.name, args.gaps, unit=args.unit,
                                                   lambdas_ev=args.lambda_ev, note=args.note)
            print(f"receptor panel {panel.name!r} added ({len(panel.receptors)} receptors)")
        else:
            receptor_panel_store.remove_panel(session, args.name)
            print(f"receptor panel {args.name.strip().lower()!r} removed")
    return 0


def register(commands) -> None:
    from library.vibration import receptors

    p = commands.add_parser("receptors")
    sub = p.add_subparsers(dest="action", required=True)
    q = sub.add_parser("profile", help="activation (inelastic tunnelling rate, s^-1) at each receptor of a panel")
    q.add_argument("material", nargs="+",
                   help="material(s) (id, name, synonym, CAS RN or InChIKey); several are shown side by side")
    q.add_argument("--panel", default=None,
                   help=f"receptor panel (default: the built-in {receptors.DEFAULT_PANEL_NAME}; "
                        "see `olibra receptors panel list`)")
    q.add_argument("--engine", choices=engines.keys(), default=engines.DEFAULT_ENGINE)
    q.add_argument("--format", choices=FORMATS, default="table")
    q.set_defaults(handler=cmd_profile)

    panel = sub.add_parser("panel", help="list, add or remove receptor panels")
    actions = panel.add_subparsers(dest="panel_action", required=True)
    listing = actions.add_parser("list", help="the built-in panel and every stored one")
    listing.add_argument("--format", choices=FORMATS, default="table")
    listing.set_defaults(handler=cmd_panel)
    add = actions.add_parser("add", help="store a panel: its receptors' gaps and optionally their own lambda")
    add.add_argument("name", help="panel name: lowercase letters, digits, '-', '_' or '.'")
    add.add_argument("--gaps", nargs="+", required=True, metavar="GAP",
                     help="receptor gaps, in eV (0-0.5) or with --unit cm1 in cm^-1 (0-4033)")
    add.add_argument("--unit", choices=("ev", "cm1"), default="ev", help="unit of --gaps (default eV)")
    add.add_argument("--lambda-ev", nargs="+", type=float, metavar="LAMBDA",
                     help="reorganization energy (eV): one for every receptor, or one per gap "
                          "(default: the tunnelling model's)")
    add.add_argument("--note", help="what the panel stands for")
    add.set_defaults(handler=cmd_panel)
    remove = actions.add_parser("remove", help="remove a stored panel")
    remove.add_argument("name")
    remove.set_defaults(handler=cmd_panel)
