"""Loading the shipped seed catalogue (library/seed_catalog/) into a catalogue."""

from __future__ import annotations

from library.catalogue import transfer
from library.errors import OlibraError
from library.seed_catalog import MATERIALS_FILE


def load_seed(catalogue) -> transfer.ImportReport:
    """Import the seed catalogue (idempotent: materials already present are left as they are)."""
    report = transfer.import_into(catalogue, transfer.read_rows(MATERIALS_FILE))
    if report.rejected:
        first = report.rejected[0]
        raise OlibraError(f"the seed catalogue has a bad row {first.row} ({first.name}: {first.message}); "
                          "this is a bug in olibra's seed files")
    return report
