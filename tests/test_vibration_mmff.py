"""MMFF94 engine: gradient route, experimental fundamentals, isotopes, mirror images, errors."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms
from reference_spectra import EXPERIMENTAL_FUNDAMENTALS_CM1

from library.vibration import mmff
from library.vibration.errors import MissingParametersError, VibrationInputError
from library.vibration.normal_modes import analyze, atomic_masses_amu


def _embedded(smiles, seed=7):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    return mol


def _energy_hessian(model, x0, step):
    """Hessian from second differences of the energy alone (no gradient calls)."""
    n = x0.size
    e0 = model.field.CalcEnergy(x0.tolist())
    hessian = np.zeros((n, n))

    def energy(i, a, j, b):
        x = x0.copy()
        x[i] += a
        x[j] += b
        return model.field.CalcEnergy(x.tolist())

    for i in range(n):
        hessian[i, i] = (energy(i, step, i, 0) - 2 * e0 + energy(i, -step, i, 0)) / step**2
        for j in range(i + 1, n):
            hessian[i, j] = hessian[j, i] = (
                energy(i, step, j, step) - energy(i, step, j, -step)
                - energy(i, -step, j, step) + energy(i, -step, j, -step)) / (4 * step**2)
    return hessian


@pytest.mark.parametrize("smiles", ["O", "CCO"])
@pytest.mark.parametrize("scheme, step_a", [("forward", 1e-5), ("central", 1e-3)])
def test_gradient_route_matches_energy_second_differences(smiles, scheme, step_a):
    model = mmff.ForceFieldModel(_embedded(smiles))
    model.minimize()
    x0 = model.positions_a()
    reference = _energy_hessian(model, x0, 1e-3)
    ours = model.hessian(x0, step_a=step_a, scheme=scheme)
    scale = np.abs(reference).max()
    # The energy-only reference is an O(h^2) second difference with h = 1e-3 A whose
    # rounding (~1e-12 kcal/mol / h^2) and truncation errors stay below ~1e-5 of the
    # largest element; the forward route adds an O(h) error of ~1e-5 relative. Allow 1e-4.
    assert np.abs(ours - reference).max() < 1e-4 * scale
    masses = atomic_masses_amu(model.mol)
    f_ours = analyze(ours, x0.reshape(-1, 3), masses).frequencies_cm1
    f_reference = analyze(reference, x0.reshape(-1, 3), masses).frequencies_cm1
    assert f_ours == pytest.approx(f_reference, abs=0.5)  # 1e-4 relative of ~4000 cm^-1 at most
    # The naive route (CalcGrad without a preceding CalcEnergy) is the documented trap:
    naive = np.array([
        (np.array(model.field.CalcGrad((x0 + step).tolist())) - np.array(model.field.CalcGrad((x0 - step).tolist())))
        / 2e-3 for step in np.eye(x0.size) * 1e-3])
    assert np.abs(naive - reference).max() > 0.1 * scale  # if RDKit ever fixes its cache, this flags it


# MMFF94 is compared on the molecules it describes; carbon dioxide is far off (checked apart below).
FUNDAMENTALS_FOR_MMFF = {name: value for name, value in EXPERIMENTAL_FUNDAMENTALS_CM1.items()
                         if name != "carbon dioxide"}


@pytest.mark.parametrize("name", sorted(FUNDAMENTALS_FOR_MMFF))
def test_mmff_against_experimental_fundamentals(name):
    smiles, experimental = EXPERIMENTAL_FUNDAMENTALS_CM1[name]
    result = mmff.vibrations(_embedded(smiles))
    computed = np.sort(result.frequencies_cm1)
    assert computed.shape == (len(experimental),)
    assert result.n_imaginary == 0
    assert result.residual_gradient_kcal_mol_a < 1e-3
    relative = np.abs(computed - np.sort(experimental)) / np.sort(experimental)
    # MMFF94 was fitted to geometries and energies, not spectra; harmonic values also
    # exceed anharmonic fundamentals by up to ~5 % for X-H stretches, and modes are paired
    # by sorting. Observed worst case 12.2 % (ethylene out-of-plane). Tolerances: 13 % per
    # mode, 6 % on the mean.
    assert relative.max() < 0.13
    assert relative.mean() < 0.06


def test_linear_molecule_has_3n_minus_5_modes():
    result = mmff.vibrations(_embedded("O=C=O"))
    assert result.modes.is_linear
    assert result.frequencies_cm1.shape == (4,)
    # MMFF94 has no cumulene-specific terms: its CO2 stretches are far from the
    # experimental 1333 and 2349 cm^-1 (NIST CCCBDB, from memory); we only check the count.


def _c_h_stretch_ratio(smiles):
    light = _embedded(smiles)
    heavy = Chem.Mol(light)
    for atom in heavy.GetAtoms():
        if atom.GetAtomicNum() == 1:
            atom.SetIsotope(2)
    f_light = np.sort(mmff.vibrations(light).frequencies_cm1)
    f_heavy = np.sort(mmff.vibrations(heavy).frequencies_cm1)
    n_stretches = int((f_light > 2500).sum())
    return f_light[-n_stretches:].mean() / f_heavy[-n_stretches:].mean(), n_stretches


def test_perdeuteration_shifts_c_h_stretches_by_the_textbook_ratio():
    ratio, n_stretches = _c_h_stretch_ratio("CCOC(C)=O")  # ethyl acetate, a fruity odorant
    assert n_stretches == 8
    # textbook: nu(C-H) / nu(C-D) is about 1.35-1.37 for stretches (harmonic limit 1.36)
    assert 1.34 < ratio < 1.37


def test_mirror_image_conformers_have_identical_frequencies():
    mol = _embedded("C=C(C)[C@H]1CC=C(C)CC1")  # (R)-limonene
    mirrored = Chem.Mol(mol)
    conformer = mirrored.GetConformer()
    for i in range(mirrored.GetNumAtoms()):
        p = conformer.GetAtomPosition(i)
        conformer.SetAtomPosition(i, (-p.x, p.y, p.z))
    Chem.AssignStereochemistryFrom3D(mirrored)
    assert Chem.MolToSmiles(Chem.RemoveHs(mirrored)) == Chem.MolToSmiles(
        Chem.MolFromSmiles("C=C(C)[C@@H]1CC=C(C)CC1"))  # it is (S)-limonene
    a = mmff.vibrations(mol).frequencies_cm1
    b = mmff.vibrations(mirrored).frequencies_cm1
    # same force field, mirrored minimum: differences are minimizer round-off only
    assert a == pytest.approx(b, abs=0.05)


def test_saddle_point_is_reoptimized_not_used():
    mol = _embedded("CC")
    conformer = mol.GetConformer()
    # eclipse ethane: H-C-C-H dihedral 0 degrees is a rotational transition state
    hydrogens_0 = [n.GetIdx() for n in mol.GetAtomWithIdx(0).GetNeighbors() if n.GetAtomicNum() == 1]
    hydrogens_1 = [n.GetIdx() for n in mol.GetAtomWithIdx(1).GetNeighbors() if n.GetAtomicNum() == 1]
    rdMolTransforms.SetDihedralDeg(conformer, hydrogens_0[0], 0, 1, hydrogens_1[0], 0.0)
    properties = AllChem.MMFFGetMoleculeProperties(mol)
    field = AllChem.MMFFGetMoleculeForceField(mol, properties)
    # minimizing from an exactly eclipsed start stays on the symmetric saddle
    field.MMFFAddTorsionConstraint(hydrogens_0[0], 0, 1, hydrogens_1[0], False, 0.0, 0.0, 1e4)
    field.Minimize(maxIts=5000)
    result = mmff.vibrations(mol)
    assert result.n_imaginary == 0
    assert result.reoptimizations >= 1
    assert any("re-optimized" in note for note in result.notes)
    dihedral = rdMolTransforms.GetDihedralDeg(
        Chem.Mol(mol).GetConformer(), hydrogens_0[0], 0, 1, hydrogens_1[0])
    assert abs(dihedral) < 1.0  # the input was left untouched
    assert result.frequencies_cm1.min() > 250  # staggered ethane torsion ~ 289 cm^-1 exp. (NIST CCCBDB, from memory)


def test_missing_parameters_suggest_gfn2():
    with pytest.raises(MissingParametersError, match="gfn2"):
        mmff.vibrations(_embedded("CB(C)C"))  # trimethylborane: no MMFF94 boron types


def test_missing_hydrogens_and_coordinates_are_reported():
    with pytest.raises(VibrationInputError, match="AddHs"):
        mol = Chem.MolFromSmiles("CCO")
        AllChem.EmbedMolecule(mol, randomSeed=1)
        mmff.vibrations(mol)
    with pytest.raises(VibrationInputError, match="no 3D conformer"):
        mmff.vibrations(Chem.AddHs(Chem.MolFromSmiles("CCO")))
    with pytest.raises(VibrationInputError, match="unknown MMFF94 engine option"):
        mmff.parameters(step=1)
