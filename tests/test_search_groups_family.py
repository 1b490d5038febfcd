"""Functional-group filters and own-family exclusion on the shipped seed catalogue (real records)."""

import json
import shutil

import pytest

from catalogue_helpers import compute_missing_records, seed_rows
from library import functional_groups
from library.catalogue import transfer
from library.catalogue.database import Catalogue
from library.search import substitutes
from library.search.errors import SearchError


@pytest.fixture(scope="module")
def catalogue(computed_template, tmp_path_factory):
    """The computed search catalogue plus the seed's Neral and Geranial, the isomers of its Citral."""
    path = tmp_path_factory.mktemp("family") / "catalogue.sqlite"
    shutil.copy(computed_template, path)
    cat = Catalogue(f"sqlite:///{path}")
    with cat.transaction() as session:
        report = transfer.import_rows(session, seed_rows({"Neral", "Geranial"}), actor="test")
        assert report.committed and report.count("added") == 2
    compute_missing_records(cat)
    yield cat
    cat.dispose()


def names(outcome):
    return [c.material.name for c in outcome.candidates]


def test_citral_shortlist_leaves_out_its_isomers_unless_asked(catalogue):
    # the seed records Citral as the mixture of Geranial (E) and Neral (Z): stereo unassigned, one skeleton
    default = substitutes.find_substitutes(catalogue, "Citral", k=20)
    assert not {"Neral", "Geranial"} & set(names(default))
    assert any("Geranial, Neral" in note for note in default.notes)
    both = substitutes.find_substitutes(catalogue, "Citral", k=20, include_own_family=True)
    assert {"Neral", "Geranial"} <= set(names(both))


def test_isotopologue_and_mirror_image_are_own_family(catalogue):
    assert "Benzaldehyde-d6 (demo)" not in names(substitutes.find_substitutes(
        catalogue, "Benzaldehyde", k=20, include_demo=True))
    assert "Benzaldehyde-d6 (demo)" in names(substitutes.find_substitutes(
        catalogue, "Benzaldehyde", k=20, include_demo=True, include_own_family=True))
    assert "(S)-(+)-Carvone" not in names(substitutes.find_substitutes(catalogue, "(R)-(-)-Carvone", k=20))


def test_group_filters_hold_on_every_hit(catalogue):
    without = substitutes.find_substitutes(catalogue, "Citral", k=20, without_groups=["aldehyde"])
    assert without.candidates
    assert all("aldehyde" not in functional_groups.groups_of(c.material.smiles) for c in without.candidates)
    nitriles = substitutes.find_substitutes(catalogue, "Citral", k=20, with_groups=["nitrile"])
    # the seed's nitriles (geranyl, citronellyl, octane-) and nothing else; common practice, no source
    assert set(names(nitriles)) == {"Geranyl nitrile", "Citronellyl nitrile", "Octanenitrile"}
    bleach = substitutes.find_substitutes(catalogue, "Citral", k=20,
                                          without_groups=functional_groups.preset("hypochlorite bleach"))
    assert "Octanenitrile" in names(bleach) and "Geranyl nitrile" not in names(bleach)


def test_bad_group_is_a_search_error_naming_it(catalogue):
    with pytest.raises(SearchError, match=r"'\[C\('"):
        substitutes.find_substitutes(catalogue, "Citral", with_groups=["[C("])


def test_cli_json_names_the_ordering_metric_and_filters(catalogue, capsys):
    from library.cli import main

    url = str(catalogue.engine.url)
    assert main(["--db", url, "search", "Citral", "--format", "json", "-k", "20"]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert not {"Neral", "Geranial"} & {r["name"] for r in rows}
    assert {r["ordered_by"] for r in rows} == {"blend"}
    assert main(["--db", url, "search", "Citral", "--metric", "shape", "--format", "json"]) == 0
    assert {r["ordered_by"] for r in json.loads(capsys.readouterr().out)} == {"overlay"}
    assert main(["--db", url, "search", "Citral", "--without-group", "aldehyde", "--format", "json"]) == 0
    assert all("aldehyde" not in r["groups"] for r in json.loads(capsys.readouterr().out))
    assert main(["--db", url, "search", "Citral", "--stable-in", "dish soap"]) == 2
    assert "unknown base preset 'dish soap'" in capsys.readouterr().err
