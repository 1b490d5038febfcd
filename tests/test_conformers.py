"""Conformer ensembles: determinism, weights, stereoisomer mixtures, errors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import rdMolAlign

from library.conformers import (
    GAS_CONSTANT_KCAL_PER_MOL_K,
    ConformerEnsemble,
    ConformerError,
    default_max_conformers,
    ensemble,
    heavy_atom_mol,
    parameters,
)

LINALOOL = "CC(C)=CCCC(C)(O)C=C"  # one unassigned stereocentre
CAMPHOR = "CC1(C)C2CCC1(C)C(=O)C2"  # two centres, only one enantiomer pair exists


@pytest.fixture(scope="module")
def linalool():
    return ensemble(LINALOOL)


def _coords(ens: ConformerEnsemble) -> list[np.ndarray]:
    return [m.mol.GetConformer(0).GetPositions() for m in ens.members]


def test_same_seed_gives_identical_coordinates(linalool):
    again = ensemble(LINALOOL)
    assert len(again) == len(linalool)
    for a, b in zip(_coords(linalool), _coords(again)):
        assert np.array_equal(a, b)  # exact: a fixed seed and one thread


def test_weights_sum_to_one(linalool):
    # floating-point summation only
    assert math.isclose(sum(m.weight for m in linalool.members), 1.0, abs_tol=1e-12)
    menthol = ensemble("CC(C)C1CCC(C)CC1O")  # three centres: 8 stereoisomers
    assert menthol.stereoisomer_count == 8
    assert math.isclose(sum(m.weight for m in menthol.members), 1.0, abs_tol=1e-12)


def test_unassigned_centre_gives_two_equally_weighted_enantiomers(linalool):
    assert linalool.stereoisomer_count == 2
    per_isomer = {0: 0.0, 1: 0.0}
    labels = {}
    for member in linalool.members:
        per_isomer[member.stereoisomer] += member.weight
        Chem.AssignStereochemistryFrom3D(member.mol)
        centres = Chem.FindMolChiralCenters(member.mol, includeUnassigned=True)
        labels.setdefault(member.stereoisomer, set()).update(label for _, label in centres)
    assert per_isomer[0] == pytest.approx(0.5, abs=1e-12)  # floating-point sums only
    assert per_isomer[1] == pytest.approx(0.5, abs=1e-12)
    # the 3D geometry of each stereoisomer carries a single, different CIP label
    assert {frozenset(v) for v in labels.values()} == {frozenset({"R"}), frozenset({"S"})}


def test_impossible_bridgehead_isomers_are_dropped():
    # Camphor's two bridgehead centres are coupled by the bridge, so only the
    # (1R,4R)/(1S,4S) pair exists (textbook stereochemistry, from memory).
    ens = ensemble(CAMPHOR)
    assert ens.stereoisomer_count == 2


def test_members_are_single_conformer_molecules_with_hydrogens(linalool):
    for member in linalool.members:
        mol = member.mol
        assert mol.GetNumConformers() == 1
        assert mol.GetConformer(0).GetId() == 0
        assert mol.GetConformer(0).Is3D()
        assert any(atom.GetAtomicNum() == 1 for atom in mol.GetAtoms())
    assert linalool.force_field == "MMFF94"


def test_isotopes_are_kept():
    ens = ensemble("[2H]C([2H])([2H])Oc1ccc2ccccc2c1")
    for member in ens.members:
        assert sum(atom.GetIsotope() == 2 for atom in member.mol.GetAtoms()) == 3


def test_energies_relative_to_minimum_and_within_window(linalool):
    for isomer in (0, 1):
        energies = [m.energy_kcal for m in linalool.members if m.stereoisomer == isomer]
        assert min(energies) == 0.0
        assert max(energies) <= 8.0


def test_boltzmann_weights_follow_energies(linalool):
    # R = 1.987 cal/(mol K), so RT = 0.5925 kcal/mol at 298.15 K (from memory)
    rt = GAS_CONSTANT_KCAL_PER_MOL_K * 298.15
    assert rt == pytest.approx(0.5925, abs=5e-4)  # four digits recalled
    members = [m for m in linalool.members if m.stereoisomer == 0]
    ground = next(m for m in members if m.energy_kcal == 0.0)
    for member in members:
        expected = math.exp(-member.energy_kcal / rt)
        assert member.weight / ground.weight == pytest.approx(expected, rel=1e-9)  # float


def test_kept_conformers_differ_by_rmsd_threshold():
    ens = ensemble("CCCCCCCCCC=O", rmsd_threshold_a=0.5)  # decanal, one stereoisomer
    heavy = [heavy_atom_mol(m.mol) for m in ens.members]
    assert len(heavy) > 1
    for i in range(len(heavy)):
        for j in range(i):
            # symmetry-aware best RMSD computed independently by RDKit
            assert rdMolAlign.GetBestRMS(heavy[i], heavy[j]) >= 0.5 - 1e-6


def test_cap_grows_with_rotatable_bonds_and_can_be_set():
    caps = [default_max_conformers(Chem.MolFromSmiles(s)) for s in ("c1ccccc1", "CCCCO", "CCCCCCCCO")]
    assert caps[0] < caps[1] < caps[2]
    assert len(ensemble("CCCCCCCCCC=O", max_conformers=2)) <= 2


def test_accepts_mol_and_smiles_alike():
    from_smiles = ensemble("COc1ccc(C=O)cc1")
    from_mol = ensemble(Chem.MolFromSmiles("COc1ccc(C=O)cc1"))
    assert np.array_equal(_coords(from_smiles)[0], _coords(from_mol)[0])


@pytest.mark.parametrize(
    ("bad", "fragment"),
    [
        ("not a smiles", "could not parse"),
        ("", "empty"),
        (42, "expected a SMILES string"),
        ("C*C", "dummy"),
        ("C" * 120, "heavy atoms"),
    ],
)
def test_bad_structures_raise_clear_errors(bad, fragment):
    with pytest.raises(ConformerError, match=fragment):
        ensemble(bad)
    assert issubclass(ConformerError, ValueError)


@pytest.mark.parametrize(
    "knobs",
    [
        {"max_conformers": 0},
        {"energy_window_kcal": -1.0},
        {"rmsd_threshold_a": -0.1},
        {"temperature_k": 0.0},
        {"max_stereoisomers": 0},
    ],
)
def test_bad_knobs_raise(knobs):
    with pytest.raises(ConformerError):
        ensemble("CCO", **knobs)


def test_parameters_are_json_and_follow_knobs(linalool):
    import json

    json.dumps(parameters())
    assert parameters(seed=1) != parameters(seed=2)
    assert linalool.parameters == parameters()
