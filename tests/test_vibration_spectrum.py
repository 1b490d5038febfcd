"""Ensemble spectra, EVA fingerprints, band matching and plots."""

import dataclasses
import json

import numpy as np
import pytest
from rdkit import Chem

from library import conformers
from library.conformers import boltzmann_weights
from library.vibration import spectrum as spectrum_module
from library.vibration.errors import VibrationInputError
from library.vibration.spectrum import (
    VibrationSpectrum,
    cosine_similarity,
    fingerprint,
    main_bands,
    match_bands,
    spectrum,
)


@pytest.fixture(scope="module")
def ethyl_acetate():
    return spectrum(conformers.ensemble("CCOC(C)=O"))


@pytest.fixture(scope="module")
def ethyl_acetate_d8():
    return spectrum(conformers.ensemble("[2H]C([2H])([2H])C([2H])([2H])OC(=O)C([2H])([2H])[2H]"))


def test_fingerprint_grid_and_normalizations(ethyl_acetate):
    fp = fingerprint(ethyl_acetate)
    assert fp.shape == (801,)  # 0-4000 cm^-1 in 5 cm^-1 steps (contract)
    assert fp.dtype == np.float32
    assert np.linalg.norm(fp) == pytest.approx(1.0, abs=1e-6)  # float32 rounding
    density = fingerprint(ethyl_acetate, normalization="none")
    n_modes = 3 * 14 - 6
    # unit-area Gaussians weighted by populations summing to 1: the band density integrates
    # to the mode count; a 5 cm^-1 Riemann sum of sigma = 10 cm^-1 Gaussians is exact to ~1e-6,
    # and the lowest torsion (above 40 cm^-1 = 4 sigma) loses < 1e-4 of its area at 0 cm^-1.
    assert density.sum() * 5.0 == pytest.approx(n_modes, rel=1e-3)
    peak = fingerprint(ethyl_acetate, normalization="max")
    assert peak.max() == pytest.approx(1.0)
    fine = fingerprint(ethyl_acetate, step_cm1=1.0, max_cm1=3999.0)
    assert fine.shape == (4000,)


def test_weights_sum_to_one_and_stereoisomers_are_equal():
    spec = spectrum(conformers.ensemble("CC(C)=CCCC(C)=CC=O"))  # citral: E and Z forms
    weights = np.array([c.weight for c in spec.conformers])
    assert weights.sum() == pytest.approx(1.0, abs=1e-12)  # rounding only
    groups = np.array([c.stereoisomer for c in spec.conformers])
    assert len(set(groups)) == 2
    for label in set(groups):
        assert weights[groups == label].sum() == pytest.approx(0.5, abs=1e-12)
    assert min(c.energy_kcal for c in spec.conformers) == 0.0


def test_boltzmann_weights_follow_the_engine_energies():
    # two conformers 1 kcal/mol apart at 298.15 K: ratio exp(-1 / RT), RT = 0.5925 kcal/mol
    weights = boltzmann_weights(np.array([0.0, 1.0]), np.array([0, 0]), temperature_k=298.15)
    assert weights[1] / weights[0] == pytest.approx(np.exp(-1.0 / 0.592487), rel=1e-5)  # RT from memory, 6 digits


def test_isotopologues_score_clearly_below_one(ethyl_acetate, ethyl_acetate_d8):
    similarity = cosine_similarity(fingerprint(ethyl_acetate), fingerprint(ethyl_acetate_d8))
    # same shape, but every C-H stretch and bend moves by a factor ~1.36
    assert similarity < 0.8
    assert cosine_similarity(fingerprint(ethyl_acetate), fingerprint(ethyl_acetate)) == pytest.approx(1.0)


def _mirrored(ens):
    """The enantiomeric ensemble: every conformer reflected through the yz plane."""
    members = []
    for member in ens.members:
        mol = Chem.Mol(member.mol)
        conformer = mol.GetConformer()
        for i in range(mol.GetNumAtoms()):
            p = conformer.GetAtomPosition(i)
            conformer.SetAtomPosition(i, (-p.x, p.y, p.z))
        Chem.AssignStereochemistryFrom3D(mol)
        members.append(dataclasses.replace(member, mol=mol))
    return dataclasses.replace(ens, members=tuple(members))


def test_mirror_image_materials_have_identical_spectra():
    r_ensemble = conformers.ensemble("C=C(C)[C@H]1CC=C(C)CC1")  # (R)-limonene
    s_ensemble = _mirrored(r_ensemble)
    assert Chem.MolToSmiles(Chem.RemoveHs(s_ensemble.members[0].mol)) == Chem.MolToSmiles(
        Chem.MolFromSmiles("C=C(C)[C@@H]1CC=C(C)CC1"))  # (S)-limonene
    r, s = spectrum(r_ensemble), spectrum(s_ensemble)
    for a, b in zip(r.conformers, s.conformers):
        # enantiomeric conformers of one force field: round-off of the minimizer only
        assert a.frequencies_cm1 == pytest.approx(b.frequencies_cm1, abs=0.05)
        assert a.weight == pytest.approx(b.weight, abs=1e-6)
    assert cosine_similarity(fingerprint(r), fingerprint(s)) > 0.99999
    # Independently sampled ensembles of the two enantiomers need not hold the same
    # conformers (measured 0.994); they still agree closely.
    independent = spectrum(conformers.ensemble("C=C(C)[C@@H]1CC=C(C)CC1"))
    assert cosine_similarity(fingerprint(r), fingerprint(independent)) > 0.98


def test_round_trip_through_arrays(ethyl_acetate):
    arrays = ethyl_acetate.to_arrays()
    assert all(a.dtype == np.float32 for a in arrays.values())
    summary = ethyl_acetate.summary()
    json.dumps(summary)
    rebuilt = VibrationSpectrum.from_arrays(arrays, json.loads(json.dumps(summary)))
    assert len(rebuilt.conformers) == len(ethyl_acetate.conformers)
    # float32 storage: 3000 cm^-1 keeps ~2e-4 cm^-1
    assert fingerprint(rebuilt) == pytest.approx(fingerprint(ethyl_acetate), abs=1e-5)
    with pytest.raises(VibrationInputError, match="recompute"):
        VibrationSpectrum.from_arrays({k: v for k, v in arrays.items() if k != "weights"}, summary)


def test_main_bands_and_band_matching(ethyl_acetate, ethyl_acetate_d8):
    bands = main_bands(ethyl_acetate, n=6)
    labels = {b.label for b in bands if b.label}
    # ethyl acetate's diagnostic groups: an ester C=O and C-H bonds (from the structure)
    assert {"C=O", "C-H"} <= labels and 6 <= len(bands) <= 6 + len(labels)
    carbonyl = next(b for b in bands if b.label == "C=O")
    assert 1650 <= carbonyl.position_cm1 <= 1900  # ester C=O, textbook 1735-1750; MMFF94 within ~10 %
    assert "C-D" in {b.label for b in main_bands(ethyl_acetate_d8, n=6)}
    assert bands[0].relative_height == 1.0
    assert all(a.relative_height >= b.relative_height for a, b in zip(bands, bands[1:]))
    same = match_bands(ethyl_acetate, ethyl_acetate)
    assert same.score == 1.0 and not same.unmatched_a and not same.unmatched_b
    shifted = match_bands(ethyl_acetate, ethyl_acetate_d8, tolerance_cm1=15.0)
    assert 0.0 <= shifted.score < 0.8
    assert any(b.position_cm1 > 2800 for b in shifted.unmatched_a)  # C-H stretches have no partner
    assert any(2000 < b.position_cm1 < 2300 for b in shifted.unmatched_b)  # nor the C-D stretches
    assert all(abs(a.position_cm1 - b.position_cm1) <= 15.0 for a, b in shifted.pairs)


def test_plot_files(tmp_path, ethyl_acetate, ethyl_acetate_d8):
    from library.vibration.plot import draw_spectrum

    svg = draw_spectrum(ethyl_acetate, tmp_path / "one.svg")
    png = draw_spectrum(ethyl_acetate, tmp_path / "pair.png", other=ethyl_acetate_d8)
    assert svg.read_text().lstrip().startswith("<?xml")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    with pytest.raises(VibrationInputError, match=".svg or .png"):
        draw_spectrum(ethyl_acetate, tmp_path / "plot.pdf")


def test_bad_requests_are_explained(ethyl_acetate):
    # A spectrum read from an older record that carries no intensities cannot be IR-weighted.
    without_ir = dataclasses.replace(ethyl_acetate, conformers=tuple(
        dataclasses.replace(c, ir_intensities_km_mol=None) for c in ethyl_acetate.conformers))
    with pytest.raises(VibrationInputError, match="no infrared intensities"):
        fingerprint(without_ir, intensity_weighting="ir")
    with pytest.raises(VibrationInputError, match="intensity_weighting must be one of"):
        fingerprint(ethyl_acetate, intensity_weighting="raman")
    with pytest.raises(VibrationInputError, match="same grid"):
        cosine_similarity(np.ones(801), np.ones(800))
    with pytest.raises(VibrationInputError, match="all zeros"):
        cosine_similarity(np.zeros(801), np.ones(801))
    with pytest.raises(VibrationInputError, match="unknown vibration engine"):
        spectrum(conformers.ensemble("CCO"), engine="dft")
    with pytest.raises(VibrationInputError, match="normalization"):
        fingerprint(ethyl_acetate, normalization="l3")


def test_record_parameters_are_json_and_engine_specific():
    a = spectrum_module.record_parameters("mmff")
    b = spectrum_module.record_parameters("gfn2")
    assert json.dumps(a) != json.dumps(b)
    assert a["fingerprint"]["step_cm1"] == 5.0


def test_gfn2_ensemble_spectrum_has_ir_weighted_fingerprint():
    pytest.importorskip("tblite")
    spec = spectrum(conformers.ensemble("CCO"), engine="gfn2")
    assert spec.has_ir
    assert spec.max_residual_gradient_kcal_mol_a <= 0.05
    weighted = fingerprint(spec, intensity_weighting="ir")
    plain = fingerprint(spec)
    assert cosine_similarity(weighted, plain) < 0.99  # intensities reshape the profile
    assert all((c.ir_intensities_km_mol >= 0).all() for c in spec.conformers)
    # the O-H stretch is the highest mode (GFN2 places it near 3570 cm^-1 for ethanol)
    assert all(3400 < c.frequencies_cm1.max() < 3800 for c in spec.conformers)


def test_spectrum_accepts_smiles_and_reports_missing_mmff_parameters():
    spec = spectrum("CCO")
    assert spec.engine == "mmff94"
    with pytest.raises(VibrationInputError, match="gfn2"):
        spectrum(conformers.ensemble("CB(C)C"))
    assert isinstance(Chem.MolFromSmiles("CCO"), Chem.Mol)
