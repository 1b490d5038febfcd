"""Structure intake checked against outside references: CAS check digits, IUPAC InChI, IUPAC atomic weights."""

import pytest
from rdkit import Chem

from library.structures import StructureError, cas_check_digit, check_cas, standardize

# Real CAS Registry Numbers (from memory; each also passes the published check-digit rule).
REAL_CAS = [
    "64-17-5",    # ethanol (from memory)
    "7732-18-5",  # water (from memory)
    "50-00-0",    # formaldehyde (from memory)
    "78-70-6",    # linalool (from memory)
    "121-33-5",   # vanillin (from memory)
    "91-64-5",    # coumarin (from memory)
    "5989-27-5",  # (R)-(+)-limonene (from memory)
    "2216-51-5",  # (-)-menthol (from memory)
    "5392-40-5",  # citral (from memory)
    "106-24-1",   # geraniol (from memory)
]


@pytest.mark.parametrize("number", REAL_CAS)
def test_real_cas_numbers_pass(number):
    assert check_cas(number) == number


def test_check_digit_worked_example():
    # Worked example of the published rule for 7732-18-5 (water):
    # digits 7,7,3,2,1,8 from the right: 8*1 + 1*2 + 2*3 + 3*4 + 7*5 + 7*6 = 105 -> 5.
    assert cas_check_digit("773218") == 5


@pytest.mark.parametrize("number", REAL_CAS)
def test_every_wrong_check_digit_is_refused(number):
    body, check = number[:-1], int(number[-1])
    for wrong in set(range(10)) - {check}:
        with pytest.raises(StructureError, match="check digit"):
            check_cas(f"{body}{wrong}")


@pytest.mark.parametrize("text", ["64175", "64-17", "abc-de-f", "1-17-5", "12345678-12-3", "64-175-5", ""])
def test_malformed_cas_is_refused(text):
    with pytest.raises(StructureError, match="not of the form"):
        check_cas(text)


def test_cas_leading_zeros_and_spaces_are_normalized():
    assert check_cas(" 0064-17-5 ") == "64-17-5"


# InChIKeys through RDKit's InChI, the IUPAC reference implementation (values from memory).
@pytest.mark.parametrize("smiles,key", [
    ("CCO", "LFQSCWFLJHTTHZ-UHFFFAOYSA-N"),                   # ethanol (from memory)
    ("O", "XLYOFNOQVPJJNP-UHFFFAOYSA-N"),                     # water (from memory)
    ("c1ccccc1", "UHOVQNZJYSORNB-UHFFFAOYSA-N"),              # benzene (from memory)
    ("C[C@H](N)C(=O)O", "QNAYBMKLOCPYGJ-REOHCLBHSA-N"),       # L-alanine (from memory)
    ("C[C@@H](N)C(=O)O", "QNAYBMKLOCPYGJ-UWTATZPHSA-N"),      # D-alanine (from memory)
])
def test_inchikey_matches_reference(smiles, key):
    assert standardize(smiles).inchikey == key


def test_enantiomers_are_distinct_materials_with_shared_skeleton():
    r = standardize("CC1=CC[C@@H](CC1=O)C(C)=C")   # (R)-carvone
    s = standardize("CC1=CC[C@H](CC1=O)C(C)=C")    # (S)-carvone
    assert r.inchikey != s.inchikey
    assert r.inchikey.split("-")[0] == s.inchikey.split("-")[0]  # InChIKey block 1 = connectivity
    assert r.stereo_status == s.stereo_status == "defined"


def test_isotopologues_are_distinct_materials_with_shared_skeleton():
    light = standardize("c1ccccc1")
    heavy = standardize("[2H]c1c([2H])c([2H])c([2H])c([2H])c1[2H]")
    assert heavy.inchikey == "UHOVQNZJYSORNB-MZWXYZOWSA-N"  # benzene-d6 (from memory)
    assert heavy.inchikey.split("-")[0] == light.inchikey.split("-")[0]
    assert heavy.formula == "C6D6"
    assert "[2H]" in heavy.smiles  # isotopes survive standardization


# IUPAC standard atomic weights, abridged to five significant figures
# (Pure Appl. Chem. 88, 265 (2016)): H 1.008, C 12.011, N 14.007, O 15.999, S 32.06.
IUPAC = {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999, "S": 32.06}


@pytest.mark.parametrize("smiles,composition", [
    ("CCO", {"C": 2, "H": 6, "O": 1}),                         # ethanol
    ("COc1cc(C=O)ccc1O", {"C": 8, "H": 8, "O": 3}),            # vanillin
    ("CC(C)=CCCC(C)(O)C=C", {"C": 10, "H": 18, "O": 1}),       # linalool
    ("COC(=O)c1ccccc1N", {"C": 8, "H": 9, "N": 1, "O": 2}),    # methyl anthranilate
    ("CSC", {"C": 2, "H": 6, "S": 1}),                         # dimethyl sulfide
])
def test_average_mass_against_iupac_atomic_weights(smiles, composition):
    expected = sum(IUPAC[e] * n for e, n in composition.items())
    # tolerance: abridged weights carry +-0.001 per atom at most
    assert standardize(smiles).average_mass == pytest.approx(expected, abs=0.002 * sum(composition.values()))


def test_monoisotopic_mass_is_isotope_exact():
    # Atomic masses 1H 1.00782503, 2H 2.01410178, 12C 12 exactly, 16O 15.99491462 u
    # (AME 2016, Chin. Phys. C 41, 030003 (2017); from memory).
    light = standardize("CO")                      # CH4O
    heavy = standardize("[2H]C([2H])([2H])O")      # CD3OH
    assert light.monoisotopic_mass == pytest.approx(12 + 4 * 1.00782503 + 15.99491462, abs=1e-5)
    assert heavy.monoisotopic_mass == pytest.approx(12 + 1.00782503 + 3 * 2.01410178 + 15.99491462, abs=1e-5)


def test_salt_is_stripped_and_neutralized():
    s = standardize("[Na+].[O-]C(=O)c1ccccc1")
    assert s.smiles == Chem.MolToSmiles(Chem.MolFromSmiles("OC(=O)c1ccccc1"))
    assert any("counterion" in n for n in s.notes)


def test_unassigned_stereocentre_is_kept_as_mixture():
    s = standardize("CC(C)=CCCC(C)(O)C=C")  # linalool sold as racemate
    assert s.stereo_status == "partly undefined" and s.unassigned_stereo_count == 1


def test_canonical_tautomer_only_when_asked():
    enol = "OC(C)=CC(C)=O"  # pentane-2,4-dione enol form
    assert standardize(enol).smiles == Chem.MolToSmiles(Chem.MolFromSmiles(enol))
    assert standardize(enol, canonical_tautomer=True).smiles != standardize(enol).smiles


def test_molfile_and_inchi_input_give_the_same_material():
    reference = standardize("COc1cc(C=O)ccc1O")
    from_molfile = standardize(reference.molfile)
    from_inchi = standardize(reference.inchi)
    assert from_molfile.inchikey == from_inchi.inchikey == reference.inchikey


def test_heavy_atom_limit_is_configurable():
    chain = "C" * 30
    assert standardize(chain).heavy_atom_count == 30
    with pytest.raises(StructureError, match="more than the limit of 20"):
        standardize(chain, max_heavy_atoms=20)
