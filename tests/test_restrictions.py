"""Restriction entries as data, and the curator's fixes of issue 14: refused imports without ids, CAS RN
conflicts naming both materials, literature provenance that reads as a reference, --actor / $OLIBRA_ACTOR,
readable history, unknown odor terms refused by the CLI as by the web.

Runs on SQLite and, when OLIBRA_TEST_POSTGRES_URL is set, on PostgreSQL (the `runner` fixture).
"""

from __future__ import annotations

import csv
import io
import json

import pytest

from library.catalogue import curation, restrictions, transfer
from library.catalogue.database import initialize
from library.catalogue.models import AuditEntry, Restriction
from library.seed_catalog import MATERIALS_FILE

LINALOOL = "CC(C)=CCCC(C)(O)C=C"  # CAS RN 78-70-6, from memory
COUMARIN = "O=c1ccc2ccccc2o1"  # CAS RN 91-64-5, from memory
VANILLIN = "COc1cc(C=O)ccc1O"  # CAS RN 121-33-5, from memory


@pytest.fixture(autouse=True)
def no_actor_from_environment(monkeypatch):
    monkeypatch.setenv("OLIBRA_ACTOR", "")  # restored (removed) after each test, also after --actor set it


def _add(runner, structure, name, *extra):
    code, out, err = runner("add", structure, "--name", name, *extra)
    assert code == 0, err
    return out


def test_restriction_added_with_the_cli_is_exported_and_survives_reimport(runner, tmp_path, catalogue_url):
    _add(runner, COUMARIN, "Coumarin", "--cas", "91-64-5")
    code, out, err = runner("--actor", "curator-a", "restriction", "add", "Coumarin", "--kind", "restricted",
                            "--max-percent", "0.5", "--category", "leave-on skin products",
                            "--authority", "in-house standard", "--reference", "house rule 12", "--date",
                            "2025-01-31")
    assert code == 0, err
    assert "max 0.5 % leave-on skin products (in-house standard)" in out
    assert restrictions.DISCLAIMER in out
    runner("restriction", "add", "Coumarin", "--kind", "allergen", "--authority", "EU 1223/2009")
    code, exported, _ = runner("export", "--format", "csv")
    assert code == 0
    row = next(csv.DictReader(io.StringIO(exported)))
    assert row["restricted"] == "yes"
    entries = json.loads(row["restrictions"])
    assert [e["kind"] for e in entries] == ["restricted", "allergen"]
    assert entries[0]["max_percent"] == 0.5 and entries[0]["date"] == "2025-01-31"
    for fmt in ("csv", "sdf", "json"):
        _, text, _ = runner("export", "--format", fmt)
        fresh = initialize(f"sqlite:///{tmp_path / f'fresh-{fmt}.sqlite'}")
        report = transfer.import_into(fresh, transfer.read_rows(f"x.{fmt}", data=text.encode()))
        assert report.committed and not report.rejected, [r.message for r in report.rejected]
        with fresh.reading() as session:
            material = curation.find_material(session, "Coumarin")
            assert restrictions.tags(material) == ("max 0.5 % leave-on skin products (in-house standard); "
                                                   "declare allergen (EU 1223/2009)")
            assert material.restricted
        fresh.dispose()
    code, out, _ = runner("show", "Coumarin", "--history")
    assert "curator-a create restriction: (none) -> max 0.5 %" in out


def test_filters_tags_and_removal(runner, catalogue):
    _add(runner, COUMARIN, "Coumarin")
    _add(runner, LINALOOL, "Linalool")
    _add(runner, VANILLIN, "Vanillin")
    runner("restriction", "add", "Coumarin", "--kind", "prohibited", "--authority", "in-house standard")
    runner("restriction", "add", "Linalool", "--kind", "allergen", "--authority", "EU 1223/2009")
    _, out, _ = runner("list", "--format", "json")
    tags = {r["name"]: r["regulatory"] for r in json.loads(out)}
    assert tags == {"Coumarin": "prohibited (in-house standard)", "Linalool": "declare allergen (EU 1223/2009)",
                    "Vanillin": ""}
    _, out, _ = runner("list", "--exclude-prohibited", "--format", "json")
    assert {r["name"] for r in json.loads(out)} == {"Linalool", "Vanillin"}
    _, out, _ = runner("list", "--exclude-restricted", "--format", "json")
    assert {r["name"] for r in json.loads(out)} == {"Linalool", "Vanillin"}  # an allergen entry does not exclude
    _, out, _ = runner("list")
    assert restrictions.DISCLAIMER in out
    with catalogue.reading() as session:
        entry_id = session.query(Restriction).filter_by(kind="prohibited").one().id
    code, out, err = runner("restriction", "remove", str(entry_id))
    assert code == 0, err
    _, out, _ = runner("list", "--exclude-prohibited", "--format", "json")
    assert {r["name"] for r in json.loads(out)} == {"Coumarin", "Linalool", "Vanillin"}
    with catalogue.reading() as session:
        assert not curation.find_material(session, "Coumarin").restricted
        actions = [(e.action, e.old_value) for e in session.query(AuditEntry).filter_by(field="restriction")]
    assert ("delete", "prohibited (in-house standard)") in actions


def test_status_restricted_still_works_and_is_an_entry(runner):
    _add(runner, COUMARIN, "Coumarin")
    code, out, _ = runner("status", "Coumarin", "restricted")
    assert code == 0 and "restricted" in out
    _, out, _ = runner("restriction", "list", "Coumarin", "--format", "json")
    assert [(r["kind"], r["authority"]) for r in json.loads(out)] == [("restricted", "not recorded")]
    runner("status", "Coumarin", "unrestricted")
    _, out, _ = runner("restriction", "list", "Coumarin", "--format", "json")
    assert json.loads(out) == []


@pytest.mark.parametrize("argv, message", [
    (["--kind", "restricted", "--authority", "x"], "needs its maximum level"),
    (["--kind", "restricted", "--authority", "x", "--max-percent", "many"], "is not a number"),
    (["--kind", "restricted", "--authority", "x", "--max-percent", "140"], "outside 0-100"),
    (["--kind", "prohibited", "--authority", "x", "--date", "31/01/2025"], "YYYY-MM-DD"),
    (["--kind", "prohibited"], "needs --kind and --authority"),
    (["--kind", "prohibited", "--authority", "a\nb"], "control characters"),
    (["--kind", "prohibited", "--authority", "x", "--source", "literature: my notebook"], "does not look like"),
])
def test_bad_restriction_input_is_refused_in_one_line(runner, argv, message):
    _add(runner, COUMARIN, "Coumarin")
    code, out, err = runner("restriction", "add", "Coumarin", *argv)
    assert code == 2 and message in err and "Traceback" not in err
    _, out, _ = runner("restriction", "list", "Coumarin", "--format", "json")
    assert json.loads(out) == []


def test_seed_catalogue_marks_the_cases_its_notes_mention_from_memory():
    rows = list(csv.DictReader(MATERIALS_FILE.open(encoding="utf-8")))
    marked = {r["name"]: json.loads(r["restrictions"]) for r in rows if r["restrictions"]}
    # the notes of these four say "no longer permitted" or "restricted" (seed_catalog/materials.csv)
    assert set(marked) == {"2-(4-tert-Butylbenzyl)propanal", "Hydroxyisohexyl 3-cyclohexene carboxaldehyde",
                           "Methyl eugenol", "(R)-(+)-Pulegone"}
    for name, entries in marked.items():
        assert all(e["source"].startswith("from memory") and "from memory" in e["reference"] for e in entries)
        restrictions.from_records(entries)  # each entry is valid input


def test_refused_import_reports_what_would_be_added_without_ids(runner, tmp_path):
    path = tmp_path / "two.csv"
    path.write_text("name,smiles,structure_source\nLinalool,CC(C)=CCCC(C)(O)C=C,from memory\nBroken,C1CC,from memory\n")
    code, out, _ = runner("import", str(path), "--verbose")
    assert code == 1
    assert "would have been added" in out and "#" not in out.split("row 2")[0]
    assert "0 added (1 would have been added)" in out
    code, _, err = runner("show", "Linalool")
    assert code == 2 and "no material matches" in err


def test_cas_rn_of_another_material_is_a_conflict_naming_both(runner, tmp_path):
    _add(runner, LINALOOL, "Linalool", "--cas", "78-70-6")
    _add(runner, VANILLIN, "Vanillin", "--cas", "121-33-5")
    path = tmp_path / "clash.csv"
    # Vanillin's structure with Linalool's CAS RN
    path.write_text("name,smiles,cas,cas_source,structure_source\nVanillin,COc1cc(C=O)ccc1O,78-70-6,from memory,from memory\n")
    code, out, _ = runner("import", str(path))
    assert code == 1
    assert "conflict" in out and "Vanillin" in out and "#1 Linalool" in out
    assert "already present" not in out.split("\n")[0]


@pytest.mark.parametrize("reference, accepted", [
    ("my notebook", False),
    ("lab book 12", False),
    ("J. Agric. Food Chem. 50, 1 (2002)", True),  # the example FORMAT.md gives
    ("Chem. Senses 21, 773 (1996)", True),  # DESIGN.md, vibrational hypothesis of olfaction
    ("doi:10.1093/chemse/21.6.773", True),  # DOI syntax: prefix 10.NNNN/suffix (doi.org handbook)
])
def test_literature_provenance_must_look_like_a_reference(reference, accepted):
    if accepted:
        assert curation.Source.parse(f"literature: {reference}").reference == reference
    else:
        with pytest.raises(curation.CurationError, match="journal, volume, first page and year"):
            curation.Source.parse(f"literature: {reference}")


def test_cli_writes_are_attributed_to_actor_option_then_environment(runner, monkeypatch, catalogue):
    _add(runner, LINALOOL, "Linalool")
    runner("--actor", "ana", "status", "Linalool", "retired")
    monkeypatch.setenv("OLIBRA_ACTOR", "ben")
    runner("status", "Linalool", "active")
    with catalogue.reading() as session:
        actors = [e.actor for e in session.query(AuditEntry).filter_by(field="status").order_by(AuditEntry.id)]
    assert actors == ["ana", "ben"]
    _, out, _ = runner("show", "Linalool", "--history")
    assert "None" not in out


def test_cli_refuses_unknown_odor_terms_like_the_web(runner):
    _add(runner, LINALOOL, "Linalool")
    code, out, err = runner("search", "Linalool", "--with-odor", "flowery")
    assert code == 2 and out == ""
    assert "'flowery' is not in the odor vocabulary" in err and "close terms: floral" in err
