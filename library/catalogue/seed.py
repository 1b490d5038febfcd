"""Loading the shipped seed catalogue (library/seed_catalog/) into a catalogue."""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlalchemy import func, or_, select

from library.catalogue import transfer
from library.catalogue.models import Material
from library.errors import OlibraError
from library.seed_catalog import MATERIALS_FILE


@dataclass
class SeedReport:
    """The import of the seed rows, and the rows left out because the catalogue holds its own version."""

    imported: transfer.ImportReport
    kept_local: list[str] = field(default_factory=list)  # one line per seed row left out

    def count(self, status: str) -> int:
        return self.imported.count(status)


def seed_rows(names, materials_file=MATERIALS_FILE) -> list[transfer.InputRow]:
    """The import rows of the named seed materials, in file order; a mixture keeps only the components
    that are among `names` (the others would not be found, and its row would be refused)."""
    wanted = set(names)
    rows = [row for row in transfer.read_rows(materials_file) if row.fields.get("name") in wanted]
    for row in rows:
        row.fields["components"] = "|".join(c for c in row.fields.get("components", "").split("|") if c in wanted)
    return rows


def load_seed(catalogue, materials_file=MATERIALS_FILE) -> SeedReport:
    """Import the seed catalogue (idempotent: materials already present are left as they are).

    A seed row whose name or CAS RN the catalogue already gives to another structure (a seed row
    corrected in a later olibra, or a curator's own material) is left out and reported: the
    catalogue's material is never changed or replaced. Any other rejected seed row is a bug in the
    seed files; then nothing is imported."""
    rows = transfer.read_rows(materials_file)
    report = transfer.import_into(catalogue, rows, keep_good=False)
    if not report.rejected:
        return SeedReport(report)
    by_row = {r.row: r for r in rows}
    kept_local, bugs = [], []
    with catalogue.reading() as session:
        for outcome in report.rejected:
            fields = by_row[outcome.row].fields
            same = [func.lower(Material.preferred_name) == (fields.get("name") or "").strip().lower()]
            if (fields.get("cas") or "").strip():  # (a missing CAS RN must not match every material without one)
                same.append(Material.cas_rn == fields["cas"].strip())
            holder = session.scalar(select(Material).where(or_(*same)).limit(1))
            if holder is None:
                bugs.append(outcome)
            else:
                kept_local.append(
                    f"seed row {outcome.row} {outcome.name} ({fields.get('smiles')}) left out: the catalogue's "
                    f"#{holder.id} {holder.preferred_name} has another structure ({holder.smiles}); to take the "
                    f"seed's, retire or rename #{holder.id} and load the seed again")
    if bugs:
        first = bugs[0]
        raise OlibraError(f"the seed catalogue has a bad row {first.row} ({first.name}: {first.message}); "
                          "this is a bug in olibra's seed files")
    return SeedReport(transfer.import_into(catalogue, rows, keep_good=True), kept_local)
