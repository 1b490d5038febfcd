"""Phonon-assisted inelastic electron tunnelling: a receptor model for the vibration hypothesis.

The model (Phys. Rev. Lett. 98, 038101 (2007)) pictures an electron crossing a donor-acceptor
gap of energy ``epsilon`` inside the receptor. The crossing is fast only when an odorant mode of
energy ``hbar omega_k`` close to ``epsilon - lambda`` can take up the energy; the rate of that
channel is set by the mode's electron-vibration coupling (its Huang-Rhys factor ``S_k``), the
receptor's reorganization energy ``lambda`` and the temperature, through the Marcus line shape
(J. Chem. Phys. 24, 966 (1956)). This module is pure numpy: it turns a stored
:class:`~library.vibration.spectrum.VibrationSpectrum` into per-mode Huang-Rhys factors and a
Boltzmann-averaged tunnelling spectrum on a grid of gaps.

Huang-Rhys factor of one mode
-----------------------------
A harmonic mode of mass ``m`` and angular frequency ``omega`` under a constant force ``F`` is
the textbook displaced oscillator: the minimum moves by ``d = F / (m omega^2)``, and the
Huang-Rhys factor (the mean number of quanta the sudden shift creates) is

    S = m omega d^2 / (2 hbar) = F^2 / (2 m hbar omega^3).

With mass-weighted normal coordinates ``Q_k`` (kg^1/2 m) the mass is 1 and the force on mode k
of a uniform field difference ``dF`` (V/m; the field at the odorant with the electron on the
donor minus with it on the acceptor) is ``f_k = dF . dmu/dQ_k``, with ``dmu/dQ_k`` the dipole
derivative (C kg^-1/2). So ``S_k = (dF . dmu/dQ_k)^2 / (2 hbar omega_k^3)``. The odorant sits in
the receptor in no known orientation; averaging ``cos^2`` over all directions gives 1/3:

    S_k = |dF|^2 |dmu/dQ_k|^2 / (6 hbar omega_k^3)          (dimensionless)

(``orientation="aligned"`` keeps the field along the dipole derivative: factor 1/2 instead of
1/6.) Isotope-exact masses carry through both ``omega_k`` and ``dmu/dQ_k``, so deuteration
changes both. A point charge at an explicit docking position is not offered: the orientation
average is what the published estimate uses.

From stored IR intensities
--------------------------
The engines store integrated IR intensities ``A_k`` in km/mol (double-harmonic approximation):
``A_k = N_A / (12 eps0 c^2) |dmu/dQ_k|^2``. With dipole derivatives in e amu^-1/2 the constant is
:data:`library.units.IR_E2_PER_AMU_TO_KM_PER_MOL` (about 974.9 km/mol per e^2/amu, from SI
constants); in (D/A)^2/amu it is 974.9 * (0.2082 e A / D)^2 = 42.25, the commonly quoted
42.256 (km/mol)/((D/A)^2/amu) (from memory; checked in tests/test_tunnelling.py). Hence

    |dmu/dQ_k|^2 [C^2/kg] = A_k / 974.9 * e^2 / amu.

GFN2-xTB dipole derivatives come from its wavefunction. MMFF94 has fixed partial charges: its
dipole derivatives are those of point charges riding on the atoms, with no charge flow or
polarization, so it misses intensity that comes from charge transfer along a stretching bond
(C-H stretches especially) and its S_k are qualitative.

Tunnelling spectrum
-------------------
The Marcus line shape is a normalized Gaussian of variance ``2 lambda k_B T``,
``G(x) = exp(-x^2 / (4 lambda k_B T)) / sqrt(4 pi lambda k_B T)`` (eV^-1). By the golden rule
with hopping matrix element ``t`` the rates are, in s^-1,

    elastic     (2 pi / hbar) t^2 G(epsilon - lambda)
    inelastic   (2 pi / hbar) t^2 sum_k S_k G(epsilon - hbar omega_k - lambda)

(to first order in S_k; the common factor exp(-sum S_k), close to 1, is left out). Each inelastic
channel peaks at ``epsilon = hbar omega_k + lambda`` with standard deviation
``sqrt(2 lambda k_B T)``. The stored spectrum is the inelastic rate on a gap grid of 0-0.5 eV
(0-4033 cm^-1), averaged over conformers with the spectrum's Boltzmann weights. ``t`` only scales
the rate; the comparison below reads rates against a fixed floor, so it does depend on it.

Comparing two materials
-----------------------
A receptor answers to the rate at its own gap, and the rates of one odorant span many decades: the
Huang-Rhys factors grow as 1/omega^3, so the soft modes below a few hundred cm^-1 outweigh a C-H
stretch by three or four decades. A cosine of the rates therefore sees only the soft modes (over the
demo catalogue's pairs its median is 0.996, and a perdeuterated pair scores 0.999). The metric
compares instead, gap by gap, how many decades each rate lies above a floor below which a receptor
is taken to be silent:

    d(epsilon) = log10(max(rate(epsilon), floor) / floor),
    similarity = 1 / (1 + mean over the gap grid of |d_A - d_B|)

(the USR form the shape metric uses). Every receptor gap then counts alike, a band that moves (C-H to
C-D) counts where it was and where it went, and gaps where neither material is read count zero.
:data:`FLOOR_RATE_S` = 1e3 s^-1: a crossing rarer than about once per millisecond is too slow for
a receptor's response (receptor activation and signalling work on millisecond time scales, from
memory); the rates themselves scale with ``hopping_ev^2``, so the floor goes with that default.

Defaults (:data:`DEFAULTS`)
---------------------------
- ``lambda_ev = 0.030``: the small receptor reorganization energy the model argues for, a few
  tens of meV (Phys. Rev. Lett. 98, 038101 (2007), from memory).
- ``temperature_k = 298.15``: the temperature of the conformer populations of the vibration
  record; the paper works at physiological temperature, about 310 K (from memory), a 2 %
  difference in the line width.
- ``hopping_ev = 0.001``: a hopping matrix element of order meV, the paper's estimate (from
  memory); it scales every rate by ``t^2`` and changes no similarity.
- ``field_v_per_a = 0.576``: the field of one elementary charge at 5 A
  (e / (4 pi eps0 (5 A)^2)), our reading of the paper's estimate of a unit charge moving a few
  angstrom from the odorant (from memory).
- grid ``0-0.5 eV`` in steps of 1 meV: the mid-infrared range of the vibration record's grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from library import units

ENGINE_VERSION = "1"
DEFAULTS = {
    "lambda_ev": 0.030,
    "temperature_k": 298.15,
    "hopping_ev": 0.001,
    "field_v_per_a": 0.576,
    "orientation": "average",
    "min_ev": 0.0,
    "max_ev": 0.5,
    "step_ev": 0.001,
}
FLOOR_RATE_S = 1.0e3  # the rate below which a receptor is taken to be silent (see "Comparing two materials")
_ORIENTATION_FACTORS = {"average": 1.0 / 6.0, "aligned": 1.0 / 2.0}
EV_J = units.ELECTRON_VOLT_J
BOLTZMANN_EV_PER_K = units.BOLTZMANN_J_PER_K / EV_J
CM1_TO_EV = units.PLANCK_J_S * units.SPEED_OF_LIGHT_M_PER_S * 100.0 / EV_J  # energy of 1 cm^-1, eV
CAUTION = "a model of a contested hypothesis (vibrational theory of olfaction), not an established mechanism"
MODEL_NOTE = f"the tunnelling receptor model is {CAUTION}"  # where a list is scored through the model


def parameters(**overrides) -> dict:
    """The tunnelling settings (defaults above, overridden by keyword), checked; JSON-able."""
    unknown = sorted(set(overrides) - set(DEFAULTS))
    if unknown:
        raise ValueError(f"unknown tunnelling setting(s) {unknown}; known: {', '.join(DEFAULTS)}")
    out = dict(DEFAULTS, **overrides)
    if out["orientation"] not in _ORIENTATION_FACTORS:
        raise ValueError(f"orientation must be one of {', '.join(_ORIENTATION_FACTORS)}, got {out['orientation']!r}")
    for key in ("lambda_ev", "temperature_k", "hopping_ev", "field_v_per_a", "step_ev"):
        if not float(out[key]) > 0:
            raise ValueError(f"{key} must be a positive number, got {out[key]!r}")
    if not float(out["max_ev"]) > float(out["min_ev"]):
        raise ValueError(f"max_ev must exceed min_ev, got {out['min_ev']}-{out['max_ev']}")
    return out


def recorded_settings(summary: dict | None) -> dict:
    """The settings a tunnelling record was computed with, from its summary (defaults for any missing)."""
    return parameters(**{k: v for k, v in (summary or {}).items() if k in DEFAULTS})


def settings_grid_ev(settings: dict) -> np.ndarray:
    """The gap grid (eV) of a record computed with `settings`."""
    return gap_grid_ev(min_ev=settings["min_ev"], max_ev=settings["max_ev"], step_ev=settings["step_ev"])


def gap_grid_ev(*, min_ev: float = 0.0, max_ev: float = 0.5, step_ev: float = 0.001) -> np.ndarray:
    """Receptor gaps epsilon (eV): min_ev, min_ev + step_ev, ..., max_ev."""
    count = int(np.floor((max_ev - min_ev) / step_ev + 1e-9)) + 1
    return min_ev + step_ev * np.arange(count)


def dipole_derivative_squared_si(ir_intensities_km_mol) -> np.ndarray:
    """|dmu/dQ_k|^2 in C^2/kg (mass-weighted normal coordinates) from integrated IR intensities (km/mol)."""
    e2_per_amu = np.asarray(ir_intensities_km_mol, float) / units.IR_E2_PER_AMU_TO_KM_PER_MOL
    return e2_per_amu * units.ELEMENTARY_CHARGE_C**2 / units.ATOMIC_MASS_UNIT_KG


def angular_frequency_rad_s(frequencies_cm1) -> np.ndarray:
    """omega (rad/s) of wavenumbers in cm^-1."""
    return 2.0 * np.pi * units.SPEED_OF_LIGHT_M_PER_S * 100.0 * np.asarray(frequencies_cm1, float)


def huang_rhys(frequencies_cm1, ir_intensities_km_mol, *, field_v_per_a: float = DEFAULTS["field_v_per_a"],
               orientation: str = "average") -> np.ndarray:
    """Huang-Rhys factor S_k (dimensionless) of each mode under a field difference `field_v_per_a` (V/A).

    ``S_k = |dF|^2 |dmu/dQ_k|^2 / (6 hbar omega_k^3)`` (orientation average; 1/2 instead of 1/6 when
    ``orientation="aligned"``). Modes at or below 0 cm^-1 get 0.
    """
    factor = _ORIENTATION_FACTORS[orientation]
    omega = angular_frequency_rad_s(frequencies_cm1)
    field_v_per_m = field_v_per_a / units.ANGSTROM_M
    derivative2 = dipole_derivative_squared_si(ir_intensities_km_mol)
    safe = np.where(omega > 0, omega, 1.0)
    return np.where(omega > 0, factor * field_v_per_m**2 * derivative2 / (units.HBAR_J_S * safe**3), 0.0)


def marcus_gaussian(x_ev, *, lambda_ev: float, temperature_k: float) -> np.ndarray:
    """Normalized Marcus line shape G(x) (eV^-1): a Gaussian of variance 2 lambda k_B T in x (eV)."""
    variance = 2.0 * lambda_ev * BOLTZMANN_EV_PER_K * temperature_k
    x = np.asarray(x_ev, float)
    return np.exp(-x**2 / (2.0 * variance)) / np.sqrt(2.0 * np.pi * variance)


def _rate_prefactor_s(hopping_ev: float) -> float:
    """(2 pi / hbar) t^2 in s^-1 eV (times G in eV^-1 gives s^-1)."""
    return 2.0 * np.pi / (units.HBAR_J_S / EV_J) * hopping_ev**2


def inelastic_rate_s(gaps_ev, frequencies_cm1, huang_rhys_factors, *, lambda_ev: float, temperature_k: float,
                     hopping_ev: float) -> np.ndarray:
    """sum_k (2 pi/hbar) t^2 S_k G(epsilon - hbar omega_k - lambda) on the gaps (eV), in s^-1."""
    gaps = np.asarray(gaps_ev, float)
    mode_ev = np.asarray(frequencies_cm1, float) * CM1_TO_EV
    shapes = marcus_gaussian(gaps[:, None] - mode_ev[None, :] - lambda_ev, lambda_ev=lambda_ev,
                             temperature_k=temperature_k)
    return _rate_prefactor_s(hopping_ev) * shapes @ np.asarray(huang_rhys_factors, float)


def elastic_rate_s(gaps_ev, *, lambda_ev: float, temperature_k: float, hopping_ev: float) -> np.ndarray:
    """(2 pi/hbar) t^2 G(epsilon - lambda) on the gaps (eV), in s^-1: the crossing with no mode excited."""
    return _rate_prefactor_s(hopping_ev) * marcus_gaussian(np.asarray(gaps_ev, float) - lambda_ev,
                                                           lambda_ev=lambda_ev, temperature_k=temperature_k)


def decades_above_floor(rate_s, floor_rate_s: float = FLOOR_RATE_S) -> np.ndarray:
    """log10(max(rate, floor) / floor): decades of rate (s^-1) above the silent floor, 0 below it."""
    rate = np.asarray(rate_s, float)
    return np.log10(np.maximum(rate, floor_rate_s) / floor_rate_s)


@dataclass(frozen=True, eq=False)
class TunnellingSpectrum:
    """A material's tunnelling description.

    gaps_ev: the gap grid (eV). rate_s: Boltzmann-averaged inelastic rate on it (s^-1).
    huang_rhys: per conformer, its modes' S_k (dimensionless), concatenated in the vibration
    record's mode order. weights: the conformers' populations. settings: the parameters used.
    """

    gaps_ev: np.ndarray
    rate_s: np.ndarray
    huang_rhys: np.ndarray
    mode_counts: np.ndarray
    weights: np.ndarray
    settings: dict

    def to_arrays(self) -> dict[str, np.ndarray]:
        return {"tunnelling_spectrum": self.rate_s.astype(np.float32),
                "huang_rhys": self.huang_rhys.astype(np.float32),
                "mode_counts": self.mode_counts.astype(np.float32),
                "weights": self.weights.astype(np.float32)}

    def summary(self) -> dict:
        peak = int(np.argmax(self.rate_s))
        return {"peak_gap_ev": round(float(self.gaps_ev[peak]), 4),
                "peak_rate_s": float(self.rate_s[peak]),
                "total_huang_rhys": float(np.sum(self.huang_rhys * np.repeat(self.weights, self.mode_counts.astype(int)))),
                "caution": CAUTION, **{k: v for k, v in self.settings.items()}}

    def sample(self, gaps_ev) -> np.ndarray:
        """The rate (s^-1) at other gaps (eV), linearly interpolated on the grid."""
        return np.interp(np.asarray(gaps_ev, float), self.gaps_ev, self.rate_s)


def tunnelling_spectrum(spec, **settings) -> TunnellingSpectrum:
    """The tunnelling spectrum of a VibrationSpectrum `spec` (which must carry IR intensities).

    Settings (keywords, see :data:`DEFAULTS`): lambda_ev, temperature_k, hopping_ev,
    field_v_per_a, orientation, and the gap grid min_ev, max_ev, step_ev (eV).
    """
    p = parameters(**settings)
    if not spec.has_ir:
        raise ValueError("this vibration spectrum has no IR intensities; the tunnelling model needs dipole "
                         "derivatives (recompute the vibration record with an engine that gives them)")
    gaps = settings_grid_ev(p)
    rate = np.zeros_like(gaps)
    factors = []
    for conformer in spec.conformers:
        s = huang_rhys(conformer.frequencies_cm1, conformer.ir_intensities_km_mol,
                       field_v_per_a=p["field_v_per_a"], orientation=p["orientation"])
        factors.append(s)
        rate += conformer.weight * inelastic_rate_s(gaps, conformer.frequencies_cm1, s, lambda_ev=p["lambda_ev"],
                                                    temperature_k=p["temperature_k"], hopping_ev=p["hopping_ev"])
    return TunnellingSpectrum(gaps_ev=gaps, rate_s=rate, huang_rhys=np.concatenate(factors),
                              mode_counts=np.array([len(c.frequencies_cm1) for c in spec.conformers], float),
                              weights=np.array([c.weight for c in spec.conformers]), settings=p)
