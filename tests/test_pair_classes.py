"""Pair classes: reaction SMARTS applied by RDKit to textbook pairs, structural classes on the seed
catalogue, Benjamini-Hochberg against scipy, percentiles against scipy, user classes in a real catalogue."""

from __future__ import annotations

import csv
import re

import numpy as np
import pytest
from scipy import stats

from library.catalogue import pair_class_store
from library.errors import OlibraError
from library.search import metrics, pair_classes
from library.seed_catalog import MATERIALS_FILE

BUILTIN = {c.name: c for c in pair_classes.builtin_classes()}


def _pairs(name, structures):
    return set(pair_classes.class_pairs(BUILTIN[name], structures))


@pytest.mark.parametrize("name, reactant, product", [
    # geranial -> geranyl nitrile: the nitrile analogue of citral (common practice, no source)
    ("aldehyde-nitrile", "CC(C)=CCC/C(C)=C/C=O", "CC(C)=CCC/C(C)=C/C#N"),
    # citronellal -> citronellyl nitrile (common practice, no source)
    ("aldehyde-nitrile", "CC(C)=CCCC(C)CC=O", "CC(C)=CCCC(C)CC#N"),
    # citronellal reduced to citronellol (textbook carbonyl reduction, from memory)
    ("aldehyde-alcohol", "CC(C)=CCCC(C)CC=O", "CC(C)=CCCC(C)CCO"),
    # (-)-menthol (1R,2S,5R) oxidised to (-)-menthone (2S,5R): textbook oxidation, stereo of the
    # untouched centres kept (from memory)
    ("alcohol-ketone", "CC(C)[C@@H]1CC[C@@H](C)C[C@H]1O", "CC(C)[C@@H]1CC[C@@H](C)CC1=O"),
    # citronellol acetylated to citronellyl acetate (textbook esterification, from memory)
    ("alcohol-acetate", "CC(C)=CCCC(C)CCO", "CC(=O)OCCC(C)CCC=C(C)C"),
    # ethyl hexanoate reduced to ethyl hexyl ether (ester -> ether, from memory)
    ("ester-ether", "CCCCCC(=O)OCC", "CCCCCCOCC"),
])
def test_reaction_classes_pair_textbook_molecules(name, reactant, product):
    assert _pairs(name, {1: reactant, 2: product}) == {(1, 2)}


def test_reaction_class_leaves_unrelated_pairs_out():
    # geranial and citronellyl nitrile differ in more than the aldehyde group
    assert _pairs("aldehyde-nitrile", {1: "CC(C)=CCC/C(C)=C/C=O", 2: "CC(C)=CCCC(C)CC#N"}) == set()


def _seed_rows():
    with open(MATERIALS_FILE, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_enantiomer_class_finds_the_seed_catalogues_enantiomer_pairs():
    rows = _seed_rows()
    by_name = {row["name"]: i for i, row in enumerate(rows)}
    # the curated notes of the seed file say which materials are enantiomers ("Pair: enantiomer of X")
    expected = set()
    for i, row in enumerate(rows):
        match = re.search(r"enantiomer of ([^;.]+?)(?:[;.]|$)", row["notes"])
        if match and match.group(1).strip() in by_name:
            j = by_name[match.group(1).strip()]
            expected.add((min(i, j), max(i, j)))
    assert len(expected) >= 6  # limonene, carvone, linalool, menthol, muscone, ambroxide
    found = _pairs("enantiomers", {i: row["smiles"] for i, row in enumerate(rows)})
    assert found == expected


def test_isotopologue_and_e_z_classes():
    structures = {1: "O=Cc1ccccc1", 2: "[2H]C(=O)c1c([2H])c([2H])c([2H])c([2H])c1[2H]",
                  3: "CC(C)=CCC/C(C)=C/C=O", 4: "CC(C)=CCC/C(C)=C\\C=O"}  # benzaldehyde-d6; geranial / neral
    assert _pairs("isotopologues", structures) == {(1, 2)}
    assert _pairs("e-z", structures) == {(3, 4)}
    assert _pairs("enantiomers", structures) == set()


@pytest.mark.parametrize("smarts, words", [
    ("[CX3H1:1]=O", "reactant>>product"),
    ("[CX3H1:1](=O>>[C:1]#N", "could not be parsed"),
    ("[C:1]=O.[N:2]>>[C:1][N:2]", "exactly one reactant"),
])
def test_bad_reaction_smarts_is_named(smarts, words):
    with pytest.raises(pair_classes.PairClassError, match=re.escape(words)):
        pair_classes.parse_reaction(smarts)


def test_benjamini_hochberg_matches_scipy():
    rng = np.random.default_rng(3)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 0.01, size=10)])
    # reference: scipy.stats.false_discovery_control (Benjamini-Hochberg)
    assert np.allclose(pair_classes.benjamini_hochberg(p), stats.false_discovery_control(p, method="bh"))
    with_nan = np.array([0.01, np.nan, 0.04, 0.03])
    adjusted = pair_classes.benjamini_hochberg(with_nan)
    assert np.isnan(adjusted[1])
    assert np.allclose(adjusted[[0, 2, 3]], stats.false_discovery_control([0.01, 0.04, 0.03], method="bh"))


def test_percentiles_match_scipy():
    rng = np.random.default_rng(5)
    reference = np.round(rng.uniform(size=300), 2)  # ties on purpose
    values = np.array([0.0, 0.25, 0.5, 0.731, 1.0])
    expected = [stats.percentileofscore(reference, v, kind="mean") for v in values]  # reference: scipy
    assert np.allclose(pair_classes.percentile_of(values, reference), expected)


def test_gap_test_detects_a_class_the_metric_overrates():
    rng = np.random.default_rng(0)
    ref_metric, ref_observed = rng.uniform(size=2000), rng.uniform(size=2000)
    # a class the metric puts on top while the observations put it at the median
    gap, p, count = pair_classes._gap_test(np.full(20, 0.99), np.full(20, 0.5), ref_metric, ref_observed,
                                          permutations=199, rng=rng)
    assert count == 20 and gap > 40 and p <= 0.01
    gap, p, _ = pair_classes._gap_test(rng.uniform(size=20), rng.uniform(size=20), ref_metric, ref_observed,
                                       permutations=199, rng=rng)
    assert p > 0.01


def test_user_classes_are_stored_checked_and_removed(catalogue):
    with catalogue.transaction() as session:
        pair_class_store.add_class(session, "ketone-alcohol", "[CX3:1](=[O:2])([#6:3])[#6:4]>>[CH1:1]([OH1:2])([#6:3])[#6:4]")
    with catalogue.transaction() as session:
        with pytest.raises(OlibraError, match="already exists"):
            pair_class_store.add_class(session, "ketone-alcohol", "[C:1]=O>>[C:1]O")
        with pytest.raises(OlibraError, match="could not be parsed"):
            pair_class_store.add_class(session, "broken", "[C:1=O>>[C:1]O")
        with pytest.raises(OlibraError, match="built-in"):
            pair_class_store.add_class(session, "enantiomers", "[C:1]=O>>[C:1]O")
    names = [c.name for c in pair_classes.catalogue_classes(catalogue)]
    assert names[-1] == "ketone-alcohol" and "enantiomers" in names
    with catalogue.transaction() as session:
        pair_class_store.remove_class(session, "ketone-alcohol")
    assert "ketone-alcohol" not in [c.name for c in pair_classes.catalogue_classes(catalogue)]


def test_every_indexed_metric_is_scored():
    # the class test loops over whatever the index scores, so a registered metric is never missed
    assert {"shape", "vibration", "structure", "blend-rank"} <= set(metrics.names(indexed=True))
