"""The tunnelling receptor model (library.vibration.tunnelling) against textbook physics and open data."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants as c
from scipy import optimize

from library import computations, conformers, units
from library.search import metrics
from library.search.metrics import Block, prepare_feature
from library.vibration import tunnelling
from library.vibration.spectrum import spectrum


def test_ir_constant_matches_the_quoted_debye_value():
    # 42.256 (km/mol) per (D/A)^2/amu: commonly quoted conversion (from memory)
    per_debye_angstrom = units.IR_E2_PER_AMU_TO_KM_PER_MOL * (units.DEBYE_C_M / c.angstrom / c.e) ** 2
    assert per_debye_angstrom == pytest.approx(42.256, rel=1e-4)


def test_diatomic_under_constant_force_is_the_displaced_oscillator():
    # HCl-like diatomic: point charges +-q on the atoms, field E along the bond.
    # Textbook displaced oscillator: S = m omega d^2 / (2 hbar) with d the shift of the minimum
    # of 1/2 m omega^2 x^2 - F x, i.e. S = F^2 / (2 m hbar omega^3).
    masses_amu = (1.00782503, 34.96885268)  # isotope masses, IUPAC (from memory)
    reduced_kg = masses_amu[0] * masses_amu[1] / sum(masses_amu) * units.ATOMIC_MASS_UNIT_KG
    wavenumber_cm1, charge_e, field_v_per_a = 2990.0, 0.18, 0.5  # HCl fundamental, NIST (from memory)
    omega = 2 * np.pi * c.c * 100 * wavenumber_cm1
    force_n = charge_e * c.e * field_v_per_a / c.angstrom
    shift_m = optimize.minimize_scalar(lambda x: 0.5 * reduced_kg * omega**2 * x**2 - force_n * x,
                                       bracket=(-1e-10, 1e-10), tol=1e-14).x
    textbook = reduced_kg * omega * shift_m**2 / (2 * c.hbar)
    assert textbook == pytest.approx(force_n**2 / (2 * reduced_kg * c.hbar * omega**3), rel=1e-6)
    # the dipole derivative of two point charges along the mass-weighted coordinate: q / sqrt(mu)
    reduced_amu = reduced_kg / units.ATOMIC_MASS_UNIT_KG
    intensity_km_mol = units.IR_E2_PER_AMU_TO_KM_PER_MOL * charge_e**2 / reduced_amu
    aligned = tunnelling.huang_rhys([wavenumber_cm1], [intensity_km_mol], field_v_per_a=field_v_per_a,
                                    orientation="aligned")[0]
    assert aligned == pytest.approx(textbook, rel=1e-4)
    averaged = tunnelling.huang_rhys([wavenumber_cm1], [intensity_km_mol], field_v_per_a=field_v_per_a)[0]
    assert averaged == pytest.approx(textbook / 3, rel=1e-4)  # <cos^2> over directions = 1/3


def test_line_shape_peaks_at_mode_plus_reorganization_with_marcus_width():
    # analytic: G(eps - hbar omega - lambda) peaks at hbar omega + lambda, standard deviation sqrt(2 lambda kT)
    lam, temperature = 0.03, 298.15
    gaps = tunnelling.gap_grid_ev(step_ev=0.0001)
    mode_cm1 = 1500.0
    rate = tunnelling.inelastic_rate_s(gaps, [mode_cm1], [0.01], lambda_ev=lam, temperature_k=temperature,
                                       hopping_ev=0.001)
    expected_peak = mode_cm1 * c.h * c.c * 100 / c.e + lam
    assert gaps[np.argmax(rate)] == pytest.approx(expected_peak, abs=1e-4)
    weights = rate / rate.sum()
    mean = (weights * gaps).sum()
    width = np.sqrt((weights * (gaps - mean) ** 2).sum())
    assert width == pytest.approx(np.sqrt(2 * lam * c.k / c.e * temperature), rel=1e-3)
    # golden rule: (2 pi / hbar) t^2 S times the normalized Gaussian integrates to that rate
    total = rate.sum() * 0.0001
    assert total == pytest.approx(2 * np.pi / (c.hbar / c.e) * 0.001**2 * 0.01, rel=1e-3)


@pytest.fixture(scope="module")
def water():
    return spectrum(conformers.ensemble("O"))


def test_water_huang_rhys_ordering_follows_intensity_over_cube(water):
    # NIST gas-phase water fundamentals (from memory): bend 1595 cm-1 ~ 60 km/mol, antisymmetric
    # stretch 3756 cm-1 ~ 45 km/mol, symmetric stretch 3657 cm-1 ~ 3 km/mol: A / omega^3 puts the bend
    # far first; the stretches have the same order as their intensities
    reference = {"bend": 60 / 1595**3, "antisymmetric": 45 / 3756**3, "symmetric": 3 / 3657**3}
    described = tunnelling.tunnelling_spectrum(water)
    member = water.conformers[0]
    s = described.huang_rhys[: len(member.frequencies_cm1)]
    order = np.argsort(member.frequencies_cm1)
    computed = dict(zip(("bend", "symmetric", "antisymmetric"), s[order]))
    assert max(computed, key=computed.get) == max(reference, key=reference.get)
    assert computed["bend"] > 10 * max(computed["symmetric"], computed["antisymmetric"])


def test_deuteration_moves_the_stretch_peak_by_the_isotope_ratio():
    # C-H / C-D stretch ratio about 1.36 (textbook). Chloroform: its one C-H stretch is the
    # highest mode; methane would not do, as MMFF94's fixed charges give its C-H stretches no
    # dipole derivative (the fixed-charge limit stated in the module docstring)
    # dipole derivative (the fixed-charge limit stated in the module docstring). The stretch's own
    # channel is compared: in the summed spectrum of CDCl3 it sits on the tail of stronger bends.
    p = tunnelling.DEFAULTS
    peaks = []
    for smiles in ("ClC(Cl)Cl", "[2H]C(Cl)(Cl)Cl"):
        described = tunnelling.tunnelling_spectrum(spectrum(conformers.ensemble(smiles)))
        stretch = int(np.argmax(spectrum(conformers.ensemble(smiles)).conformers[0].frequencies_cm1))
        frequency = spectrum(conformers.ensemble(smiles)).conformers[0].frequencies_cm1[stretch]
        assert described.huang_rhys[stretch] > 0
        channel = tunnelling.inelastic_rate_s(described.gaps_ev, [frequency], [described.huang_rhys[stretch]],
                                              lambda_ev=p["lambda_ev"], temperature_k=p["temperature_k"],
                                              hopping_ev=p["hopping_ev"])
        peaks.append(described.gaps_ev[np.argmax(channel)] - p["lambda_ev"])
    assert peaks[0] / peaks[1] == pytest.approx(1.36, abs=0.04)  # MMFF94 frequencies: a few per cent


def test_mirror_pair_identical_isotopologue_pair_parts_ways():
    r = computations.compute_material(computations.Plan(kinds=("tunnelling",)), "C=C(C)[C@H]1CC=C(C)CC1")
    s = computations.compute_material(computations.Plan(kinds=("tunnelling",)), "C=C(C)[C@@H]1CC=C(C)CC1")
    np.testing.assert_array_equal(r["tunnelling"][0]["tunnelling_spectrum"], s["tunnelling"][0]["tunnelling_spectrum"])
    # ethyl acetate and its perdeuterated isotopologue: same geometry, shifted modes
    plan = computations.Plan(kinds=("shape", "tunnelling"))
    h = computations.compute_material(plan, "CCOC(C)=O")
    d = computations.compute_material(plan, "[2H]C([2H])([2H])C([2H])([2H])OC(=O)C([2H])([2H])[2H]")
    blocks = [Block(prepare_feature("tunnelling", metrics.feature_row("tunnelling", {"tunnelling": x["tunnelling"][0]}, "")))
              for x in (h, d)]
    tunnel = float(metrics.get("tunnelling").similarity(*blocks, aligned=True)[0])
    shapes = [Block(prepare_feature("shape", metrics.feature_row("shape", {"shape": x["shape"][0]}, "")))
              for x in (h, d)]
    shape_score = float(metrics.get("shape").similarity(*shapes, aligned=True)[0])
    assert shape_score > 0.99  # isotopologues share geometries by construction
    # Deuteration moves every C-H stretch channel by 700-800 cm^-1, more than two line widths
    # (sqrt(2 lambda k_B T) = 0.039 eV = 318 cm^-1, analytic), so at the gaps those channels fill the
    # two rates differ by decades: the pair parts ways far beyond float noise (measured: 0.74).
    assert tunnel < 0.9 < shape_score
    assert not np.allclose(h["tunnelling"][0]["tunnelling_spectrum"], d["tunnelling"][0]["tunnelling_spectrum"])


def test_settings_are_checked_and_stamped():
    with pytest.raises(ValueError, match="lambda_ev"):
        tunnelling.parameters(lambda_ev=-1)
    with pytest.raises(ValueError, match="unknown"):
        tunnelling.parameters(lambda_mev=30)
    stamp = {s.kind: s for s in computations.stamps(computations.Plan())}["tunnelling"]
    assert stamp.parameters["tunnelling"]["lambda_ev"] == tunnelling.DEFAULTS["lambda_ev"]
    assert stamp.engine_name == {s.kind: s for s in computations.stamps(computations.Plan())}["vibration"].engine_name


def test_tunnelling_metric_reads_decades_above_the_floor():
    floor = tunnelling.FLOOR_RATE_S
    rates = np.array([[0.0, floor / 10, floor, 10 * floor, 1e4 * floor], [floor, floor, 1e3 * floor, floor, floor]])
    decades = tunnelling.decades_above_floor(rates)
    np.testing.assert_allclose(decades, [[0, 0, 0, 1, 4], [0, 0, 3, 0, 0]])  # log10 by hand
    rows = np.stack([metrics.feature_row("tunnelling", {"tunnelling": {"tunnelling_spectrum": r}}, "") for r in rates])
    prepared = prepare_feature("tunnelling", rows)
    score = metrics.get("tunnelling").similarity(Block(prepared), Block(prepared))
    from scipy.spatial.distance import cdist  # outside reference for the L1 distance

    expected = 1.0 / (1.0 + cdist(decades, decades, "cityblock") / decades.shape[1])
    np.testing.assert_allclose(score, expected, rtol=1e-6)
    assert expected[0, 1] == pytest.approx(1 / (1 + 8 / 5))  # |0|+|0|+|-3|+|1|+|4| = 8 over 5 gaps
    with pytest.raises(ValueError, match="non-negative"):
        prepare_feature("tunnelling", -rows)
