"""What olibra computes and stores for each material, from its standardized SMILES.

One conformer ensemble serves every description: the shape record (moments,
principal-moment ratios, volume...), the vibration record (conformer-averaged
harmonic spectrum and its fingerprint) and the tunnelling record (the receptor
model computed from that same spectrum, kept apart so it never mixes with EVA
records). The functions here run inside worker
processes, so they take and return only plain, picklable values.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache, partial

import numpy as np

from library.catalogue.records import EngineStamp

KINDS = ("shape", "vibration", "tunnelling")
# What a shape record holds besides the descriptors: the ensemble itself, so
# that overlays need no new embedding.
SHAPE_RECORD_LAYOUT = "descriptors+conformers+conformer moments and shape values+mirror flags/4"


@dataclass(frozen=True)
class Plan:
    """Which records to compute, with which engine and ensemble settings."""

    kinds: tuple[str, ...] = KINDS
    vibration_engine: str = "mmff"
    ensemble_knobs: dict = field(default_factory=dict)

    def __post_init__(self):
        unknown = [k for k in self.kinds if k not in KINDS]
        if unknown or not self.kinds:
            raise ValueError(f"unknown record kind(s) {unknown}; choose from {', '.join(KINDS)}")
        from library.vibration import engines

        engines.get(self.vibration_engine)  # refuses an unknown engine, naming the choices


def stamps(plan: Plan) -> list[EngineStamp]:
    """The engine name, version and parameters each planned record must carry."""
    from library import shape

    out = []
    if "shape" in plan.kinds:
        parameters = dict(shape.parameters(**plan.ensemble_knobs), stored=SHAPE_RECORD_LAYOUT)
        out.append(EngineStamp("shape", shape.ENGINE_NAME, shape.ENGINE_VERSION, parameters))
    if "vibration" in plan.kinds:
        from library.vibration import engines
        from library.vibration import spectrum as spectrum_module

        module = engines.engine_module(plan.vibration_engine)
        out.append(EngineStamp("vibration", module.ENGINE_NAME, module.ENGINE_VERSION,
                               spectrum_module.record_parameters(plan.vibration_engine,
                                                                 **plan.ensemble_knobs)))
    if "tunnelling" in plan.kinds:
        from library.vibration import engines
        from library.vibration import spectrum as spectrum_module
        from library.vibration import tunnelling

        # same engine name as the vibration record it derives from; its own kind, version and settings
        module = engines.engine_module(plan.vibration_engine)
        out.append(EngineStamp("tunnelling", module.ENGINE_NAME,
                               f"{module.ENGINE_VERSION}+tunnelling-{tunnelling.ENGINE_VERSION}",
                               {"spectrum": spectrum_module.record_parameters(plan.vibration_engine,
                                                                              **plan.ensemble_knobs),
                                "tunnelling": tunnelling.parameters()}))
    return out


@lru_cache(maxsize=1)
def current_stamps() -> dict[tuple[str, str], EngineStamp]:
    """The stamp each (kind, engine name) record must carry now; engines not installed are left out."""
    from library.vibration import engines

    out: dict[tuple[str, str], EngineStamp] = {}
    plans = [Plan(kinds=("shape",))] + [Plan(kinds=("vibration", "tunnelling"), vibration_engine=e) for e in engines.keys()]
    for plan in plans:
        try:
            found = stamps(plan)
        except (ImportError, ValueError):
            continue  # that engine is not available in this installation
        for stamp in found:
            out[(stamp.kind, stamp.engine_name)] = stamp
    return out


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
