"""Curator data kept in the catalogue: base presets (the built-in rules of thumb, curators' versions of
them and their own) and the components of recorded mixtures, through the store, the command line,
the substitute search and the web pages (real catalogues, real records, Flask test client)."""

from __future__ import annotations

import json
import shutil

import pytest
from sqlalchemy import select

from catalogue_helpers import compute_missing_records, draft
from library import cli, functional_groups
from library.catalogue import base_preset_store, curation, mixtures
from library.catalogue.database import Catalogue
from library.catalogue.models import AuditEntry, Material
from library.errors import OlibraError
from library.search import substitutes
from web_helpers import material_id, on_both_backends

# Commercial ionone is a mixture of alpha- and beta-ionone (common practice, no source); the two differ in
# where the ring double bond sits, so they do not share an InChIKey skeleton.
ALPHA_IONONE = "CC(=O)/C=C/C1C(C)=CCCC1(C)C"
BETA_IONONE = "CC(=O)/C=C/C1=C(C)CCCC1(C)C"


@pytest.fixture
def catalogue(web_catalogue):
    """The web test catalogue (on SQLite, or PostgreSQL where a test asks for both backends)."""
    return web_catalogue


@on_both_backends
def test_presets_are_checked_stored_audited_and_restored(catalogue):
    with catalogue.transaction() as session:
        edited = base_preset_store.save_preset(session, "High-pH SOAP", ["aldehyde", "ester", "Nitrile"],
                                               actor="tester")
        own = base_preset_store.save_preset(session, "candle  wax", ["amine", "[SX2H]"], why="soot and odor",
                                            source="measured: burn tests, 2026-05", actor="tester")
    # the built-in name keeps its spelling; group names take the vocabulary's; the built-in why stays
    assert (edited.name, edited.groups, edited.builtin, edited.edited) == (
        "high-pH soap", ("aldehyde", "ester", "nitrile"), True, True)
    assert edited.why == functional_groups.BASE_PRESETS["high-pH soap"][1]
    assert (own.name, own.groups, own.builtin) == ("candle wax", ("amine", "[SX2H]"), False)
    with catalogue.reading() as session:
        found = base_preset_store.presets(session)
        assert [p.name for p in found] == [*functional_groups.BASE_PRESETS, "candle wax"]
        assert base_preset_store.groups_of(session, ["HIGH-PH SOAP"]) == ["aldehyde", "ester", "nitrile"]
        with pytest.raises(OlibraError, match="unknown base preset 'dish soap'; known presets: .*candle wax"):
            base_preset_store.groups_of(session, ["dish soap"])
    for groups, message in ((["aldehide"], "unknown functional group 'aldehide'"),
                            (["[C(=O"], "not a valid SMARTS"), ([" "], "at least one functional group")):
        with pytest.raises(OlibraError, match=message), catalogue.transaction() as session:
            base_preset_store.save_preset(session, "broken", groups)
    with catalogue.transaction() as session:
        assert base_preset_store.remove_preset(session, "high-ph soap", actor="tester") is True
        assert base_preset_store.remove_preset(session, "candle wax", actor="tester") is False
    with pytest.raises(OlibraError, match="can be edited, not removed"), catalogue.transaction() as session:
        base_preset_store.remove_preset(session, "antiperspirant")
    with catalogue.reading() as session:
        assert base_preset_store.presets(session) == functional_groups.builtin_presets()
        trail = session.execute(select(AuditEntry.action, AuditEntry.field, AuditEntry.old_value, AuditEntry.new_value)
                                .where(AuditEntry.entity == "base_preset").order_by(AuditEntry.id)).all()
    builtin_soap = ", ".join(functional_groups.BASE_PRESETS["high-pH soap"][0])
    assert [tuple(t) for t in trail] == [
        ("save", "high-pH soap", builtin_soap, "aldehyde, ester, nitrile"),
        ("save", "candle wax", None, "amine, [SX2H]"),
        ("remove", "high-pH soap", "aldehyde, ester, nitrile", None),
        ("remove", "candle wax", "amine, [SX2H]", None)]


@pytest.fixture(scope="module")
def computed(computed_template, tmp_path_factory):
    """The computed search catalogue plus an 'Ionone' (drawn as its alpha isomer) and beta-ionone."""
    path = tmp_path_factory.mktemp("curator-data") / "catalogue.sqlite"
    shutil.copy(computed_template, path)
    opened = Catalogue(f"sqlite:///{path}")
    with opened.transaction() as session:
        for smiles, name in ((ALPHA_IONONE, "Ionone"), (BETA_IONONE, "beta-Ionone")):
            outcome = curation.add_material(session, draft(smiles, name), actor="test")
            assert outcome.added, outcome.message
    compute_missing_records(opened)
    yield opened
    opened.dispose()


def names(outcome):
    return [c.material.name for c in outcome.candidates]


def run(catalogue, capsys, *argv):
    code = cli.main(["--db", catalogue.url, *argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_a_mixtures_components_leave_its_shortlist_and_it_leaves_theirs(computed, capsys):
    k = 30  # every other material of the catalogue
    assert "beta-Ionone" in names(substitutes.find_substitutes(computed, "Ionone", k=k))  # nothing recorded yet
    code, out, _ = run(computed, capsys, "components", "Ionone", "beta-Ionone")
    assert code == 0 and "components #" in out and "beta-Ionone" in out
    code, out, _ = run(computed, capsys, "show", "beta-Ionone")
    assert "component of    #" in out and "Ionone" in out

    from_mixture = substitutes.find_substitutes(computed, "Ionone", k=k)
    assert "beta-Ionone" not in names(from_mixture)
    assert any("recorded components" in note and "beta-Ionone" in note for note in from_mixture.notes)
    assert "Ionone" not in names(substitutes.find_substitutes(computed, "beta-Ionone", k=k))
    assert "beta-Ionone" in names(substitutes.find_substitutes(computed, "Ionone", k=k, include_own_family=True))

    code, _, err = run(computed, capsys, "components", "Ionone", "Ionone", "no such thing")
    assert code != 0 and "'Ionone' is the mixture itself" in err and "no material matches 'no such thing'" in err
    code, out, _ = run(computed, capsys, "components", "Ionone", "--clear")
    assert code == 0 and "components none recorded" in out
    with computed.reading() as session:
        changes = session.execute(select(AuditEntry.old_value, AuditEntry.new_value).where(
            AuditEntry.entity == "material", AuditEntry.field == "components")).all()
        assert mixtures.components_of(session, curation.find_material(session, "Ionone").id) == []
    assert [(old is None, new is None) for old, new in changes] == [(True, False), (False, True)]


def test_an_edited_preset_changes_what_stable_in_leaves_out(computed, capsys):
    argv = ("search", "Citral", "-k", "30", "--stable-in", "high-pH soap", "--format", "json")
    code, out, _ = run(computed, capsys, *argv)
    assert code == 0 and "Geranyl nitrile" in [hit["name"] for hit in json.loads(out)]
    code, out, _ = run(computed, capsys, "groups", "preset", "save", "high-pH soap", "--avoid", "aldehyde",
                       "ester", "lactone", "schiff base", "phenol", "nitrile")
    assert code == 0 and "avoids aldehyde, ester, lactone, schiff base, phenol, nitrile" in out
    code, out, _ = run(computed, capsys, *argv)
    hits = json.loads(out)
    assert hits and all("nitrile" not in hit["groups"] for hit in hits)
    code, out, _ = run(computed, capsys, "groups", "--format", "json")
    assert code == 0
    code, out, _ = run(computed, capsys, "groups", "preset", "remove", "high-pH soap")
    assert code == 0 and "built-in version is in effect again" in out


@on_both_backends
def test_curators_edit_presets_and_components_on_the_web(catalogue, curator, reader):
    page = reader.get("/presets")
    assert page.status_code == 200 and "hypochlorite bleach" in page.text and 'id="preset-form"' not in page.text
    assert reader.post("/presets", data={"name": "x", "groups": "amine", "csrf_token": reader.token}).status_code == 403
    bad = curator.post("/presets", data={"name": "dish soap", "groups": "aldehide", "csrf_token": curator.token})
    assert bad.status_code == 400 and "unknown functional group" in bad.text
    saved = curator.post("/presets", data={"name": "dish soap", "groups": "aldehyde\nester", "why": "enzymes",
                                           "csrf_token": curator.token}, follow_redirects=True)
    assert saved.status_code == 200 and "Saved base preset &#39;dish soap&#39;: avoids aldehyde, ester." in saved.text
    assert '<option value="dish soap"' in curator.get("/substitutes").text
    removed = curator.post("/presets/remove", data={"name": "dish soap", "csrf_token": curator.token},
                           follow_redirects=True)
    assert "Removed base preset &#39;dish soap&#39;." in removed.text

    citral = material_id(catalogue, "Citral")
    recorded = curator.post(f"/materials/{citral}/components", data={"components": "Geranial\nNeral",
                                                                     "csrf_token": curator.token},
                            follow_redirects=True)
    assert recorded.status_code == 200 and "Components: Geranial, Neral." in recorded.text
    neral = reader.get(f"/materials/{material_id(catalogue, 'Neral')}")
    assert 'id="mixtures"' in neral.text and "Citral</a>" in neral.text
    refused = curator.post(f"/materials/{citral}/components", data={"components": "Citral\nnothing",
                                                                    "csrf_token": curator.token},
                           follow_redirects=True)
    assert "Components not changed" in refused.text and "the mixture itself" in refused.text
    with catalogue.reading() as session:
        assert [m.preferred_name for m in mixtures.components_of(session, citral)] == ["Geranial", "Neral"]
    assert reader.post(f"/materials/{citral}/components", data={"components": "",
                                                                "csrf_token": reader.token}).status_code == 403


@pytest.mark.parametrize("fmt", ["csv", "sdf", "json"])
def test_recorded_components_travel_through_export_and_import(catalogue, tmp_path, fmt):
    from library.catalogue import transfer
    from library.catalogue.database import initialize

    with catalogue.transaction() as session:
        mixtures.set_components(session, curation.find_material(session, "Citral"), ["Neral", "Geranial"])
    with catalogue.reading() as session:
        exported = "".join(transfer.export_materials(session, fmt))
    path = tmp_path / f"catalogue.{fmt}"
    path.write_text(exported, encoding="utf-8")
    fresh = initialize(f"sqlite:///{tmp_path / 'fresh.sqlite'}")
    try:
        with fresh.transaction() as session:
            curation.load_vocabulary(session)
            report = transfer.import_rows(session, transfer.read_rows(path), actor="test")
            assert report.committed and not report.rejected
        with fresh.reading() as session:
            citral = curation.find_material(session, "Citral")
            assert [m.preferred_name for m in mixtures.components_of(session, citral.id)] == ["Geranial", "Neral"]
    finally:
        fresh.dispose()


def test_a_mixture_whose_components_are_not_found_is_not_stored(catalogue, tmp_path):
    from library.catalogue import transfer

    rows = ("name,smiles,structure_source,components\n"
            f"Ionone,{ALPHA_IONONE},from memory,beta-Ionone|nothing like it\n"
            f"beta-Ionone,{BETA_IONONE},from memory,\n")
    path = tmp_path / "ionones.csv"
    path.write_text(rows, encoding="utf-8")
    with catalogue.transaction() as session:
        refused = transfer.import_rows(session, transfer.read_rows(path), actor="test")
        assert not refused.committed
        session.rollback()
    (mixture_row, component_row) = refused.rows
    assert mixture_row.status == "rejected" and "components: no material matches 'nothing like it'" in mixture_row.message
    assert component_row.status == "would be added"
    with catalogue.transaction() as session:
        kept = transfer.import_rows(session, transfer.read_rows(path), actor="test", keep_good=True)
    assert kept.committed and [r.status for r in kept.rows] == ["rejected", "added"]
    with catalogue.reading() as session:
        assert session.scalar(select(Material).where(Material.preferred_name == "Ionone")) is None
        # the taken-out mixture leaves no "create" entry behind; the stored component has its own
        created = session.scalars(select(AuditEntry.new_value).where(AuditEntry.entity == "material",
                                                                      AuditEntry.action == "create")).all()
        assert not [v for v in created if v.startswith("Ionone ")] and [v for v in created if v.startswith("beta-Ionone ")]
