"""The search pages and their JSON API through Flask's test client, on a real SQLite catalogue of seed
materials whose shape and vibration (MMFF94) records are computed once with the real engines.

The catalogue holds a mirror-image pair (the carvones) and an isotopologue pair (benzaldehyde and its
d6 form), the pairs that the two hypotheses treat differently.
"""

from __future__ import annotations

import csv
import io
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import func, select

from library.catalogue import curation, observations
from library.search import metrics
from library.catalogue.database import Catalogue
from library.catalogue.models import PairFlag

INDEXED_METRICS = metrics.names(indexed=True)

from web_helpers import computed_catalogue_template, write_requests

CAUTION_WORDS = ("not a safety or regulatory finding", "IFRA Standards", "safety", "allergen labelling")


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    return computed_catalogue_template(tmp_path_factory)


@pytest.fixture
def catalogue(template, tmp_path):
    target = tmp_path / "catalogue.sqlite"
    shutil.copyfile(template, target)
    opened = Catalogue(f"sqlite:///{target}")
    yield opened
    opened.dispose()


def material_id(catalogue, name: str) -> int:
    with catalogue.reading() as session:
        return curation.find_material(session, name).id


def flag_count(catalogue) -> int:
    with catalogue.reading() as session:
        return session.scalar(select(func.count()).select_from(PairFlag))


def error_text(response) -> str:
    if response.is_json:
        return response.get_json()["error"]["message"]
    found = re.search(r'class="error banner" role="alert"[^>]*>([^<]*)<', response.text)
    return found.group(1) if found else ""


# --- who may do what ------------------------------------------------------------------------------

def test_search_pages_need_a_signed_in_user(app):
    anonymous = app.test_client()
    for url in ("/substitutes", "/compare", "/disagreements", "/scorecard", "/substitutes.csv?material=Citral"):
        response = anonymous.get(url)
        assert response.status_code == 302 and response.headers["Location"].startswith("/sign-in"), url
    for url in ("/api/substitutes?material=Citral", "/api/compare?a=Citral&b=Octanal", "/api/disagreements",
                "/api/scorecard", "/api/suggest?q=cit"):
        assert anonymous.get(url).status_code == 401, url


def test_flag_routes_are_walked_by_the_write_route_test(app):
    """tests/test_web_interface.py walks every write route in app.url_map; ours are among them."""
    endpoints = {endpoint for endpoint, _, _ in write_requests(app)}
    assert {"disagreements.flag", "search_api.add_flag"} <= endpoints


# --- substitutes ----------------------------------------------------------------------------------

def test_substitutes_page_shows_every_metric_depictions_previews_and_the_caution(reader, catalogue):
    response = reader.get("/substitutes?material=Citral&metric=blend&weight=0.3&k=5")
    assert response.status_code == 200, error_text(response)
    page = response.text
    rows = re.findall(r"<tr>\s*<td class=\"num\">(\d+)</td>(.*?)</tr>", page, re.DOTALL)
    assert [int(rank) for rank, _ in rows] == [1, 2, 3, 4, 5]
    for _, row in rows:
        assert len(re.findall(r'class="num score', row)) == len(INDEXED_METRICS)  # one cell per indexed metric
        assert "/depiction.svg" in row and 'class="chart preview"' in row
    assert all(word in page for word in CAUTION_WORDS)
    api = reader.get("/api/substitutes?material=Citral&metric=blend&weight=0.3&k=5").get_json()
    names = [c["name"] for c in api["candidates"]]
    assert "Citral" not in names and "Geranyl nitrile" in names[:3]  # the usual stability swap (common practice)
    for c in api["candidates"]:
        assert c["blend"] == pytest.approx(0.3 * c["shape"] + 0.7 * c["vibration"], abs=2e-4)
    blends = [c["blend"] for c in api["candidates"]]
    assert blends == sorted(blends, reverse=True)
    assert [re.search(r'<a href="/materials/\d+">([^<]+)</a>', row).group(1) for _, row in rows] == names
    assert "IFRA" in api["caution"]


def test_substitutes_csv_matches_the_page(reader):
    response = reader.get("/substitutes.csv?material=Citral&k=4&metric=vibration")
    assert response.status_code == 200 and response.mimetype == "text/csv"
    assert "attachment" in response.headers["Content-Disposition"]
    lines = response.text.splitlines()
    assert lines[0].startswith("# caution:") and "IFRA" in lines[0]
    table = list(csv.DictReader(io.StringIO("\n".join(lines[1:]))))
    api = reader.get("/api/substitutes?material=Citral&k=4&metric=vibration").get_json()["candidates"]
    assert [r["name"] for r in table] == [c["name"] for c in api]
    assert [float(r["vibration"]) for r in table] == [c["vibration"] for c in api]
    assert [int(r["vibration_rank"]) for r in table] == [1, 2, 3, 4]


def test_substitute_filters_apply(reader, catalogue):
    answer = reader.get("/api/substitutes?material=(R)-(-)-Carvone&metric=shape&k=10&mw_min=100&mw_max=160"
                        "&without=clove&own_family=1").get_json()  # own_family: keep the mirror image
    assert answer["candidates"]
    for c in answer["candidates"]:
        assert 100 <= c["molecular_weight"] <= 160 and "clove" not in c["odors"]
    assert "Eugenol" not in [c["name"] for c in answer["candidates"]]
    assert answer["candidates"][0]["name"] == "(S)-(+)-Carvone"  # the mirror image has the closest shape
    only_sweet = reader.get("/api/substitutes?material=Citral&with=sweet&k=10").get_json()["candidates"]
    assert only_sweet and all("sweet" in c["odors"] for c in only_sweet)
    low_logp = reader.get("/api/substitutes?material=Citral&logp_max=2&k=10").get_json()["candidates"]
    assert low_logp and all(c["logp"] <= 2 for c in low_logp)


def test_retired_and_restricted_materials_are_left_out_unless_asked(reader, catalogue):
    with catalogue.transaction() as session:
        curation.set_restricted(session, curation.find_material(session, "Geranyl nitrile"), True)
    default = [c["name"] for c in reader.get("/api/substitutes?material=Citral&k=11").get_json()["candidates"]]
    assert "Geranyl nitrile" not in default  # the index was rebuilt: the catalogue revision moved
    asked = reader.get("/api/substitutes?material=Citral&k=11&restricted=1").get_json()["candidates"]
    assert any(c["name"] == "Geranyl nitrile" and c["restricted"] for c in asked)


@pytest.mark.parametrize("arguments, message", [
    ("material=No+such+material", "no material matches"),
    ("material=C1CC(", "as a structure"),
    ("structure=CC(C)(C)(C)(C)C", "as a structure"),
    ("material=Citral&mw_min=heavy", "molecular weight minimum 'heavy' is not a number"),
    ("material=Citral&mw_min=200&mw_max=100", "the minimum is above the maximum"),
    ("material=Citral&logp_max=inf", "must be a finite number"),
    ("material=Citral&with=smoky-bacon", "not in the odor vocabulary"),
    ("material=Citral&with=citrus&without=citrus", "both required and excluded"),
    ("material=Citral&metric=smell", "metric 'smell' is not one of"),
    ("material=Citral&weight=1.5", "blend weight 1.5 is outside"),
    ("material=Citral&k=0", "number of candidates 0 is outside"),
])
def test_bad_substitute_input_gets_a_clear_message(reader, catalogue, arguments, message):
    revision = catalogue.revision()
    page = reader.get(f"/substitutes?{arguments}")
    assert page.status_code == 400 and message in error_text(page).replace("&#39;", "'"), error_text(page)
    assert "Traceback" not in page.text and "Find substitutes" in page.text  # the form is still there
    api = reader.get(f"/api/substitutes?{arguments}")
    assert api.status_code == 400 and message in api.get_json()["error"]["message"]
    assert catalogue.revision() == revision


def test_a_pasted_structure_is_computed_on_the_fly_and_not_stored(reader, catalogue):
    revision = catalogue.revision()
    neral = "CC(C)=CCC/C(C)=C\\C=O"  # seed catalogue material, left out of this catalogue
    answer = reader.get("/api/substitutes", query_string={"structure": neral, "k": 3})
    assert answer.status_code == 200, answer.get_json()
    body = answer.get_json()
    assert body["query"]["material_id"] is None and any("not stored" in n for n in body["notes"])
    assert body["candidates"][0]["name"] in ("Citral", "Geranyl nitrile", "Citronellal")
    assert catalogue.revision() == revision
    drawn = reader.get("/structure.svg", query_string={"structure": neral})
    assert drawn.status_code == 200 and drawn.mimetype == "image/svg+xml" and b"<svg" in drawn.data


def test_type_ahead_suggests_by_name_synonym_cas_and_inchikey(reader, catalogue):
    def names(q):
        return [m["name"] for m in reader.get("/api/suggest", query_string={"q": q}).get_json()["materials"]]
    assert set(names("carv")) == {"(R)-(-)-Carvone", "(S)-(+)-Carvone"}
    assert names("5392-40-5") == ["Citral"]  # CAS RN
    with catalogue.reading() as session:
        vanillin = curation.find_material(session, "Vanillin")
        key, synonym = vanillin.inchikey, vanillin.synonyms[0].name
    assert names(key[:14]) == ["Vanillin"]  # InChIKey skeleton block
    assert "Vanillin" in names(synonym[:6])
    assert names("") == []


# --- compare --------------------------------------------------------------------------------------

def test_compare_shows_the_mirror_image_pair(reader, catalogue):
    page = reader.get("/compare?a=(R)-(-)-Carvone&b=(S)-(%2B)-Carvone")
    assert page.status_code == 200, error_text(page)
    text = page.text
    assert 'class="chart spectrum mirrored"' in text and 'class="band matched"' in text
    assert "Overlay Tversky" in text and "Volume ratio" in text
    assert text.count("/depiction.svg") == 2 and all(word in text for word in CAUTION_WORDS)
    body = reader.get("/api/compare?a=(R)-(-)-Carvone&b=(S)-(%2B)-Carvone").get_json()
    # enantiomers have identical harmonic frequencies (textbook: same potential energy surface)
    assert body["scores"]["vibration"] == 1.0 and body["bands"]["score"] == 1.0 and not body["bands"]["only_a"]
    assert body["scores"]["handedness"] < 0.999 and 0 < body["volume_ratio"] <= 1.0
    assert body["spreads"]["vibration"] == 0.0 and body["resamples"] > 0
    fixed = {m for m in body["scores"] if m not in body["spreads"]}
    said = re.search(r"Not resampled: ([^.]+)\.", text)
    assert "overlay" in fixed and said and set(said.group(1).split(", ")) == fixed
    assert text.count('class="band-matched"') == len(body["bands"]["matched"])


def test_compare_of_the_isotopologues_shows_unmatched_bands(reader):
    body = reader.get("/api/compare?a=Benzaldehyde&b=Benzaldehyde-d6 (demo)").get_json()
    assert body["scores"]["shape"] > 0.999 and body["scores"]["vibration"] < 0.9
    assert body["bands"]["only_a"] and body["bands"]["only_b"]  # C-H stretches move to C-D (~2200 cm-1)
    page = reader.get("/compare?a=Benzaldehyde&b=Benzaldehyde-d6 (demo)").text
    assert 'class="band unmatched"' in page


@pytest.mark.parametrize("arguments, message", [
    ("a=Citral", "give two materials"),
    ("a=Citral&b=Citral", "both keys name the same material"),
    ("a=Citral&b=Unknownol", "no material matches"),
    ("a=Citral&b=Octanal&weight=-1", "blend weight -1 is outside"),
])
def test_bad_compare_input(reader, arguments, message):
    page = reader.get(f"/compare?{arguments}")
    assert page.status_code == 400 and message in error_text(page).replace("&#39;", "'")
    assert reader.get(f"/api/compare?{arguments}").get_json()["error"]["message"].find(message) >= 0


# --- disagreements --------------------------------------------------------------------------------

def test_disagreements_list_both_telling_pairs_with_basis_and_observations(reader):
    body = reader.get("/api/disagreements?per_page=200").get_json()
    pairs = {frozenset((r["a"]["name"], r["b"]["name"])): r for r in body["rows"]}
    isotopologues = pairs[frozenset(("Benzaldehyde", "Benzaldehyde-d6 (demo)"))]
    assert isotopologues["direction"] == "shape-not-vibration"
    assert isotopologues["basis"] == "indistinguishable by shape"
    mirror = pairs[frozenset(("(R)-(-)-Carvone", "(S)-(+)-Carvone"))]
    assert mirror["direction"] == "vibration-not-shape"
    assert mirror["basis"] == "indistinguishable by vibration, told apart by handedness"
    assert body["observed"] == "odor descriptor Jaccard" and mirror["observed"] is not None
    assert "IFRA" in body["caution"]
    page = reader.get("/disagreements").text
    assert "indistinguishable by shape" in page and "Benzaldehyde-d6 (demo)" in page
    assert all(word in page for word in CAUTION_WORDS)
    observed_rows = [r for r in body["rows"] if r["observed"] is not None]
    if body["total"] == len(body["rows"]):  # the whole list is on this page: its tally must match the rows
        shape = sum(r["sides_with"] == "shape" for r in observed_rows)
        assert f"Of {len(observed_rows)} listed pair(s) with an observation, {shape} side with shape" in page
    assert 'id="sides-tally"' in page and "Shuffling the observations" in page
    only_one_way = reader.get("/api/disagreements?direction=vibration-not-shape&per_page=200").get_json()["rows"]
    assert only_one_way and {r["direction"] for r in only_one_way} == {"vibration-not-shape"}
    unobserved = reader.get("/api/disagreements?observation=none").get_json()
    assert unobserved["observed"] is None and all(r["observed"] is None for r in unobserved["rows"])


def test_disagreements_with_the_tunnelling_model_as_the_vibration_side(reader):
    body = reader.get("/api/disagreements?vibration_metric=tunnelling&max_vibration=p5&per_page=200").get_json()
    assert body["vibration_metric"] == "tunnelling" and "tunnelling <= " in body["thresholds"]
    pairs = {frozenset((r["a"]["name"], r["b"]["name"])): r for r in body["rows"]}
    isotopologues = pairs[frozenset(("Benzaldehyde", "Benzaldehyde-d6 (demo)"))]
    compared = reader.get("/api/compare?a=Benzaldehyde&b=Benzaldehyde-d6 (demo)").get_json()
    assert isotopologues["basis"] == "indistinguishable by shape"
    assert isotopologues["vibration"] == pytest.approx(compared["scores"]["tunnelling"], abs=1e-4)
    page = reader.get("/disagreements?vibration_metric=tunnelling").text
    assert "Vibration (tunnelling)" in page and "contested hypothesis" in page
    assert 'value="tunnelling" selected' in page
    refused = reader.get("/disagreements?vibration_metric=smell")
    assert refused.status_code == 400 and "vibration side 'smell' is not one of" in error_text(refused).replace("&#39;", "'")


def test_disagreement_thresholds_as_percentiles_are_shown_as_similarities(reader):
    body = reader.get("/api/disagreements?max_shape=p5&min_vibration=p95&direction=vibration-not-shape"
                      "&per_page=200").get_json()
    used = dict(re.findall(r"(shape <=|vibration >=) ([\d.]+) \(p\d+ of catalogue pairs\)", body["thresholds"]))
    assert set(used) == {"shape <=", "vibration >="}
    shape_at_most, vibration_at_least = float(used["shape <="]), float(used["vibration >="])
    past = [r for r in body["rows"] if r["basis"] == "thresholds"]
    assert all(r["shape"] <= shape_at_most + 1e-3 and r["vibration"] >= vibration_at_least - 1e-3 for r in past)
    # the same similarities asked as numbers give the same pairs
    same = reader.get(f"/api/disagreements?max_shape={shape_at_most}&min_vibration={vibration_at_least}"
                      "&direction=vibration-not-shape&per_page=200").get_json()
    assert {(r["a"]["id"], r["b"]["id"]) for r in same["rows"]} >= {(r["a"]["id"], r["b"]["id"]) for r in past}
    assert "thresholds: shape &gt;= 0.900" in reader.get("/disagreements").text


def test_disagreements_sort_page_and_export(reader):
    everything = reader.get("/api/disagreements?per_page=200&sort=gap&order=desc").get_json()
    gaps = [r["gap"] for r in everything["rows"]]
    assert gaps == sorted(gaps, reverse=True) and everything["total"] >= 2
    by_name = reader.get("/api/disagreements?per_page=200&sort=a&order=asc").get_json()["rows"]
    assert [r["a"]["name"].lower() for r in by_name] == sorted(r["a"]["name"].lower() for r in by_name)
    second = reader.get("/api/disagreements?per_page=1&page=2&sort=gap&order=desc").get_json()
    assert [r["gap"] for r in second["rows"]] == gaps[1:2] and second["pages"] == everything["total"]
    ascending = reader.get("/api/disagreements?per_page=200&sort=gap&order=asc").get_json()["rows"]
    assert [r["gap"] for r in ascending] == gaps[::-1]
    page = reader.get("/disagreements?sort=gap&order=desc").text
    shown = [float(g) for g in re.findall(r'<td class="num">([\d.]+)</td>\s*<td class="num">[\d.]+</td>\s*'
                                          r'<td class="num">[\d.]+</td>', page)]
    assert shown == sorted(shown, reverse=True) and len(shown) == min(25, everything["total"])
    assert 'aria-sort="descending"' in page
    exported = reader.get("/disagreements.csv?sort=gap&order=desc")
    table = list(csv.DictReader(io.StringIO(exported.text.split("\n", 1)[1])))
    assert len(table) == everything["total"] and [float(r["gap"]) for r in table] == gaps


@pytest.mark.parametrize("arguments, message", [
    ("min_shape=1.2", "minimum shape similarity '1.2' is neither a similarity between 0 and 1"),
    ("max_shape=p150", "maximum shape similarity 'p150' is not a percentile"),
    ("k=0", "neighbors per material 0 is outside"),
    ("k=many", "is not a whole number"),
    ("direction=sideways", "direction 'sideways' is not one of"),
    ("observation=panel-2031", "neither 'descriptors', 'none' nor a stored data set"),
    ("sort=smell", "cannot sort by 'smell'"),
    ("page=999", "past the last page"),
])
def test_bad_disagreement_input(reader, arguments, message):
    page = reader.get(f"/disagreements?{arguments}")
    assert page.status_code == 400 and message in error_text(page).replace("&#39;", "'"), error_text(page)
    assert message in reader.get(f"/api/disagreements?{arguments}").get_json()["error"]["message"]


def test_curators_flag_a_disagreement_from_the_page(app, curator, reader, catalogue):
    carvone_r, carvone_s = material_id(catalogue, "(R)-(-)-Carvone"), material_id(catalogue, "(S)-(+)-Carvone")
    page = curator.get("/disagreements").text
    assert 'action="/disagreements/flag"' in page
    # each row's flag form preselects the kind its direction suggests (mirror pair: vibration-alike)
    rows = re.findall(r"<td>(shape-not-vibration|vibration-not-shape)</td>(.*?)</form>", page, re.DOTALL)
    assert {direction for direction, _ in rows} == {"shape-not-vibration", "vibration-not-shape"}
    for direction, form_html in rows:
        preselected = re.search(r"<option selected>([^<]+)</option>", form_html).group(1)
        assert preselected.startswith("shape-alike" if direction == "shape-not-vibration" else "vibration-alike") \
            or preselected.endswith("smell-alike"), (direction, preselected)
    assert 'action="/disagreements/flag"' not in reader.get("/disagreements").text
    form = {"a": carvone_r, "b": carvone_s, "kind": "vibration-alike smell-different",
            "note": "mirror images smell different (spearmint vs caraway)", "next": "/disagreements?sort=gap"}
    # a reader, even with a token, may not flag; a curator needs the token
    assert reader.post("/disagreements/flag", data={**form, "csrf_token": reader.token}).status_code == 403
    assert curator.post("/disagreements/flag", data=form).status_code == 400
    assert flag_count(catalogue) == 0
    response = curator.post("/disagreements/flag", data={**form, "csrf_token": curator.token})
    assert response.status_code == 303 and response.headers["Location"] == "/disagreements?sort=gap"
    with catalogue.reading() as session:
        (flag,) = observations.list_flags(session)
        assert (flag.kind, flag.created_by) == ("vibration-alike smell-different", "cora")
        assert {flag.material_a_id, flag.material_b_id} == {carvone_r, carvone_s}
    after = curator.get("/disagreements?sort=gap")
    assert "Flagged #" in after.text
    row = next(r for r in reader.get("/api/disagreements?per_page=200").get_json()["rows"]
               if {r["a"]["id"], r["b"]["id"]} == {carvone_r, carvone_s})
    assert row["flags"] == ["vibration-alike smell-different"]
    # a bad kind or a foreign return address stores nothing and goes nowhere else
    revision = catalogue.revision()
    bad = curator.post("/disagreements/flag", data={**form, "kind": "smells odd", "next": "https://elsewhere.example/",
                                                    "csrf_token": curator.token})
    assert bad.status_code == 303 and bad.headers["Location"] == "/disagreements"
    assert "Nothing was flagged" in curator.get("/disagreements").text
    assert flag_count(catalogue) == 1 and catalogue.revision() == revision


def test_flags_through_the_api(curator, reader, catalogue):
    body = {"a": "Benzaldehyde", "b": "Benzaldehyde-d6 (demo)", "kind": "shape-alike smell-different",
            "note": "panel: the d6 form is fainter"}
    assert curator.post("/api/flags", json=body).status_code == 400  # no X-CSRF-Token header
    assert reader.post("/api/flags", json=body, headers={"X-CSRF-Token": reader.token}).status_code == 403
    assert flag_count(catalogue) == 0
    created = curator.post("/api/flags", json=body, headers={"X-CSRF-Token": curator.token})
    assert created.status_code == 201, created.get_json()
    assert created.get_json()["kind"] == "shape-alike smell-different" and created.get_json()["created_by"] == "cora"
    for wrong, message in (({**body, "b": "Nothingol"}, "no material matches"),
                           ({**body, "kind": "bad"}, "is not one of"),
                           ({**body, "colour": "red"}, "unknown field(s) colour"),
                           ({"a": "Citral"}, "'b' is required"),
                           ({**body, "note": "x" * 1001}, "at most 1000")):
        response = curator.post("/api/flags", json=wrong, headers={"X-CSRF-Token": curator.token})
        assert response.status_code == 400 and message in response.get_json()["error"]["message"]
    assert flag_count(catalogue) == 1


# --- scorecard ------------------------------------------------------------------------------------

def test_scorecard_page_and_api(reader):
    form = reader.get("/scorecard")
    assert form.status_code == 200 and 'value="199"' in form.text and 'id="results"' not in form.text
    page = reader.get("/scorecard?run=1&observation=descriptors&permutations=19&resamples=20&k=3")
    assert page.status_code == 200, error_text(page)
    assert 'class="chart scorecard"' in page.text and all(word in page.text for word in CAUTION_WORDS)
    body = reader.get("/api/scorecard?observation=descriptors&permutations=19&resamples=20&k=3").get_json()
    assert [m["metric"] for m in body["metrics"]] == list(INDEXED_METRICS)
    # demo entries' invented notes are not observations unless asked for (Benzaldehyde-d6 is one)
    left_out = [re.match(r"(\d+) demo entr", n) for n in body["notes"]]
    demo = next(int(m.group(1)) for m in left_out if m)
    with_demo = reader.get("/api/scorecard?observation=descriptors&permutations=19&resamples=20&k=3&demo=1").get_json()
    assert demo >= 1 and with_demo["metrics"][0]["materials"] == body["metrics"][0]["materials"] + demo
    assert with_demo["observed"].endswith("(demo notes included)") and not any("demo entr" in n for n in with_demo["notes"])
    for m in body["metrics"]:
        assert -1 <= m["spearman"] <= 1 and m["ci_low"] <= m["ci_high"]
        assert 1 / 20 <= m["mantel_p"] <= 1  # (1 + count) / (1 + permutations)
        assert m["pairs"] == m["materials"] * (m["materials"] - 1) // 2 and m["k"] == 3
        # the API rounds to 4 decimals, the page to 3: either neighbor of the 4-decimal value may show
        assert {f'{m["spearman"] - 5e-5:.3f}', f'{m["spearman"] + 5e-5:.3f}'} & set(re.findall(r"-?\d\.\d{3}", page.text))
        if m["metric"] != "structure":  # the partial Mantel test controls for 2D structure
            assert m["controls"] == ["structure"] and m["partial_p_holm"] >= m["partial_p"]
        # chance baseline: relevant partners / (n - 1), so below 1 and the lift is precision over it
        assert 0 < m["chance_at_k"] < 1 and m["lift_at_k"] == pytest.approx(m["precision_at_k"] / m["chance_at_k"],
                                                                            abs=2e-3)
    assert body["observed"] == "odor descriptor Jaccard"
    assert body["adjustment"].startswith("Holm") and body["summary"] and body["comparisons"]
    assert 'id="scorecard-summary"' in page.text and "Holm" in page.text


@pytest.mark.parametrize("arguments, message", [
    ("permutations=0", "permutations 0 is outside"),
    ("resamples=lots", "is not a whole number"),
    ("observation=panel-2031", "neither 'descriptors' nor a stored data set"),
])
def test_bad_scorecard_input(reader, arguments, message):
    page = reader.get(f"/scorecard?run=1&{arguments}")
    assert page.status_code == 400 and message in error_text(page).replace("&#39;", "'")
    assert message in reader.get(f"/api/scorecard?{arguments}").get_json()["error"]["message"]


# --- the in-memory index and the material page ----------------------------------------------------

def test_index_is_kept_in_memory_and_rebuilt_when_the_catalogue_changes(app, catalogue):
    cache = app.extensions["olibra"].index_cache
    with app.app_context():
        first, revision = cache.get()
        again, _ = cache.get()
        assert again is first and revision == catalogue.revision()
        assert cache.memo(("answer",), lambda: [revision]) is cache.memo(("answer",), list)
        with catalogue.transaction() as session:
            curation.set_status(session, curation.find_material(session, "Octanal"), "retired")
        rebuilt, newer = cache.get()
        assert rebuilt is not first and newer == catalogue.revision() > revision
        assert rebuilt.materials[material_id(catalogue, "Octanal")].status == "retired"
        assert cache.memo(("answer",), list) == []  # memoized results went with the old index


def test_material_page_draws_the_spectrum_and_npr_position(reader, catalogue):
    citral = material_id(catalogue, "Citral")
    page = reader.get(f"/materials/{citral}").text
    spectrum = re.search(r'<svg class="chart spectrum".*?</svg>', page, re.DOTALL).group(0)
    band_titles = re.findall(r"<title>(\d+) cm⁻¹(?: \([^)]*\))?, relative height ([\d.]+)</title>", spectrum)
    assert len(band_titles) >= 6 and max(float(h) for _, h in band_titles) == 1.0
    from library.search.spectra import spectrum_profile

    profile = spectrum_profile(catalogue, "Citral")
    assert [int(p) for p, _ in band_titles] == [round(b.position_cm1) for b in profile.bands]
    # the tallest band is the C-H stretch cluster (textbook: 2850-3100 cm-1; MMFF94 within ~10 %)
    assert 2700 <= int(band_titles[0][0]) <= 3300
    # drawn as an IR spectrum (MMFF gives intensities), with the vertical axis named and the
    # aldehyde's C=O stretch labelled as such (textbook: 1680-1740 cm-1 for an aldehyde C=O)
    assert "relative IR intensity" in spectrum
    carbonyl = re.search(r'class="band-label"[^>]*>(\d+) C=O</text>', spectrum)
    assert carbonyl and 1600 <= int(carbonyl.group(1)) <= 1800
    assert 'class="chart npr"' in page and "NPR1" in page
    assert 'href="/substitutes?material=Citral"' in page and 'href="/compare?a=Citral"' in page


def test_spectrum_band_labels_never_overlap_and_diagnostic_groups_come_first():
    from library.vibration.spectrum import Band
    from webui import charts

    # three bands 10 cm-1 apart (their labels would overlap), one far away, one C=O band
    bands = (Band(3000.0, 1.0), Band(2990.0, 0.9), Band(2980.0, 0.8), Band(1200.0, 0.5),
             Band(1710.0, 0.2, "C=O"))
    printed = charts._labelled_bands(bands, 3, 20, 720)
    assert printed == [True, False, False, True, True]
    svg = str(charts.spectrum_svg(type("P", (), {"name": "x", "engine": "mmff", "weighting": "IR intensity",
                                                "grid_cm1": np.arange(0, 4001, 5.0),
                                                "curve": np.zeros(801), "bands": bands})()))
    assert svg.count('class="band-label"') == 3 and ">1710 C=O</text>" in svg


def test_substitutes_group_filters_own_family_and_ordering_column(reader):
    answer = reader.get("/api/substitutes?material=Citral&k=10&without_group=aldehyde").get_json()
    assert answer["ordered_by"] == "blend" and answer["candidates"]
    assert all("aldehyde" not in c["functional_groups"] for c in answer["candidates"])
    nitriles = reader.get("/api/substitutes?material=Citral&k=10&with_group=nitrile").get_json()["candidates"]
    assert {c["name"] for c in nitriles} == {"Geranyl nitrile", "Citronellyl nitrile", "Octanenitrile"}
    bleach = reader.get("/api/substitutes?material=Citral&k=10&stable_in=hypochlorite bleach").get_json()
    assert "Geranyl nitrile" not in {c["name"] for c in bleach["candidates"]}
    assert "IFRA" in bleach["caution"]
    bad = reader.get("/api/substitutes?material=Citral&with_group=[C(")
    assert bad.status_code == 400 and "'[C(' is not a valid SMARTS" in error_text(bad)
    # (S)-(+)-carvone is (R)-(-)-carvone's mirror image: left out unless own_family is asked for
    mirror = "/api/substitutes?material=(R)-(-)-Carvone&k=11&metric=vibration"
    assert "(S)-(+)-Carvone" not in {c["name"] for c in reader.get(mirror).get_json()["candidates"]}
    assert "(S)-(+)-Carvone" in {c["name"] for c in reader.get(mirror + "&own_family=1").get_json()["candidates"]}
    # a shape search is ordered by overlay, and the page highlights that column, not shape
    page = reader.get("/substitutes?material=Citral&metric=shape&k=3").text
    highlighted = re.findall(r'<th class="num ranked-by">([^<]+)</th>', page)
    assert highlighted == ["overlay"]
    assert '<span id="ordered-by">overlay</span>' in page


def test_hit_lists_carry_the_restriction_entries_curators_recorded(catalogue, reader):
    # an allergen to declare does not keep a material out of the list; its tag shows on the page, in the
    # CSV and in the JSON (what the curator recorded, worded by library.catalogue.restrictions.tag)
    from library.catalogue import restrictions

    first = reader.get("/api/substitutes?material=Citral&k=4&metric=vibration").get_json()["candidates"][0]
    assert first["regulatory"] == ""
    with catalogue.transaction() as session:
        material = curation.find_material(session, first["name"])
        entry = restrictions.check_entry(kind="allergen", authority="EU 1223/2009", source="from memory")
        restrictions.add_restriction(session, material, entry, actor="test")
    expected = "declare allergen (EU 1223/2009)"
    api = reader.get("/api/substitutes?material=Citral&k=4&metric=vibration").get_json()["candidates"]
    assert api[0]["name"] == first["name"] and api[0]["regulatory"] == expected
    assert all(c["regulatory"] == "" for c in api[1:])
    lines = reader.get("/substitutes.csv?material=Citral&k=4&metric=vibration").text.splitlines()
    table = list(csv.DictReader(io.StringIO("\n".join(lines[1:]))))
    assert table[0]["regulatory"] == expected
    page = reader.get("/substitutes?material=Citral&k=4&metric=vibration").text
    assert f'<div class="sub regulatory" title="recorded by curators; not a regulatory database">{expected}</div>' in page
