"""`olibra receptors`: a material's activation profile over a virtual receptor panel."""

from __future__ import annotations

from library.catalogue import curation, records
from library.cli.catalogue_commands import open_catalogue
from library.cli.output import FORMATS, emit
from library.errors import OlibraError
from library.vibration import engines, receptors, tunnelling


def cmd_profile(args) -> int:
    from library.search.catalogue_index import record_stamps

    catalogue = open_catalogue(args)
    stamp = record_stamps(args.engine)["tunnelling"]
    with catalogue.reading() as session:
        material = curation.find_material(session, args.material)
        found = records.load_records(session, "tunnelling", stamp.engine_name, material_ids=[material.id])
        record = found.get(material.id)
        if record is None or record.parameter_hash != stamp.parameter_hash:
            raise OlibraError(f"#{material.id} {material.preferred_name} has no current tunnelling record; "
                              "run `olibra compute tunnelling` first")
        name = material.preferred_name
    panel = receptors.default_panel()
    rows = receptors.profile(record.arrays["tunnelling_spectrum"], panel)
    if args.format != "json":
        print(f"{name}: panel {panel.name}; {tunnelling.CAUTION}")
    emit(rows, ["gap_ev", "mode_cm1", "rate_s", "relative"], args.format)
    return 0


def register(commands) -> None:
    p = commands.add_parser("receptors")
    sub = p.add_subparsers(dest="action", required=True)
    q = sub.add_parser("profile", help="activation (inelastic tunnelling rate, s^-1) at each receptor gap (eV)")
    q.add_argument("material", help="material (id, name, synonym, CAS RN or InChIKey)")
    q.add_argument("--panel", default=receptors.DEFAULT_PANEL_NAME, choices=[receptors.DEFAULT_PANEL_NAME],
                   help="receptor panel (only the built-in panel so far)")
    q.add_argument("--engine", choices=engines.keys(), default=engines.DEFAULT_ENGINE)
    q.add_argument("--format", choices=FORMATS, default="table")
    q.set_defaults(handler=cmd_profile)
