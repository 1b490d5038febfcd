"""What olibra computes and stores for each material, from its standardized SMILES.

One conformer ensemble serves every description: the shape record (moments,
principal-moment ratios, volume...), the vibration record (conformer-averaged
harmonic spectrum and its fingerprint) and the tunnelling record (the receptor
model computed from that same spectrum, kept apart so it never mixes with EVA
records). The functions here run inside worker
processes, so they take and return only plain, picklable values.
"""

from __future__ import annotations

from functools import partial

import numpy as np

# Plans and their stamps live in library.stamps (light to import, so that read-only commands need not
# load the engines); they are named here too, beside the computations they describe.
from library.stamps import KINDS, Plan, current_stamps, stamps  # noqa: F401


def compute_material(plan: Plan, smiles: str) -> dict[str, tuple[dict, dict]]:
    """Compute every planned record of one material: {kind: (float32 arrays, summary)}."""
    from library import conformers

    ens = conformers.ensemble(smiles, **plan.ensemble_knobs)
    out: dict[str, tuple[dict, dict]] = {}
    if "shape" in plan.kinds:
        from library import shape

        description = shape.describe(ens)
        arrays = description.to_arrays()
        arrays.update(conformer_arrays(ens))
        summary = description.summary()
        # which ensemble the conformers came from: the embedded representative of each stereoisomer,
        # and how many conformers are that representative's reflected
        summary["ensemble_of"] = list(ens.representatives)
        summary["mirrored_conformers"] = int(sum(m.mirrored for m in ens.members))
        out["shape"] = (arrays, summary)
    if "vibration" in plan.kinds or "tunnelling" in plan.kinds:
        from library.vibration import spectrum as spectrum_module

        result = spectrum_module.spectrum(ens, engine=plan.vibration_engine)
        if "vibration" in plan.kinds:
            arrays = result.to_arrays()
            arrays.update(fingerprint_arrays(result))
            out["vibration"] = (arrays, result.summary())
        if "tunnelling" in plan.kinds:
            out["tunnelling"] = tunnelling_record(result)
    return out


def tunnelling_record(result) -> tuple[dict, dict]:
    """The tunnelling record of a vibration spectrum: per-conformer Huang-Rhys factors and the
    Boltzmann-averaged tunnelling spectrum (library.vibration.tunnelling, default settings)."""
    from library.vibration import tunnelling

    described = tunnelling.tunnelling_spectrum(result)
    return described.to_arrays(), described.summary()


def fingerprint_arrays(result) -> dict[str, np.ndarray]:
    """The fingerprints a vibration record stores for a spectrum: plain EVA, and IR-weighted when the
    spectrum has intensities (every engine gives them; MMFF94 from its fixed partial charges)."""
    from library.vibration import spectrum as spectrum_module

    out = {"fingerprint": spectrum_module.fingerprint(result)}
    if result.has_ir:
        out["fingerprint_ir"] = spectrum_module.fingerprint(result, intensity_weighting="ir")
    return out


def conformer_arrays(ens) -> dict[str, np.ndarray]:
    """The ensemble as arrays: coordinates (A), weights, energies (kcal/mol), stereoisomer index, atoms,
    each conformer's USR and chiral moments, and its 72 shape values (USRCAT and chiral moments)."""
    from library import shape

    return {
        "conformer_moments": shape.conformer_moments(ens),
        "conformer_shape": shape.conformer_shape_values(ens),
        "conformer_xyz_a": np.stack([m.mol.GetConformer(0).GetPositions() for m in ens.members]),
        "conformer_weight": np.array([m.weight for m in ens.members]),
        "conformer_energy_kcal": np.array([m.energy_kcal for m in ens.members]),
        "conformer_stereoisomer": np.array([m.stereoisomer for m in ens.members]),
        "conformer_mirrored": np.array([float(m.mirrored) for m in ens.members]),
        "atomic_number": np.array([a.GetAtomicNum() for a in ens.members[0].mol.GetAtoms()]),
    }


def top_conformer_moments(arrays: dict, max_members: int) -> np.ndarray:
    """Per-conformer USR + chiral moments of the `max_members` most weighted conformers of a shape record."""
    order = np.argsort(-arrays["conformer_weight"], kind="stable")[:max_members]
    return np.asarray(arrays["conformer_moments"])[order]


def ensemble_from_arrays(smiles: str, arrays: dict, *, max_members: int | None = None):
    """Rebuild a ConformerEnsemble from a stored shape record (atom order of Chem.AddHs(MolFromSmiles))."""
    from rdkit import Chem
    from rdkit.Geometry import Point3D

    from library.conformers import Conformer, ConformerEnsemble
    from library.structures import mol_from_smiles

    template = Chem.AddHs(mol_from_smiles(smiles))
    numbers = np.array([a.GetAtomicNum() for a in template.GetAtoms()])
    if not np.array_equal(numbers, arrays["atomic_number"].astype(int)):
        raise ValueError(f"stored conformers of {smiles} do not match its atoms; recompute its shape record")
    order = np.argsort(-arrays["conformer_weight"], kind="stable")
    if max_members is not None:
        order = order[:max_members]
    members = []
    for i in order:
        mol = Chem.Mol(template)
        conformer = Chem.Conformer(mol.GetNumAtoms())
        for atom, (x, y, z) in enumerate(arrays["conformer_xyz_a"][i].astype(float)):
            conformer.SetAtomPosition(atom, Point3D(x, y, z))
        conformer.Set3D(True)
        mol.AddConformer(conformer, assignId=True)
        mirrored = "conformer_mirrored" in arrays and bool(arrays["conformer_mirrored"][i])
        members.append(Conformer(mol=mol, energy_kcal=float(arrays["conformer_energy_kcal"][i]),
                                 weight=float(arrays["conformer_weight"][i]),
                                 stereoisomer=int(arrays["conformer_stereoisomer"][i]), mirrored=mirrored))
    stereoisomers = len(set(int(s) for s in arrays["conformer_stereoisomer"]))
    return ConformerEnsemble(members=tuple(members), force_field="stored",
                             stereoisomer_count=stereoisomers, parameters={})


def worker(plan: Plan):
    """A picklable one-argument function (SMILES -> records) for the job runner."""
    return partial(compute_material, plan)
