"""The catalogue store on every backend: identity, duplicates, import/export, audit, revision."""

import json

import pytest
from sqlalchemy import func, select, text

from catalogue_helpers import draft
from library.catalogue import curation, transfer
from library.catalogue.models import AuditEntry, Material, Provenance

CARVONE_R = "CC1=CC[C@H](CC1=O)C(C)=C"  # CIP label R checked with RDKit's new CIP labeller
CARVONE_S = "CC1=CC[C@@H](CC1=O)C(C)=C"
LINALOOL = "CC(C)=CCCC(C)(O)C=C"
LINALOOL_D = "[2H]C([2H])=C([2H])C(O)(CC([2H])([2H])C([2H])=C(C([2H])([2H])[2H])C([2H])([2H])[2H])C([2H])([2H])[2H]"


def count(session, model=Material) -> int:
    return session.scalar(select(func.count()).select_from(model))


def test_add_and_find_by_every_key(catalogue):
    with catalogue.transaction() as session:
        outcome = curation.add_material(session, draft(
            LINALOOL, "Linalool", cas="78-70-6", synonyms=["3,7-dimethylocta-1,6-dien-3-ol"],
            odors="floral|citrus:0.4"))
        assert outcome.added
        material_id = outcome.material.id
    with catalogue.reading() as session:
        for key in (str(material_id), f"#{material_id}", "linalool", "78-70-6",
                    "3,7-DIMETHYLOCTA-1,6-DIEN-3-OL", outcome.material.inchikey):
            assert curation.find_material(session, key).id == material_id
        material = curation.find_material(session, "Linalool")
        assert {o.descriptor.term: o.strength for o in material.odors} == {"floral": None, "citrus": 0.4}
        assert {p.field: p.kind for p in material.provenance} == {
            "structure": "from memory", "preferred_name": "from memory", "cas_rn": "from memory"}
        with pytest.raises(curation.CurationError, match="no material matches"):
            curation.find_material(session, "nonexistent")


def test_duplicate_structure_reports_the_existing_material(catalogue):
    with catalogue.transaction() as session:
        first = curation.add_material(session, draft(LINALOOL, "Linalool"))
    with catalogue.transaction() as session:
        again = curation.add_material(session, draft("C=CC(C)(O)CCC=C(C)C", "Another name"))
        assert not again.added and again.material.id == first.material.id
        assert "already present" in again.message
        assert count(session) == 1


def test_enantiomers_and_isotopologues_are_distinct_materials(catalogue):
    with catalogue.transaction() as session:
        for smiles, name in [(CARVONE_R, "(R)-carvone"), (CARVONE_S, "(S)-carvone"),
                             (LINALOOL, "Linalool"), (LINALOOL_D, "Linalool-d17")]:
            assert curation.add_material(session, draft(smiles, name)).added
        assert count(session) == 4
        keys = session.scalars(select(Material.inchikey)).all()
        assert len(set(keys)) == 4


def test_name_and_cas_clashes_are_refused(catalogue):
    with catalogue.transaction() as session:
        curation.add_material(session, draft(LINALOOL, "Linalool", cas="78-70-6"))
    with catalogue.transaction() as session:
        with pytest.raises(curation.CurationError, match="already used"):
            curation.add_material(session, draft("CCO", "Linalool"))
        with pytest.raises(curation.CurationError, match="already used"):
            curation.add_material(session, draft("CCO", "Ethanol", cas="78-70-6"))


def test_unknown_odor_descriptor_is_refused(catalogue):
    with catalogue.transaction() as session:
        with pytest.raises(curation.CurationError, match="not in the vocabulary"):
            curation.add_material(session, draft("CCO", "Ethanol", odors="boozy"))


def write_csv(tmp_path, body: str, name="materials.csv"):
    path = tmp_path / name
    path.write_text(body, encoding="utf-8")
    return path


GOOD_AND_BAD = """name,smiles,cas,odor,structure_source,cas_source,odor_source
Linalool,CC(C)=CCCC(C)(O)C=C,78-70-6,floral|citrus:0.4,from memory,from memory,from memory
Broken ring,C1CC,,,from memory,,
Vanillin,COc1cc(C=O)ccc1O,121-33-5,vanilla|sweet,from memory,from memory,from memory
Wrong digit,CCO,64-17-6,,from memory,from memory,
Linalool again,C=CC(C)(O)CCC=C(C)C,,,from memory,,
"""


def test_import_with_bad_rows_changes_nothing_by_default(catalogue, tmp_path):
    path = write_csv(tmp_path, GOOD_AND_BAD)
    with catalogue.sessions() as session:
        with session.begin() as outer:
            report = transfer.import_rows(session, transfer.read_rows(path))
            assert not report.committed
            outer.rollback()
    assert [(r.row, r.status) for r in report.rows] == [
        (1, "would be added"), (2, "rejected"), (3, "would be added"), (4, "rejected"), (5, "present")]
    assert all(r.material_id is None and "#" not in r.message for r in report.rows if r.status == "would be added")
    assert "unclosed ring" in report.rows[1].message
    assert "check digit" in report.rows[3].message
    assert "row 1" in report.rows[4].message
    with catalogue.reading() as session:
        assert count(session) == 0 and count(session, AuditEntry) == len(curation.vocabulary(session))


def test_keep_good_stores_good_rows_and_reimport_adds_nothing(catalogue, tmp_path):
    path = write_csv(tmp_path, GOOD_AND_BAD)
    for attempt in range(2):
        with catalogue.transaction() as session:
            report = transfer.import_rows(session, transfer.read_rows(path), keep_good=True)
        assert report.count("added") == (2 if attempt == 0 else 0)
        assert report.count("rejected") == 2
    with catalogue.reading() as session:
        assert sorted(session.scalars(select(Material.preferred_name))) == ["Linalool", "Vanillin"]


def test_export_round_trips_through_import(catalogue, tmp_path, sqlite_url):
    with catalogue.transaction() as session:
        curation.add_material(session, draft(LINALOOL, "Linalool", cas="78-70-6", odors="floral",
                                             synonyms=["linalol"]))
        curation.add_material(session, draft(CARVONE_R, "(R)-carvone", odors="minty:0.8"))
    for fmt, suffix in (("csv", ".csv"), ("sdf", ".sdf")):
        with catalogue.reading() as session:
            exported = "".join(transfer.export_materials(session, fmt))
        rows = transfer.read_rows(tmp_path / f"export{suffix}", data=exported.encode())
        target = curation_copy(sqlite_url.replace(".sqlite", f"-{fmt}.sqlite"))
        with target.transaction() as session:
            report = transfer.import_rows(session, rows)
            assert report.count("added") == 2, report.rows
        with target.reading() as session:
            m = curation.find_material(session, "linalol")
            assert m.cas_rn == "78-70-6" and [o.descriptor.term for o in m.odors] == ["floral"]
            carvone = curation.find_material(session, "(R)-carvone")
            assert carvone.inchikey == curation.find_material(session, "(R)-carvone").inchikey
            assert carvone.odors[0].strength == 0.8
        target.dispose()
    with catalogue.reading() as session:
        document = json.loads("".join(transfer.export_materials(session, "json")))
    assert document["version"] == 1 and len(document["materials"]) == 2


def curation_copy(url):
    from library.catalogue.database import initialize
    opened = initialize(url)
    with opened.transaction() as session:
        for term in ("floral", "minty"):
            curation.add_descriptor(session, term)
    return opened


def test_status_changes_are_audited_and_bump_the_revision(catalogue):
    with catalogue.transaction() as session:
        material = curation.add_material(session, draft("CCO", "Ethanol")).material
    before = catalogue.revision()
    with catalogue.transaction() as session:
        material = curation.find_material(session, "Ethanol")
        curation.set_status(session, material, "retired", actor="curator-a")
        curation.set_restricted(session, material, True, actor="curator-a")
    assert catalogue.revision() == before + 1
    with catalogue.reading() as session:
        entries = session.scalars(select(AuditEntry).where(AuditEntry.entity == "material",
                                                           AuditEntry.field.is_not(None))).all()
        assert [(e.actor, e.field, e.old_value, e.new_value) for e in entries] == [
            ("curator-a", "status", "active", "retired"),
            ("curator-a", "restriction", None, "restricted (not recorded)")]


def test_failed_transaction_leaves_no_trace(catalogue):
    with pytest.raises(RuntimeError):
        with catalogue.transaction() as session:
            curation.add_material(session, draft("CCO", "Ethanol"))
            raise RuntimeError("power cut")
    with catalogue.reading() as session:
        assert count(session) == 0 and count(session, Provenance) == 0


def test_sqlite_pragmas(sqlite_url):
    from library.catalogue.database import initialize
    opened = initialize(sqlite_url)
    with opened.engine.connect() as connection:
        assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert connection.execute(text("PRAGMA foreign_keys")).scalar() == 1
        assert connection.execute(text("PRAGMA busy_timeout")).scalar() == 10_000
    opened.dispose()
