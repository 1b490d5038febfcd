"""The web interface through Flask's test client, on a real catalogue file (and PostgreSQL when configured).

Who may do what (every write route walked from app.url_map), the pages,
form validation, uploads, the odor vocabulary, background recompute jobs,
error pages and the `olibra user` / `olibra serve` commands.
"""

from __future__ import annotations

import html
import io
import json
import re
import subprocess
import sys
import time

import pytest
from rdkit import Chem
from sqlalchemy import func, select

from library import computations
from library.catalogue import accounts, curation, observations, records
from library.catalogue.models import AuditEntry, BackgroundJob, Material, PairFlag, User
from library.search import disagreements
from webui import SecretKeyMissing, create_app
from webui.background import mark_abandoned

from web_helpers import (
    PASSWORD,
    SEED_NAMES,
    csrf_token,
    edit_form,
    material_count,
    material_id,
    on_both_backends,
    sign_in,
    write_requests,
)

# Real aroma materials from library/seed_catalog/materials.csv that the fixture leaves out, for adding.
VANILLIN = "COc1cc(C=O)ccc1O"
COUMARIN = "O=c1ccc2ccccc2o1"
MENTHOL = "CC(C)[C@@H]1CC[C@@H](C)C[C@H]1O"
EXPECTED_WRITE_ENDPOINTS = {
    "curation.add_material", "curation.edit_material", "curation.import_file", "curation.vocabulary",
    "jobs.recompute", "api.add_material", "api.import_file", "api.add_term", "api.recompute",
}


@pytest.fixture
def catalogue(web_catalogue):
    """A copy of the web test catalogue (SEED_NAMES of the seed catalogue and the two accounts)."""
    return web_catalogue


# --- who may do what -------------------------------------------------------------------------------

@on_both_backends
def test_every_write_route_refuses_anonymous_readers_and_tokenless_curators(app, catalogue):
    requests = write_requests(app)
    assert EXPECTED_WRITE_ENDPOINTS <= {endpoint for endpoint, _, _ in requests}
    revision = catalogue.revision()
    body = {"name": "Vanillin", "structure": VANILLIN, "term": "marine", "csrf_token": "x"}

    anonymous = app.test_client()
    token = csrf_token(anonymous)
    reader = app.test_client()
    reader_token = sign_in(reader, "rhea")
    curator = app.test_client()
    sign_in(curator, "cora")
    for endpoint, method, url in requests:
        # anonymous, with a valid CSRF token: sent to sign in (pages) or 401 (API)
        response = anonymous.open(url, method=method, data={**body, "csrf_token": token},
                                  headers={"X-CSRF-Token": token})
        assert response.status_code in (302, 401, 403), (endpoint, response.status_code)
        if response.status_code == 302:
            assert response.headers["Location"].startswith("/sign-in"), endpoint
        # anonymous without a token: refused before anything else
        assert anonymous.open(url, method=method, data=body).status_code == 400, endpoint
        # a reader, with a valid token: forbidden
        response = reader.open(url, method=method, data={**body, "csrf_token": reader_token},
                               headers={"X-CSRF-Token": reader_token})
        assert response.status_code == 403, (endpoint, response.status_code)
        # a curator without a token (form field or header): 400
        response = curator.open(url, method=method, data={k: v for k, v in body.items() if k != "csrf_token"},
                                json=None)
        assert response.status_code == 400, (endpoint, response.status_code)
        assert "Traceback" not in response.text
    assert catalogue.revision() == revision and material_count(catalogue) == len(SEED_NAMES)


def test_reading_needs_a_signed_in_user(client):
    response = client.get("/")
    assert response.status_code == 302 and response.headers["Location"].startswith("/sign-in?next=/")
    response = client.get("/api/materials")
    assert response.status_code == 401 and "sign in first" in response.get_json()["error"]["message"]
    assert client.get("/health").get_json() == {"status": "ok", "materials": len(SEED_NAMES)}


def test_sign_in_rejects_a_wrong_password_and_ignores_foreign_redirects(client):
    token = csrf_token(client)
    response = client.post("/sign-in", data={"username": "cora", "password": "wrong password", "csrf_token": token})
    assert response.status_code == 400 and "user name or password is not right" in response.text
    response = client.post("/sign-in?next=//elsewhere.example/x",
                           data={"username": "cora", "password": PASSWORD, "csrf_token": token})
    assert response.status_code == 302 and response.headers["Location"] == "/"


def test_reader_sees_pages_but_no_curation_forms(client, catalogue):
    sign_in(client, "rhea")
    home = client.get("/")
    assert home.status_code == 200 and "Add material" not in home.text and "Citral" in home.text
    for url in ("/vocabulary", "/jobs", f"/materials/{material_id(catalogue, 'Citral')}"):
        assert client.get(url).status_code == 200, url
    for url in ("/materials/new", "/import", f"/materials/{material_id(catalogue, 'Citral')}/edit"):
        response = client.get(url)
        assert response.status_code == 403 and "Only curators" in response.text, url
    assert 'name="term"' not in client.get("/vocabulary").text


def test_sign_out_ends_the_session(client):
    token = sign_in(client, "rhea")
    assert client.post("/sign-out", data={"csrf_token": token}).status_code == 302
    assert client.get("/").status_code == 302


# --- catalogue browser and material page -----------------------------------------------------------

@pytest.mark.parametrize("query, expected", [
    ("limonene", {"(R)-(+)-Limonene", "(S)-(-)-Limonene"}),
    ("linalol", {"Linalool"}),                       # a synonym
    ("5392-40-5", {"Citral"}),                       # CAS RN
    ("WTEVQBCEXWBHNA", {"Citral", "Geranial", "Neral"}),  # InChIKey skeleton block (stereo-free part)
    ("no such thing", set()),
])
def test_catalogue_filter(client, query, expected):
    sign_in(client, "rhea")
    found = {m["name"] for m in client.get("/api/materials", query_string={"q": query}).get_json()["materials"]}
    assert found == expected
    fragment = client.get("/", query_string={"q": query, "fragment": "1"})
    assert fragment.status_code == 200 and "<html" not in fragment.text
    for name in expected:
        assert name in fragment.text


@on_both_backends
def test_catalogue_paging(app, client):
    app.config["OLIBRA_PAGE_SIZE"] = 3
    sign_in(client, "rhea")
    seen = []
    for page in (1, 2, 3):
        text = client.get("/", query_string={"page": page}).text
        seen += re.findall(r'<a href="/materials/\d+">([^<]+)</a>', text)
    assert sorted(seen) == sorted(SEED_NAMES)
    assert "page 1 of 3" in client.get("/").text
    response = client.get("/", query_string={"page": "zero"})
    assert response.status_code == 400 and "is not a page number" in response.text


def test_material_page_shows_identifiers_odors_provenance_and_history(client, catalogue):
    sign_in(client, "rhea")
    citral = material_id(catalogue, "Citral")
    page = client.get(f"/materials/{citral}").text
    for expected in ("WTEVQBCEXWBHNA-UHFFFAOYSA-N", "5392-40-5", "C10H16O", "lemon", "from memory",
                     "No shape record yet", "create"):
        assert expected in page
    svg = client.get(f"/materials/{citral}/depiction.svg")
    assert svg.status_code == 200 and svg.mimetype == "image/svg+xml" and b"<svg" in svg.data
    assert client.get("/materials/99999").status_code == 404


@on_both_backends
def test_material_page_shows_shape_values_and_marks_stale_records(client, catalogue):
    """A real shape computation is stored; NPR1/NPR2 appear; a record from an older engine is marked stale."""
    plan = computations.Plan(kinds=("shape",))
    stamp = computations.stamps(plan)[0]
    octanal = material_id(catalogue, "Octanal")
    with catalogue.transaction() as session:
        material = session.get(Material, octanal)
        arrays, summary = computations.compute_material(plan, material.smiles)["shape"]
        records.save_record(session, material, stamp, arrays, summary)
        old_stamp = records.EngineStamp("shape", stamp.engine_name, "0.9-old", stamp.parameters)
        other = session.get(Material, material_id(catalogue, "Linalool"))
        records.save_record(session, other, old_stamp, arrays, summary)
    sign_in(client, "rhea")
    page = client.get(f"/materials/{octanal}").text
    assert "NPR1" in page and "NPR2" in page and f"{summary['npr1']:.3f}" in page
    assert "tag-current" in page and "shape record stale" not in page
    stale = client.get(f"/materials/{material_id(catalogue, 'Linalool')}").text
    assert "shape record stale" in stale and ">stale<" in stale
    api = client.get(f"/api/materials/{octanal}").get_json()
    assert [r["state"] for r in api["computed_records"]] == ["current"]


def test_pair_flags_are_listed_with_the_caution(client, catalogue):
    r_id, s_id = material_id(catalogue, "(R)-(+)-Limonene"), material_id(catalogue, "(S)-(-)-Limonene")
    with catalogue.transaction() as session:
        session.add(PairFlag(material_a_id=min(r_id, s_id), material_b_id=max(r_id, s_id),
                             kind="enantiomers", note="same vibrations, mirror shapes", created_by="cora"))
    sign_in(client, "rhea")
    page = client.get(f"/materials/{r_id}").text
    assert "enantiomers" in page and "(S)-(-)-Limonene" in page
    assert "not a safety or regulatory finding" in page and "IFRA Standards" in page


def test_pair_flags_can_be_edited_and_withdrawn_with_history(client, catalogue):
    r_id, s_id = material_id(catalogue, "(R)-(+)-Limonene"), material_id(catalogue, "(S)-(-)-Limonene")
    with catalogue.transaction() as session:
        flag = PairFlag(material_a_id=min(r_id, s_id), material_b_id=max(r_id, s_id),
                        kind="other", note="first look", created_by="cora")
        session.add(flag)
        session.flush()
        flag_id = flag.id
    token = sign_in(client, "cora")
    page = client.get(f"/materials/{r_id}").text
    assert f'action="/flags/{flag_id}/edit"' in page and f'action="/flags/{flag_id}/withdraw"' in page
    back = f"/materials/{r_id}"
    edited = client.post(f"/flags/{flag_id}/edit", data={"csrf_token": token, "kind": "vibration-alike smell-different",
                                                         "note": "panel says different", "next": back})
    assert edited.status_code == 303 and edited.headers["Location"] == back
    refused = client.post(f"/flags/{flag_id}/edit", data={"csrf_token": token, "kind": "smells nice", "next": back},
                          follow_redirects=True)
    assert "The flag was not changed" in refused.text and "is not one of" in html.unescape(refused.text)
    withdrawn = client.post(f"/flags/{flag_id}/withdraw", data={"csrf_token": token, "next": back},
                            follow_redirects=True)
    assert "was withdrawn" in withdrawn.text and "No pair flags." in withdrawn.text
    with catalogue.reading() as session:
        assert session.get(PairFlag, flag_id) is None
        trail = session.scalars(select(AuditEntry).where(AuditEntry.entity == "pair_flag",
                                                         AuditEntry.entity_id == flag_id)
                                .order_by(AuditEntry.id)).all()
        assert [e.action for e in trail] == ["update", "withdraw"]
        assert trail[0].old_value.endswith("other: first look")
        assert trail[0].new_value.endswith("vibration-alike smell-different: panel says different")
        assert trail[1].actor == "cora"
    sign_in(client, "rhea")
    assert client.post(f"/flags/{flag_id}/withdraw", data={"csrf_token": token}).status_code in (400, 403)


def test_the_default_flag_kind_follows_the_direction_and_the_observation():
    # the kinds' own wording: a pair the shape metric calls alike but that smells different, and so on
    assert disagreements.default_flag_kind("shape-not-vibration") == "shape-alike smell-different"
    assert disagreements.default_flag_kind("shape-not-vibration", "shape") == "vibration-unalike smell-alike"
    assert disagreements.default_flag_kind("vibration-not-shape") == "vibration-alike smell-different"
    assert disagreements.default_flag_kind("vibration-not-shape", "vibration") == "shape-unalike smell-alike"
    assert {disagreements.default_flag_kind(d, m) for d in disagreements.DIRECTIONS
            for m in (None, "shape", "vibration")} <= set(observations.FLAG_KINDS)


# --- adding and editing ----------------------------------------------------------------------------

def add_form(token, **values):
    data = {"csrf_token": token, "structure": VANILLIN, "name": "Vanillin", "synonyms": "",
            "cas": "121-33-5", "family": "gourmand", "odors": "vanilla:1.0, sweet", "notes": "",
            "source": "from memory"}
    data.update(values)
    return data


@on_both_backends
def test_add_material_stores_it_with_audit(client, catalogue):
    token = sign_in(client, "cora")
    response = client.post("/materials/new", data=add_form(token))
    assert response.status_code == 302
    page = client.get(response.headers["Location"]).text
    assert "Vanillin" in page and "121-33-5" in page and "vanilla" in page
    with catalogue.reading() as session:
        vanillin = curation.find_material(session, "Vanillin")
        entry = session.scalar(select(AuditEntry).where(AuditEntry.entity_id == vanillin.id,
                                                        AuditEntry.entity == "material"))
        assert entry.actor == "cora" and entry.action == "create"


@pytest.mark.parametrize("values, message", [
    ({"name": ""}, "every material needs a name"),
    ({"structure": ""}, "structure is empty"),
    ({"structure": "C1CC(C"}, "SMILES"),
    ({"cas": "121-33-6"}, "check digit"),
    ({"odors": "vanilla, moonlight"}, "moonlight not in the vocabulary"),
    ({"odors": "vanilla:7"}, "outside 0-1"),
    ({"source": "a friend told me"}, "does not start with one of"),
    ({"name": "Citral"}, "is already the name of"),
])
def test_add_material_form_validation(client, catalogue, values, message):
    token = sign_in(client, "cora")
    response = client.post("/materials/new", data=add_form(token, **values))
    assert response.status_code == 400
    assert message in response.text and "Traceback" not in response.text
    assert material_count(catalogue) == len(SEED_NAMES)


def test_add_material_reports_every_problem_beside_its_field_in_one_pass(client, catalogue):
    token = sign_in(client, "cora")
    response = client.post("/materials/new", data=add_form(
        token, name="", cas="121-33-6", odors="vanilla, moonlight", source="a friend told me"))
    assert response.status_code == 400
    page = response.text
    for message in ("every material needs a name", "has check digit 6", "moonlight not in the vocabulary",
                    "does not start with one of"):
        assert page.count(message) == 1, message
    # each message sits inside its own field's block, not in a banner above the form
    fields = re.findall(r'<div class="field has-error">(.*?)</div>', page, flags=re.S)
    assert len(fields) == 4
    assert any('name="cas"' in block and "has check digit 6" in block for block in fields)
    assert any('name="odors"' in block and "moonlight" in block for block in fields)
    assert material_count(catalogue) == len(SEED_NAMES)


def test_a_known_structure_is_reported_before_the_other_fields(client, catalogue):
    token = sign_in(client, "cora")
    citral = material_id(catalogue, "Citral")
    response = client.post("/materials/new", data=add_form(token, structure="CC(C)=CCCC(C)=CC=O",
                                                           name="", cas="121-33-6"))
    assert response.status_code == 409
    assert f'href="/materials/{citral}"' in response.text and "has check digit" not in response.text


def test_adding_a_known_structure_points_to_the_existing_record(client, catalogue):
    token = sign_in(client, "cora")
    citral = material_id(catalogue, "Citral")
    response = client.post("/materials/new", data=add_form(token, structure="CC(C)=CCCC(C)=CC=O",
                                                           name="Lemonal", cas="", odors=""))
    assert response.status_code == 409
    assert f'href="/materials/{citral}"' in response.text and "already in the catalogue" in response.text
    assert material_count(catalogue) == len(SEED_NAMES)


def test_names_are_escaped(client):
    token = sign_in(client, "cora")
    response = client.post("/materials/new", data=add_form(token, name="<script>alert(1)</script> vanillin"))
    page = client.get(response.headers["Location"]).text
    assert "&lt;script&gt;alert(1)&lt;/script&gt; vanillin" in page and "<script>alert(1)" not in page


@on_both_backends
def test_edit_material_audits_every_change(client, catalogue):
    sign_in(client, "cora")
    neral = material_id(catalogue, "Neral")
    form = edit_form(client, neral)
    assert form["name"] == "Neral" and form["cas"] == "106-26-3"
    form.update(name="Neral (cis-citral)", family="citrus-fresh", odors="lemon:0.9, green",
                synonyms=form["synonyms"] + "\ncis-citral", restricted="y", notes="checked by panel")
    response = client.post(f"/materials/{neral}/edit", data=form)
    assert response.status_code == 302, response.text
    with catalogue.reading() as session:
        material = session.get(Material, neral)
        assert material.preferred_name == "Neral (cis-citral)" and material.restricted
        assert "cis-citral" in {s.name for s in material.synonyms}
        changes = {e.field: (e.old_value, e.new_value) for e in session.scalars(
            select(AuditEntry).where(AuditEntry.entity_id == neral, AuditEntry.action == "update",
                                     AuditEntry.entity == "material"))}
    assert changes["preferred_name"] == ("Neral", "Neral (cis-citral)")
    assert changes["olfactive_family"] == ("citrus", "citrus-fresh")
    with catalogue.reading() as session:  # the restricted box records a restriction entry, audited
        added = session.scalars(select(AuditEntry.new_value).where(
            AuditEntry.entity_id == neral, AuditEntry.field == "restriction", AuditEntry.action == "create")).all()
    assert added == ["restricted (not recorded)"]
    assert changes["odor"][1] == "green|lemon:0.9"
    assert changes["notes"][1] == "checked by panel"
    page = client.get(f"/materials/{neral}").text
    assert "Neral (cis-citral)" in page and "citrus-fresh" in page and "restricted" in page


@pytest.mark.parametrize("change, message", [
    ({"name": "Citral"}, "already used by"),
    ({"cas": "5392-40-5"}, "already used by"),
    ({"cas": "106-26-4"}, "check digit"),
    ({"odors": "lemon, stardust"}, "stardust not in the vocabulary"),
    ({"name": ""}, "every material needs a name"),
])
def test_a_refused_edit_changes_nothing(client, catalogue, change, message):
    sign_in(client, "cora")
    neral = material_id(catalogue, "Neral")
    form = edit_form(client, neral)
    form.update(synonyms="only this synonym", family="changed", **change)
    response = client.post(f"/materials/{neral}/edit", data=form)
    assert response.status_code == 400 and message in response.text
    with catalogue.reading() as session:
        material = session.get(Material, neral)
        assert material.preferred_name == "Neral" and material.olfactive_family == "citrus"
        assert "only this synonym" not in {s.name for s in material.synonyms}
        assert session.scalar(select(func.count()).select_from(AuditEntry).where(
            AuditEntry.entity_id == neral, AuditEntry.action == "update")) == 0


def test_an_edit_over_a_newer_change_is_refused(client, catalogue):
    sign_in(client, "cora")
    neral = material_id(catalogue, "Neral")
    form = edit_form(client, neral)
    other = app_client = client.application.test_client()
    sign_in(app_client, "cora")
    newer = edit_form(other, neral)
    newer["notes"] = "changed first"
    assert other.post(f"/materials/{neral}/edit", data=newer).status_code == 302
    form["notes"] = "changed second"
    response = client.post(f"/materials/{neral}/edit", data=form)
    assert response.status_code == 400 and "Someone changed this material" in response.text
    with catalogue.reading() as session:
        assert session.get(Material, neral).notes == "changed first"


# --- import ----------------------------------------------------------------------------------------

def upload(client, token, content: bytes, filename: str, **fields):
    data = {"csrf_token": token, "file": (io.BytesIO(content), filename)}
    data.update(fields)
    return client.post("/import", data=data, content_type="multipart/form-data")


GOOD_AND_BAD = (b"name,smiles,cas,structure_source,cas_source\n"
                b"Vanillin,COc1cc(C=O)ccc1O,121-33-5,from memory,from memory\n"
                b"Broken ring,C1CC(C,,from memory,\n"
                b"Coumarin,O=c1ccc2ccccc2o1,91-64-5,from memory,from memory\n")


@on_both_backends
def test_import_with_a_bad_row_stores_nothing_and_reports_it(client, catalogue):
    token = sign_in(client, "cora")
    response = upload(client, token, GOOD_AND_BAD, "materials.csv")
    assert response.status_code == 422
    assert "Broken ring" in response.text and "rejected" in response.text and "nothing was imported" in response.text
    assert material_count(catalogue) == len(SEED_NAMES)


@on_both_backends
def test_import_keeps_good_rows_when_asked(client, catalogue):
    token = sign_in(client, "cora")
    response = upload(client, token, GOOD_AND_BAD, "materials.csv", keep_good="y")
    assert response.status_code == 200 and "2 added" in response.text and "1 rejected" in response.text
    assert material_count(catalogue) == len(SEED_NAMES) + 2


def test_import_of_an_sdf_file(client, catalogue):
    token = sign_in(client, "cora")
    mol = Chem.MolFromSmiles(MENTHOL)
    mol.SetProp("_Name", "(-)-Menthol")
    mol.SetProp("cas", "2216-51-5")
    mol.SetProp("structure_source", "from memory")
    mol.SetProp("cas_source", "from memory")
    buffer = io.StringIO()
    writer = Chem.SDWriter(buffer)
    writer.write(mol)
    writer.close()
    response = upload(client, token, buffer.getvalue().encode(), "menthol.sdf")
    assert response.status_code == 200, response.text
    with catalogue.reading() as session:
        assert curation.find_material(session, "2216-51-5").preferred_name == "(-)-Menthol"


@pytest.mark.parametrize("content, filename, message", [
    (GOOD_AND_BAD, "materials.xlsx", "is not a CSV, TSV or SDF file"),
    (b"\x00\x01\x02binary", "materials.csv", "looks binary"),
    (b"", "materials.csv", "is empty"),
    (b"title,smiles\nVanillin,COc1cc(C=O)ccc1O\n", "materials.csv", "unknown column"),
    ("name,smiles\nVanillin,COc1cc(C=O)ccc1O\n".encode("utf-16"), "materials.csv", "looks binary"),
])
def test_bad_uploads_are_refused_with_the_reason(client, catalogue, content, filename, message):
    token = sign_in(client, "cora")
    response = upload(client, token, content, filename)
    assert response.status_code == 400 and message in response.text
    assert material_count(catalogue) == len(SEED_NAMES)


def test_missing_file_is_a_form_error(client):
    token = sign_in(client, "cora")
    response = client.post("/import", data={"csrf_token": token}, content_type="multipart/form-data")
    assert response.status_code == 400 and "Choose a CSV, TSV or SDF file" in response.text


def test_too_large_upload_gets_our_413_page(app, client, catalogue):
    app.config["MAX_CONTENT_LENGTH"] = 2048
    token = sign_in(client, "cora")
    response = upload(client, token, GOOD_AND_BAD * 40, "materials.csv")
    assert response.status_code == 413
    assert "larger than the limit of this server, 2 KiB" in response.text and "Traceback" not in response.text
    assert material_count(catalogue) == len(SEED_NAMES)


# --- vocabulary ------------------------------------------------------------------------------------

def test_vocabulary_list_and_add(client, catalogue):
    token = sign_in(client, "cora")
    page = client.get("/vocabulary").text
    assert "lemon" in page and "Add term" in page
    response = client.post("/vocabulary", data={"csrf_token": token, "term": "Seaweed", "family": "fresh"})
    assert response.status_code == 302
    assert "seaweed" in client.get("/vocabulary").text
    response = client.post("/vocabulary", data={"csrf_token": token, "term": "sea|salt"})
    assert response.status_code == 400 and "without '|'" in html.unescape(response.text)
    with catalogue.reading() as session:
        assert "seaweed" in curation.vocabulary(session) and "sea|salt" not in curation.vocabulary(session)


# --- background recompute --------------------------------------------------------------------------

def wait_for_job(client, job_id: int, *, limit_s: float = 180.0) -> dict:
    """Poll the JSON endpoint until the job ends (the limit only stops a hung test)."""
    deadline = time.monotonic() + limit_s
    while True:
        job = client.get(f"/api/jobs/{job_id}").get_json()
        if job["state"] not in ("queued", "running") or time.monotonic() > deadline:
            return job
        time.sleep(0.3)


def keep_only_octanal_and_citral(catalogue, client):
    """Retire every material but Octanal and Citral (a two-material recompute); sign in as cora."""
    with catalogue.transaction() as session:
        for material in session.scalars(select(Material)):
            if material.preferred_name not in {"Octanal", "Citral"}:
                curation.set_status(session, material, "retired", actor="test")
    return sign_in(client, "cora")


@on_both_backends
def test_recompute_job_runs_in_the_background_and_its_progress_is_stored(client, catalogue):
    token = keep_only_octanal_and_citral(catalogue, client)
    response = client.post("/jobs/recompute", data={"csrf_token": token, "kinds": "shape", "engine": "mmff"})
    assert response.status_code == 302 and re.match(r"^/jobs/\d+$", response.headers["Location"])
    job_id = int(response.headers["Location"].rsplit("/", 1)[1])
    job = wait_for_job(client, job_id)
    assert job["state"] == "finished", job
    assert (job["total"], job["done"], job["failed"]) == (2, 2, 0)
    assert job["created_by"] == "cora" and "2 of 2 material(s) computed" in job["message"]
    page = client.get(f"/jobs/{job_id}").text  # the progress survives a reload: it is in the database
    assert 'id="job-progress" max="2" value="2"' in page and "finished" in page
    octanal = client.get(f"/materials/{material_id(catalogue, 'Octanal')}").text
    assert "NPR1" in octanal and "tag-current" in octanal
    again = client.post("/jobs/recompute", data={"csrf_token": token, "kinds": "shape", "engine": "mmff"})
    follow = client.get(again.headers["Location"])
    assert "nothing to compute: every record is current" in follow.text


def test_a_recompute_job_runs_on_the_dask_cluster_the_server_is_configured_with(app, client, catalogue):
    pytest.importorskip("distributed", reason="the cluster extra (dask.distributed) is not installed")
    token = keep_only_octanal_and_citral(catalogue, client)
    app.config["OLIBRA_JOB_CLUSTER"] = "local:x"  # a mistyped address: the job page says what to write
    response = client.post("/jobs/recompute", data={"csrf_token": token, "kinds": "shape", "engine": "mmff"})
    job = wait_for_job(client, int(response.headers["Location"].rsplit("/", 1)[1]))
    assert job["state"] == "failed" and "local:N" in job["message"], job
    app.config["OLIBRA_JOB_CLUSTER"] = "local:1"
    response = client.post("/jobs/recompute", data={"csrf_token": token, "kinds": "shape", "engine": "mmff"})
    job = wait_for_job(client, int(response.headers["Location"].rsplit("/", 1)[1]))
    assert job["state"] == "finished" and (job["total"], job["done"], job["failed"]) == (2, 2, 0), job
    octanal = client.get(f"/materials/{material_id(catalogue, 'Octanal')}").text
    assert "NPR1" in octanal and "tag-current" in octanal


def test_an_added_material_gets_its_records_queued_and_shows_the_job(app, client, catalogue):
    app.config["OLIBRA_COMPUTE_ON_ADD"] = True
    token = sign_in(client, "cora")
    response = client.post("/materials/new", data=add_form(token))
    assert response.status_code == 302
    vanillin = int(response.headers["Location"].rsplit("/", 1)[1])
    page = client.get(f"/materials/{vanillin}").text
    assert 'id="material-job"' in page and f"material #{vanillin}" in page
    job_id = int(re.search(r'href="/jobs/(\d+)"', page.split('id="material-job"')[1]).group(1))
    job = wait_for_job(client, job_id)
    assert job["state"] == "finished" and (job["total"], job["done"], job["failed"]) == (1, 1, 0), job
    assert job["parameters"]["material_ids"] == [vanillin]
    page = client.get(f"/materials/{vanillin}").text
    assert "NPR1" in page and page.count("tag-current") == 3  # shape, vibration and tunnelling records
    # compute now: every record is current, so the job has nothing to do and says so
    again = client.post(f"/materials/{vanillin}/compute", data={"csrf_token": token}, follow_redirects=True)
    assert "computes this material" in again.text and "tag-finished" in again.text
    assert client.post(f"/materials/{vanillin}/compute", data={}).status_code == 400  # no CSRF token
    sign_in(client, "rhea")
    assert "Compute now" not in client.get(f"/materials/{vanillin}").text
    assert client.post(f"/materials/{vanillin}/compute", data={"csrf_token": token}).status_code in (400, 403)


def a_job_seems_to_run(app):
    """A job row left 'running' (no thread behind it), as a busy server would show; returns the bookkeeping."""
    bookkeeping = app.extensions["olibra"].bookkeeping
    with bookkeeping.begin() as session:
        session.add(BackgroundJob(kind="recompute", description="recompute shape records", state="running",
                                  total=5, done=2, created_by="cora"))
    return bookkeeping


def test_compute_now_waits_behind_a_running_job(app, client, catalogue):
    a_job_seems_to_run(app)
    token = sign_in(client, "cora")
    octanal = material_id(catalogue, "Octanal")
    client.post(f"/materials/{octanal}/compute", data={"csrf_token": token})
    page = client.get(f"/materials/{octanal}").text.split('id="material-job"')[1]
    assert "tag-queued" in page and f"material #{octanal}" in page


def test_only_one_recompute_at_a_time_and_abandoned_jobs_are_marked(app, client, catalogue):
    bookkeeping = a_job_seems_to_run(app)
    token = sign_in(client, "cora")
    response = client.post("/jobs/recompute", data={"csrf_token": token, "kinds": "shape", "engine": "mmff"},
                           follow_redirects=True)
    assert "The recompute was not started" in response.text and "is still running" in response.text
    api = client.post("/api/jobs/recompute", json={"kinds": "shape"}, headers={"X-CSRF-Token": token})
    assert api.status_code == 400 and "is still running" in api.get_json()["error"]["message"]
    assert mark_abandoned(bookkeeping) == 1
    with bookkeeping() as session:
        states = [j.state for j in session.scalars(select(BackgroundJob))]
    assert states == ["interrupted"]


# --- errors and configuration ----------------------------------------------------------------------

def test_error_pages_are_ours_and_show_no_traceback(app, client):
    def broken():
        raise RuntimeError("internal detail that must not leak")

    app.add_url_rule("/broken-for-test", view_func=broken)
    app.config["PROPAGATE_EXCEPTIONS"] = False
    sign_in(client, "rhea")
    response = client.get("/broken-for-test")
    assert response.status_code == 500
    assert "Something went wrong on our side" in response.text
    assert "internal detail" not in response.text and "Traceback" not in response.text
    response = client.get("/no/such/page")
    assert response.status_code == 404 and "Not found" in response.text and "olibra" in response.text
    response = client.get("/jobs/recompute")
    assert response.status_code == 405 and "does not accept" in response.text
    assert client.get("/api/no-such-thing").get_json()["error"]["status"] == 404
    assert "default-src 'self'" in response.headers["Content-Security-Policy"]


def test_an_uninitialized_catalogue_gets_a_clear_page(tmp_path):
    application = create_app({"OLIBRA_DB": f"sqlite:///{tmp_path / 'empty.sqlite'}", "TESTING": True})
    client = application.test_client()
    response = client.post("/sign-in", data={"username": "cora", "password": PASSWORD, "csrf_token": csrf_token(client)})
    assert response.status_code == 503 and "no olibra catalogue yet" in response.text
    # the web gives its own hint, never a command to type
    assert "must create or upgrade the catalogue" in response.text and "olibra init" not in response.text


def test_a_secret_key_is_required_outside_testing(monkeypatch, sqlite_url):
    monkeypatch.delenv("OLIBRA_SECRET_KEY", raising=False)
    with pytest.raises(SecretKeyMissing, match="OLIBRA_SECRET_KEY"):
        create_app({"OLIBRA_DB": sqlite_url})
    monkeypatch.setenv("OLIBRA_SECRET_KEY", "k" * 64)
    assert create_app({"OLIBRA_DB": sqlite_url}).config["SECRET_KEY"] == "k" * 64


# --- command line ----------------------------------------------------------------------------------

def test_user_commands(runner, catalogue):
    code, out, _ = runner("user", "add", "petra", "--role", "curator", "--password-stdin", stdin="long enough pw\n")
    assert code == 0 and "petra added as curator" in out
    code, _, err = runner("user", "add", "petra", "--password-stdin", stdin="long enough pw\n")
    assert code == 2 and "already exists" in err
    code, _, err = runner("user", "add", "quentin", "--password-stdin", stdin="short\n")
    assert code == 2 and "too short" in err
    code, _, err = runner("user", "add", "bad name!", "--password-stdin", stdin="long enough pw\n")
    assert code == 2 and "is not valid" in err
    code, out, _ = runner("user", "list", "--format", "json")
    assert {(u["name"], u["role"]) for u in json.loads(out)} == {
        ("petra", "curator"), ("cora", "curator"), ("rhea", "reader")}
    code, out, _ = runner("user", "password", "petra", "--password-stdin", stdin="another long pw\n")
    assert code == 0
    with accounts.bookkeeping_sessions(catalogue.engine)() as session:
        assert accounts.authenticate(session, "petra", "another long pw").role == "curator"
        assert accounts.authenticate(session, "petra", "long enough pw") is None
        assert accounts.authenticate(session, "nobody", "another long pw") is None
        stored = session.scalar(select(User.password_hash).where(User.username == "petra"))
    assert "another long pw" not in stored


def test_serve_refuses_an_open_address_without_a_key(runner, monkeypatch):
    monkeypatch.delenv("OLIBRA_SECRET_KEY", raising=False)
    code, _, err = runner("serve", "--host", "0.0.0.0")
    assert code == 2 and "needs a fixed secret key" in err


def test_serve_runs_a_real_server(catalogue):
    """`olibra serve` on a free port: it prints its address and answers the health page."""
    import socket
    import urllib.request

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    env = {k: v for k, v in __import__("os").environ.items() if k != "OLIBRA_SECRET_KEY"}
    process = subprocess.Popen([sys.executable, "-m", "library.cli", "--db", catalogue.url, "serve", "--port", str(port)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        line = process.stdout.readline()
        assert f"http://127.0.0.1:{port}/" in line, (line, process.stderr.read() if process.poll() else "")
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=30) as response:
            assert json.load(response) == {"status": "ok", "materials": len(SEED_NAMES)}
    finally:
        process.terminate()
        _, err = process.communicate(timeout=30)
    assert "using a random key" in err and "Traceback" not in err


# --- JSON API --------------------------------------------------------------------------------------

def api_sign_in(client, username: str) -> str:
    token = client.get("/api/session").get_json()["csrf_token"]
    response = client.post("/api/session", json={"username": username, "password": PASSWORD},
                           headers={"X-CSRF-Token": token})
    assert response.status_code == 200 and response.get_json()["role"] in ("reader", "curator")
    return response.get_json()["csrf_token"]


@on_both_backends
def test_api_reads_and_writes(client, catalogue):
    assert client.get("/api/session").get_json()["signed_in"] is False
    token = client.get("/api/session").get_json()["csrf_token"]
    wrong = client.post("/api/session", json={"username": "cora", "password": "nope"}, headers={"X-CSRF-Token": token})
    assert wrong.status_code == 401
    token = api_sign_in(client, "cora")
    headers = {"X-CSRF-Token": token}

    listing = client.get("/api/materials", query_string={"q": "limonene", "per_page": 1}).get_json()
    assert listing["total"] == 2 and listing["pages"] == 2 and len(listing["materials"]) == 1
    citral = client.get(f"/api/materials/{material_id(catalogue, 'Citral')}").get_json()
    assert citral["inchikey"] == "WTEVQBCEXWBHNA-UHFFFAOYSA-N" and citral["provenance"]["structure"] == "from memory"
    assert {o["term"] for o in citral["odor"]} >= {"lemon", "citrus"}

    added = client.post("/api/materials", headers=headers, json={
        "structure": COUMARIN, "name": "Coumarin", "cas": "91-64-5", "odors": ["sweet:0.8", "almond"],
        "synonyms": ["2H-chromen-2-one"], "source": "from memory"})
    assert added.status_code == 201, added.get_json()
    body = added.get_json()
    assert body["name"] == "Coumarin" and body["synonyms"] == ["2H-chromen-2-one"] and body["cas"] == "91-64-5"
    again = client.post("/api/materials", headers=headers, json={"structure": COUMARIN, "name": "Coumarin again"})
    assert again.status_code == 409 and again.get_json()["existing"]["id"] == body["id"]

    refused = client.post("/api/materials", headers=headers, json={
        "structure": "C1CC(C", "name": "", "cas": "121-33-6", "odors": ["moonlight"]})
    assert refused.status_code == 400
    assert set(refused.get_json()["error"]["fields"]) == {"structure", "name", "cas", "odors"}
    for payload, message in [({"name": "Vanillin"}, "structure is empty"),
                             ({"structure": VANILLIN, "name": "Vanillin", "colour": "white"}, "unknown field"),
                             ({"structure": "not a molecule", "name": "Vanillin"}, "SMILES")]:
        refused = client.post("/api/materials", headers=headers, json=payload)
        assert refused.status_code == 400 and message in refused.get_json()["error"]["message"], payload
    refused = client.post("/api/materials", headers=headers, data="name=Vanillin")
    assert refused.status_code == 400 and "JSON object" in refused.get_json()["error"]["message"]
    assert material_count(catalogue) == len(SEED_NAMES) + 1

    assert client.post("/api/vocabulary", headers=headers, json={"term": "Seaweed", "family": "fresh"}).status_code == 201
    assert client.post("/api/vocabulary", headers=headers, json={"term": "seaweed"}).status_code == 200
    terms = {t["term"]: t for t in client.get("/api/vocabulary").get_json()["terms"]}
    assert terms["seaweed"]["family"] == "fresh" and terms["sweet"]["materials"] >= 1

    imported = client.post("/api/import", headers=headers, content_type="multipart/form-data",
                           data={"file": (io.BytesIO(GOOD_AND_BAD), "materials.csv")})
    assert imported.status_code == 422
    report = imported.get_json()
    assert report["committed"] is False and [r["status"] for r in report["rows"]] == ["would be added", "rejected", "present"]
    imported = client.post("/api/import", headers=headers, content_type="multipart/form-data",
                           data={"file": (io.BytesIO(GOOD_AND_BAD), "materials.csv"), "keep_good": "1"})
    assert imported.status_code == 200 and imported.get_json()["added"] == 1  # Coumarin is already present
    assert material_count(catalogue) == len(SEED_NAMES) + 2

    assert client.get("/api/jobs/12345").status_code == 404
    jobs = client.get("/api/jobs").get_json()
    assert jobs["jobs"] == [] and {r["kind"] for r in jobs["records"]} == {"shape", "vibration", "tunnelling"}
    assert client.delete("/api/session", headers=headers).get_json() == {"signed_in": False}
    assert client.get("/api/materials").status_code == 401


def test_api_refuses_writes_without_the_csrf_header_and_from_readers(client):
    token = api_sign_in(client, "cora")
    response = client.post("/api/vocabulary", json={"term": "seaweed"})
    assert response.status_code == 400 and "X-CSRF-Token" in response.get_json()["error"]["message"]
    reader = client.application.test_client()
    reader_token = api_sign_in(reader, "rhea")
    response = reader.post("/api/vocabulary", json={"term": "seaweed"}, headers={"X-CSRF-Token": reader_token})
    assert response.status_code == 403 and "ask a curator" in response.get_json()["error"]["message"]
    assert token != reader_token


def test_api_bad_paging_arguments(client):
    api_sign_in(client, "rhea")
    for arguments, message in [({"per_page": "0"}, "per_page"), ({"page": "-1"}, "not a page number"),
                               ({"q": "x" * 300}, "at most 200")]:
        response = client.get("/api/materials", query_string=arguments)
        assert response.status_code == 400 and message in response.get_json()["error"]["message"], arguments


def test_the_npr_triangle_labels_both_axes_and_keeps_its_labels_apart():
    from webui.charts import npr_triangle_svg

    svg = str(npr_triangle_svg(0.243, 0.841, name="Citral"))
    labels = dict((text, (float(x), float(y))) for x, y, text in
                  re.findall(r'<text class="axis-label" x="([\d.]+)" y="([\d.]+)"[^>]*>([^<]+)</text>', svg))
    assert set(labels) == {"NPR1", "NPR2"}
    corners = {text: (float(x), float(y)) for x, y, text in
               re.findall(r'<text class="tick corner" x="([\d.]+)" y="([\d.]+)"[^>]*>([^<]+)</text>', svg)}
    assert set(corners) == {"rod", "disc", "sphere"}
    ticks = [(float(x), float(y)) for x, y in re.findall(r'<text class="tick" x="([\d.]+)" y="([\d.]+)"', svg)]
    # every label anchor is more than a 10 px text line from every other (the disc and NPR1 labels were 10 px apart)
    anchors = [*labels.values(), *corners.values(), *ticks]
    for i, (x1, y1) in enumerate(anchors):
        for x2, y2 in anchors[i + 1:]:
            assert abs(x1 - x2) >= 20 or abs(y1 - y2) >= 12, ((x1, y1), (x2, y2))


def test_the_change_history_filters_by_user_date_and_material(client, catalogue):
    token = sign_in(client, "cora")
    assert client.post("/materials/new", data=add_form(token)).status_code == 302
    neral = material_id(catalogue, "Neral")
    form = edit_form(client, neral)
    form.update(family="changed")
    assert client.post(f"/materials/{neral}/edit", data=form).status_code == 302
    sign_in(client, "rhea")  # readers see the history too
    everything = client.get("/history").text
    assert "Change history" in everything and "<td>cora</td>" in everything
    # cora's changes: the added material, and on Neral the family with the source of the new value
    by_cora = client.get("/history", query_string={"user": "cora"}).text
    assert by_cora.count("<td>cora</td>") == 3 and "changed" in by_cora
    neral_only = html.unescape(client.get("/history", query_string={"user": "cora", "material": "Neral"}).text)
    assert neral_only.count("<td>cora</td>") == 2 and f"material #{neral}" in neral_only
    assert "<td>create</td>" not in neral_only
    today = time.strftime("%Y-%m-%d", time.gmtime())
    assert client.get("/history", query_string={"user": "cora", "since": today}).text.count("<td>cora</td>") == 3
    assert "No changes match." in client.get("/history", query_string={"user": "cora", "until": "2000-01-01"}).text
    bad = client.get("/history", query_string={"since": "yesterday"})
    assert bad.status_code == 400 and "YYYY-MM-DD" in bad.text
    unknown = client.get("/history", query_string={"material": "no such thing"})
    assert unknown.status_code == 400 and "no material matches" in unknown.text


def test_curators_record_and_remove_regulatory_entries_in_the_web(client, catalogue):
    from library.catalogue.models import Restriction

    sign_in(client, "cora")
    eugenol = material_id(catalogue, "Eugenol")
    page = client.get(f"/materials/{eugenol}/restrictions")
    assert page.status_code == 200 and "not a regulatory database" in page.text
    token = re.search(r'name="csrf_token" type="hidden" value="([^"]+)"', page.text).group(1)
    # a bad level is refused with the core's message and stores nothing
    refused = client.post(f"/materials/{eugenol}/restrictions", data={
        "csrf_token": token, "kind": "allergen", "authority": "EU 1223/2009", "max_percent": "lots"})
    assert refused.status_code == 400 and "is not a number" in html.unescape(refused.text)
    added = client.post(f"/materials/{eugenol}/restrictions", data={
        "csrf_token": token, "kind": "allergen", "authority": "EU 1223/2009", "source": "from memory"})
    assert added.status_code == 302
    with catalogue.reading() as session:
        rows = list(session.scalars(select(Restriction).where(Restriction.material_id == eugenol)))
        assert [(r.kind, r.authority) for r in rows] == [("allergen", "EU 1223/2009")]
        assert not session.get(Material, eugenol).restricted  # an allergen to declare does not block
        audited = session.scalar(select(AuditEntry).where(AuditEntry.entity_id == eugenol,
                                                          AuditEntry.field == "restriction"))
        assert audited.actor == "cora" and audited.new_value == "declare allergen (EU 1223/2009)"
    shown = client.get(f"/materials/{eugenol}").text
    assert "declare allergen (EU 1223/2009)" in re.search(r'id="regulatory-entries">(.*?)</dd>', shown, re.S).group(1)
    client.post(f"/materials/{eugenol}/restrictions", data={
        "csrf_token": token, "kind": "prohibited", "authority": "a standard", "source": "from memory"})
    with catalogue.reading() as session:
        assert session.get(Material, eugenol).restricted  # a prohibition keeps it out of substitute lists
        prohibited = session.scalar(select(Restriction.id).where(Restriction.material_id == eugenol,
                                                                 Restriction.kind == "prohibited"))
    removed = client.post(f"/materials/{eugenol}/restrictions/{prohibited}/remove", data={"csrf_token": token})
    assert removed.status_code == 302
    with catalogue.reading() as session:
        assert not session.get(Material, eugenol).restricted
        assert session.scalar(select(func.count()).select_from(Restriction)
                              .where(Restriction.material_id == eugenol)) == 1
    # another material's entry id through this material's address is refused, nothing removed
    other = material_id(catalogue, "Octanal")
    client.post(f"/materials/{other}/restrictions/{prohibited - 1}/remove", data={"csrf_token": token})
    with catalogue.reading() as session:
        assert session.scalar(select(func.count()).select_from(Restriction)
                              .where(Restriction.material_id == eugenol)) == 1
