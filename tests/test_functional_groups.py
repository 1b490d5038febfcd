"""Functional-group SMARTS on textbook odorants; expected groups from their structures as drawn in
standard organic-chemistry and perfumery texts (common practice, no source)."""

import pytest

from library import functional_groups as fg

# name, SMILES, groups it must have, groups it must not have  (common practice, no source)
NAMED = [
    ("citral", "CC(C)=CCCC(C)=CC=O", {"aldehyde", "alkene"}, {"ketone", "nitrile", "ester"}),
    ("geranyl nitrile", "CC(C)=CCCC(C)=CC#N", {"nitrile", "alkene"}, {"aldehyde", "amine"}),
    ("coumarin", "O=C1OC2=CC=CC=C2C=C1", {"lactone", "ester", "aromatic ring"}, {"ketone", "ether", "phenol"}),
    ("ethyl butyrate", "CCCC(=O)OCC", {"ester"}, {"lactone", "ether", "ketone"}),
    ("gamma-decalactone", "CCCCCCC1CCC(=O)O1", {"lactone"}, {"ether", "carboxylic acid"}),
    ("linalool", "CC(C)=CCCC(C)(O)C=C", {"tertiary alcohol", "alkene"},
     {"primary alcohol", "secondary alcohol", "phenol"}),
    ("geraniol", "CC(C)=CCC/C(C)=C/CO", {"primary alcohol"}, {"tertiary alcohol", "aldehyde"}),
    ("menthol", "CC(C)C1CCC(C)CC1O", {"secondary alcohol"}, {"alkene", "aromatic ring"}),
    ("eugenol", "COC1=C(O)C=CC(CC=C)=C1", {"phenol", "ether", "alkene", "aromatic ring"}, {"ester", "acetal"}),
    ("methyl anthranilate", "COC(=O)C1=CC=CC=C1N", {"amine", "aromatic amine", "ester"}, {"ether", "lactone"}),
    ("hydroxycitronellal dimethyl acetal", "COC(OC)CC(C)CCCC(C)(C)O", {"acetal", "tertiary alcohol"},
     {"aldehyde", "ether"}),
    ("aurantiol (hydroxycitronellal-methyl anthranilate Schiff base)", "COC(=O)c1ccccc1N=CCC(C)CCCC(C)(C)O",
     {"schiff base", "ester"}, {"aldehyde", "amine"}),
    ("muscone", "CC1CCCCCCCCCCCCC(=O)C1", {"ketone"}, {"aldehyde", "ester"}),
    ("butyric acid", "CCCC(=O)O", {"carboxylic acid"}, {"ester", "primary alcohol"}),
    ("furfuryl mercaptan", "SCc1ccco1", {"thiol"}, {"sulfide"}),
    ("dimethyl sulfide", "CSC", {"sulfide"}, {"thiol"}),
    ("musk ketone", "CC(=O)c1c(C)c([N+](=O)[O-])c(C(C)(C)C)c([N+](=O)[O-])c1C", {"nitro", "ketone"}, {"amine"}),
    ("acetamide", "CC(N)=O", set(), {"amine", "ketone"}),
]


@pytest.mark.parametrize("name, smiles, present, absent", NAMED, ids=[n[0] for n in NAMED])
def test_groups_on_named_molecules(name, smiles, present, absent):
    found = set(fg.groups_of(smiles))
    assert present <= found, f"{name}: missing {present - found}"
    assert not absent & found, f"{name}: unexpected {absent & found}"


def test_names_are_forgiving_and_user_smarts_is_compiled():
    assert fg.pattern("Tertiary_Alcohol").name == "tertiary alcohol"
    assert fg.pattern("schiff-base").name == "schiff base"
    own = fg.pattern("[CX3H1](=O)c")  # aromatic aldehyde: benzaldehyde yes, citral no
    assert fg.passes("O=Cc1ccccc1", must_have=[own])
    assert not fg.passes("CC(C)=CCCC(C)=CC=O", must_have=[own])


@pytest.mark.parametrize("text", ["[C(", "CC(C", "C)=O", "[CX3]=[" ])
def test_bad_smarts_is_named(text):
    with pytest.raises(fg.GroupError, match="not a valid SMARTS") as caught:
        fg.pattern(text)
    assert repr(text) in str(caught.value)


def test_unknown_group_word_is_named():
    with pytest.raises(fg.GroupError, match="unknown functional group 'aldehid'"):
        fg.pattern("aldehid")


def test_presets_name_known_groups_and_exclude_what_they_should():
    for name, (groups, _why) in fg.BASE_PRESETS.items():
        assert set(groups) <= set(fg.VOCABULARY), name
    bleach = fg.preset("Hypochlorite bleach")
    # citral fails in bleach, geranyl nitrile's nitrile survives but its double bonds do not;
    # a saturated nitrile (decanenitrile) passes (common practice, no source)
    assert not fg.passes("CC(C)=CCCC(C)=CC=O", must_not_have=bleach)
    assert fg.passes("CCCCCCCCCC#N", must_not_have=bleach)
    soap = fg.preset("high-pH soap")
    assert not fg.passes("CCCC(=O)OCC", must_not_have=soap)  # esters hydrolyze in soap
    assert fg.passes("CC(C)=CCCC(C)=CC#N", must_not_have=soap)  # geranyl nitrile: soap-stable
    with pytest.raises(fg.GroupError, match="unknown base preset 'dish'"):
        fg.preset("dish")
