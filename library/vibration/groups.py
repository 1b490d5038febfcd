"""Diagnostic group frequencies: which normal modes are the stretches a chemist looks for.

A mode belongs to a group (C=O, C≡N, O-H, N-H, S-H, C=C, aromatic ring, C-D, C-H) when the group's atoms
carry at least `MIN_PARTICIPATION` of the mode's motion, measured as the share of its normalized
mass-weighted eigenvector (the kinetic energy of the mode) on those atoms, and the mode lies in the
group's band. The bands are the textbook group-frequency ranges widened by the engines' errors
(MMFF94 and GFN2-xTB wavenumbers are within about 10 % of experiment, see tests/reference_spectra.py):

=============  ==========================  ==========================================
group          textbook band, cm^-1         accepted here, cm^-1
=============  ==========================  ==========================================
C=O stretch    1650-1800                    1500-2000
C≡N stretch    2210-2260                    2050-2450
O-H stretch    3200-3650                    2900-3900
N-H stretch    3300-3500                    2900-3800
S-H stretch    2550-2600                    2300-2800
C=C stretch    1620-1680                    1500-1800
ring C=C       1450-1600 (aromatic)         1350-1700
C-D stretch    2100-2250 (C-H / 1.36)       1900-2450
C-H stretch    2850-3100                    2700-3200
=============  ==========================  ==========================================

(group frequency tables of the standard infrared spectroscopy textbooks; common practice, no source
for the widened ranges.)
"""

from __future__ import annotations

import numpy as np

MIN_PARTICIPATION = 0.4

# (label, SMARTS, atoms of the match that move, lowest and highest accepted wavenumber in cm^-1)
GROUPS: tuple[tuple[str, str, tuple[int, ...], float, float], ...] = (
    ("C=O", "[CX3]=[OX1]", (0, 1), 1500.0, 2000.0),
    ("C≡N", "[CX2]#[NX1]", (0, 1), 2050.0, 2450.0),
    ("O-H", "[OX2]-[#1]", (0, 1), 2900.0, 3900.0),
    ("N-H", "[#7]-[#1]", (0, 1), 2900.0, 3800.0),
    ("S-H", "[#16]-[#1]", (0, 1), 2300.0, 2800.0),
    ("C=C", "[C]=[C]", (0, 1), 1500.0, 1800.0),
    ("ring C=C", "c1ccccc1", (0, 1, 2, 3, 4, 5), 1350.0, 1700.0),
    ("C-D", "[#6]-[2H]", (0, 1), 1900.0, 2450.0),
    ("C-H", "[#6]-[#1;!2*;!3*]", (0, 1), 2700.0, 3200.0),
)
LABELS = tuple(label for label, *_ in GROUPS)


def mode_groups(mol, mass_weighted_vectors: np.ndarray, frequencies_cm1: np.ndarray) -> np.ndarray:
    """The group index (into LABELS) of every mode, or -1: (modes,) int array.

    `mol`: the molecule the modes were computed for (explicit hydrogens, the same atom order);
    `mass_weighted_vectors`: (3N, modes) orthonormal mass-weighted eigenvectors; `frequencies_cm1`
    one wavenumber per mode.
    """
    from rdkit import Chem

    vectors = np.asarray(mass_weighted_vectors, dtype=float)
    share_per_atom = (vectors ** 2).reshape(-1, 3, vectors.shape[1]).sum(axis=1)  # (N, modes), sums to 1
    frequencies = np.asarray(frequencies_cm1, dtype=float)
    best = np.full(frequencies.size, -1, np.int64)
    best_share = np.zeros(frequencies.size)
    for index, (_, smarts, moving, low, high) in enumerate(GROUPS):
        pattern = Chem.MolFromSmarts(smarts)
        for match in mol.GetSubstructMatches(pattern, uniquify=True):
            atoms = [match[i] for i in moving]
            share = share_per_atom[atoms].sum(axis=0)
            better = (share >= MIN_PARTICIPATION) & (share > best_share) & (frequencies >= low) & (frequencies <= high)
            best[better] = index
            best_share[better] = share[better]
    return best
