"""Catalogue search as a perfumer uses it: odor descriptors and families as well as names, filters and
sorting, through GET /api/materials and the catalogue page (seed catalogue materials)."""

from __future__ import annotations

import pytest

from web_helpers import load_web_catalogue, sign_in

# Seed materials: three musks (family "musk", descriptor "musk") and four others.
NAMES = ("Citral", "Octanal", "Eugenol", "Vanillin", "(R)-(-)-Muscone", "Pentadecanolide", "Cyclopentadecanone")
MUSKS = {"(R)-(-)-Muscone", "Pentadecanolide", "Cyclopentadecanone"}


@pytest.fixture
def catalogue(tmp_path):
    opened = load_web_catalogue(f"sqlite:///{tmp_path / 'catalogue.sqlite'}", names=NAMES)
    yield opened
    opened.dispose()


def api_names(client, **query):
    response = client.get("/api/materials", query_string=query)
    assert response.status_code == 200, response.text
    return [m["name"] for m in response.get_json()["materials"]]


def test_musk_finds_the_musks_by_odor_and_family(client):
    sign_in(client, "rhea")
    assert set(api_names(client, q="musk")) == MUSKS
    assert set(api_names(client, q="clove")) == {"Eugenol"}          # odor descriptor only
    assert set(api_names(client, family="musk")) == MUSKS
    assert set(api_names(client, odor="vanilla")) == {"Vanillin"}
    assert set(api_names(client, q="aldehyde", family="citrus")) == {"Octanal"}  # synonym "aldehyde C-8"
    assert api_names(client, odor="mus") == []                         # the odor filter is a whole term
    page = client.get("/", query_string={"q": "musk"}).text
    assert "3 materials" in page and all(name in page for name in MUSKS)


def test_sorting_by_column_both_ways(client):
    sign_in(client, "rhea")
    by_name = api_names(client, sort="name")
    assert by_name == sorted(NAMES, key=str.lower)
    assert api_names(client, sort="-name") == by_name[::-1]
    families = [m["family"]
                for m in client.get("/api/materials", query_string={"sort": "family"}).get_json()["materials"]]
    assert families == sorted(families) and families[0] == "citrus" and families[-1] == "spicy"
    refused = client.get("/api/materials", query_string={"sort": "smell"})
    assert refused.status_code == 400 and "cannot sort by 'smell'" in refused.text
    page = client.get("/", query_string={"sort": "-name"}).text
    assert 'aria-sort="descending"' in page
    assert page.index("Vanillin") < page.index("Citral")
