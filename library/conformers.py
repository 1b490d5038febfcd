"""Low-energy 3D conformer ensembles with Boltzmann weights.

Embedding: ETKDG version 3 (J. Chem. Inf. Model. 60, 2044 (2020)).
Optimization: MMFF94 (J. Comput. Chem. 17, 490 (1996)), UFF where MMFF94
lacks parameters. Conformers are pruned by heavy-atom RMSD after optimal
superposition (symmetry-equivalent atom orderings considered), kept within an
energy window above the minimum, and weighted by Boltzmann factors. A
structure with unassigned stereocentres is treated as an equal mixture of its
stereoisomers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import rdDistGeom, rdForceFieldHelpers, rdMolAlign, rdMolDescriptors
from rdkit.Chem.EnumerateStereoisomers import (
    EnumerateStereoisomers,
    StereoEnumerationOptions,
)
from rdkit.Geometry import Point3D

from library import units
from library.errors import OlibraError

__all__ = [
    "Conformer",
    "boltzmann_weights",
    "ConformerEnsemble",
    "ConformerError",
    "MAX_HEAVY_ATOMS",
    "default_max_conformers",
    "heavy_atom_mol",
    "ensemble",
    "parameters",
    "to_mol",
]

#: Largest structure accepted (heavy atoms); odorants rarely exceed ~30.
MAX_HEAVY_ATOMS = 80

#: Gas constant in kcal/(mol K) (CODATA, see library.units).
GAS_CONSTANT_KCAL_PER_MOL_K = units.GAS_CONSTANT_KCAL_PER_MOL_K

# Default conformer cap: BASE + PER_ROTOR * rotatable bonds, at most CEILING.
_CAP_BASE = 2
_CAP_PER_ROTATABLE_BOND = 2
_CAP_CEILING = 10
# Embedding attempts per kept conformer slot (more attempts, better minima).
_EMBED_OVERSAMPLING = 1.0
# Symmetry-equivalent atom orderings considered when pruning by RMSD.
_MAX_SYMMETRY_MATCHES = 64
_MMFF_MAX_ITERATIONS = 500
# Embedding tries per conformer in the first, quick pass.
_QUICK_EMBED_TRIES = 5


class ConformerError(OlibraError, ValueError):
    """The structure cannot be turned into a conformer ensemble."""


@dataclass(frozen=True)
class Conformer:
    """One conformer.

    mol: explicit hydrogens, exactly one conformer (id 0), isotopes and
    stereo kept. energy_kcal: force-field energy relative to the minimum of
    its stereoisomer (kcal/mol). weight: Boltzmann weight within the
    stereoisomer divided by the number of stereoisomers (sums to 1 over the
    ensemble). stereoisomer: index into the enumerated stereoisomers.
    """

    mol: Chem.Mol
    energy_kcal: float
    weight: float
    stereoisomer: int
    mirrored: bool = False
    vibration_mol: Chem.Mol | None = None

    @property
    def engine_mol(self) -> Chem.Mol:
        """The molecule a vibration engine should see: the representative geometry in canonical atom
        and bond order, isotopes of this material kept (see :func:`ensemble`). Frequencies and
        intensities do not change under a reflection or a renumbering, so mirror images and
        reordered inputs get exactly the same engine results."""
        return self.vibration_mol if self.vibration_mol is not None else self.mol


@dataclass(frozen=True)
class ConformerEnsemble:
    """Weighted conformers of one material (all its stereoisomers)."""

    members: tuple[Conformer, ...]
    force_field: str
    stereoisomer_count: int
    parameters: dict = field(default_factory=dict)
    representatives: tuple[str, ...] = ()  # SMILES whose conformers were embedded (one per stereoisomer)

    @property
    def weights(self) -> np.ndarray:
        """Member weights (sum 1) as a float64 array."""
        return np.array([m.weight for m in self.members], dtype=np.float64)

    def __len__(self) -> int:
        return len(self.members)


def to_mol(mol_or_smiles: Chem.Mol | str) -> Chem.Mol:
    """Parse a SMILES string or copy a Mol; raise ConformerError when unusable."""
    if isinstance(mol_or_smiles, str):
        from library.structures import StructureError, mol_from_smiles

        try:
            mol = mol_from_smiles(mol_or_smiles)
        except StructureError as exc:
            raise ConformerError(str(exc)) from None
    elif isinstance(mol_or_smiles, Chem.Mol):
        mol = Chem.Mol(mol_or_smiles)
        try:
            Chem.SanitizeMol(mol)
        except Exception as exc:  # RDKit raises several sanitization types
            raise ConformerError(f"structure fails sanitization: {exc}") from None
    else:
        raise ConformerError(
            f"expected a SMILES string or rdkit Mol, got {type(mol_or_smiles).__name__}"
        )
    heavy = mol.GetNumHeavyAtoms()
    if mol.GetNumAtoms() == 0:
        raise ConformerError("structure has no atoms")
    if heavy > MAX_HEAVY_ATOMS:
        raise ConformerError(
            f"structure has {heavy} heavy atoms; the limit is {MAX_HEAVY_ATOMS}"
        )
    if any(atom.GetAtomicNum() == 0 for atom in mol.GetAtoms()):
        raise ConformerError("structure contains dummy atoms (*); give a complete structure")
    return mol


def boltzmann_weights(energies_kcal: np.ndarray, stereoisomers: np.ndarray, *, temperature_k: float = 298.15
                      ) -> np.ndarray:
    """Populations from energies (kcal/mol): Boltzmann within each stereoisomer, stereoisomers equal.

    A material with unassigned stereocenters is an unknown mixture, so each stereoisomer gets the
    same total weight; within one, weights follow exp(-(E - E_min) / (R T)). The weights sum to 1.
    """
    energies = np.asarray(energies_kcal, dtype=float)
    groups = np.asarray(stereoisomers)
    if not temperature_k > 0:
        raise ConformerError(f"temperature must be positive (kelvin), got {temperature_k}")
    if energies.shape != groups.shape or energies.ndim != 1 or energies.size == 0:
        raise ConformerError(f"need one stereoisomer label per energy, got {energies.shape} and {groups.shape}")
    rt = GAS_CONSTANT_KCAL_PER_MOL_K * temperature_k
    weights = np.empty_like(energies)
    labels = np.unique(groups)
    for label in labels:
        members = groups == label
        factors = np.exp(-(energies[members] - energies[members].min()) / rt)
        weights[members] = factors / factors.sum() / len(labels)
    return weights


def heavy_atom_mol(mol_h: Chem.Mol) -> Chem.Mol:
    """Copy of `mol_h` without any hydrogen (deuterium and tritium too).

    Heavy atoms keep their order and the conformers keep their ids.
    """
    params = Chem.RemoveHsParameters()
    params.removeIsotopes = True
    params.removeDefiningBondStereo = True
    params.removeWithWedgedBond = True
    params.removeHigherDegrees = True
    params.removeHydrides = True
    params.removeNonimplicit = True
    params.showWarnings = False
    heavy = Chem.RemoveHs(mol_h, params, sanitize=False)
    if any(atom.GetAtomicNum() == 1 for atom in heavy.GetAtoms()):
        editable = Chem.RWMol(heavy)
        for atom in sorted(editable.GetAtoms(), key=lambda a: -a.GetIdx()):
            if atom.GetAtomicNum() == 1:
                editable.RemoveAtom(atom.GetIdx())
        heavy = editable.GetMol()
    heavy.UpdatePropertyCache(strict=False)
    return heavy


def default_max_conformers(mol: Chem.Mol) -> int:
    """Conformer cap for a material that grows with its rotatable bonds."""
    rotors = rdMolDescriptors.CalcNumRotatableBonds(mol)
    return min(_CAP_BASE + _CAP_PER_ROTATABLE_BOND * rotors, _CAP_CEILING)


def parameters(
    *,
    max_conformers: int | None = None,
    energy_window_kcal: float = 8.0,
    rmsd_threshold_a: float = 0.5,
    temperature_k: float = 298.15,
    max_stereoisomers: int = 8,
    seed: int = 0xC0FFEE,
) -> dict:
    """JSON-able description of the ensemble settings (hashed for staleness)."""
    return {
        "embedding": "ETKDGv3",
        "force_field": "MMFF94|UFF",
        "max_conformers": (
            max_conformers
            if max_conformers is not None
            else f"min({_CAP_BASE}+{_CAP_PER_ROTATABLE_BOND}*rotatable_bonds,{_CAP_CEILING})"
        ),
        "embed_oversampling": _EMBED_OVERSAMPLING,
        "construction": "canonical atom and bond order; mirror images reflected from one representative",
        "energy_window_kcal": float(energy_window_kcal),
        "rmsd_threshold_a": float(rmsd_threshold_a),
        "temperature_k": float(temperature_k),
        "max_stereoisomers": int(max_stereoisomers),
        "seed": int(seed),
        "rdkit_version": rdBase.rdkitVersion,
    }


def _check_knobs(max_conformers, energy_window_kcal, rmsd_threshold_a, temperature_k,
                 max_stereoisomers) -> None:
    if max_conformers is not None and (not isinstance(max_conformers, int) or max_conformers < 1):
        raise ConformerError(f"max_conformers must be a positive integer, got {max_conformers!r}")
    if not energy_window_kcal > 0:
        raise ConformerError(f"energy_window_kcal must be positive, got {energy_window_kcal!r}")
    if not rmsd_threshold_a >= 0:
        raise ConformerError(f"rmsd_threshold_a must be >= 0, got {rmsd_threshold_a!r}")
    if not temperature_k > 0:
        raise ConformerError(f"temperature_k must be positive, got {temperature_k!r}")
    if not isinstance(max_stereoisomers, int) or max_stereoisomers < 1:
        raise ConformerError(
            f"max_stereoisomers must be a positive integer, got {max_stereoisomers!r}"
        )


def _stereoisomers(mol: Chem.Mol, max_stereoisomers: int, seed: int) -> list[Chem.Mol]:
    """Stereoisomers for unassigned centres (the input itself when fully assigned)."""
    options = StereoEnumerationOptions(
        onlyUnassigned=True, unique=True, maxIsomers=max_stereoisomers, rand=seed
    )
    isomers = list(EnumerateStereoisomers(mol, options=options))
    if not isomers:
        isomers = [Chem.Mol(mol)]
    # Deterministic order independent of the enumeration's internal order.
    isomers.sort(key=lambda m: Chem.MolToSmiles(m))
    return isomers


def _force_field(mol_h: Chem.Mol) -> str:
    if rdForceFieldHelpers.MMFFHasAllMoleculeParams(mol_h):
        return "MMFF94"
    if rdForceFieldHelpers.UFFHasAllMoleculeParams(mol_h):
        return "UFF"
    raise ConformerError("neither MMFF94 nor UFF has parameters for this structure")


def _embed(mol_h: Chem.Mol, count: int, seed: int, rmsd_threshold_a: float,
           *, thorough: bool) -> list[int]:
    """ETKDGv3 embedding; `thorough` retries harder, from random coordinates."""
    params = rdDistGeom.ETKDGv3()
    params.randomSeed = seed
    params.numThreads = 1
    params.pruneRmsThresh = rmsd_threshold_a if rmsd_threshold_a > 0 else -1.0
    params.onlyHeavyAtomsForRMS = True
    if not thorough:
        # Few tries per conformer: quick to give up on an impossible
        # stereoisomer (e.g. an inverted bridgehead in a bicyclic terpene).
        params.maxIterations = _QUICK_EMBED_TRIES
        return list(rdDistGeom.EmbedMultipleConfs(mol_h, numConfs=count, params=params))
    ids = list(rdDistGeom.EmbedMultipleConfs(mol_h, numConfs=count, params=params))
    if not ids:  # the usual fallback: start from random coordinates
        params.useRandomCoords = True
        params.maxIterations = 10 * max(mol_h.GetNumAtoms(), 10)
        ids = list(rdDistGeom.EmbedMultipleConfs(mol_h, numConfs=count, params=params))
    return ids


def _optimize(mol_h: Chem.Mol, force_field: str) -> np.ndarray:
    if force_field == "MMFF94":
        results = rdForceFieldHelpers.MMFFOptimizeMoleculeConfs(
            mol_h, numThreads=1, maxIters=_MMFF_MAX_ITERATIONS, mmffVariant="MMFF94"
        )
    else:
        results = rdForceFieldHelpers.UFFOptimizeMoleculeConfs(
            mol_h, numThreads=1, maxIters=_MMFF_MAX_ITERATIONS
        )
    return np.array([energy for _, energy in results], dtype=np.float64)


def _prune(mol_h: Chem.Mol, conf_ids: list[int], threshold_a: float,
           limit: int) -> list[int]:
    """Greedy selection in the given (energy) order by heavy-atom RMSD."""
    if threshold_a <= 0:
        return conf_ids[:limit]
    if mol_h.GetNumHeavyAtoms() < 2:
        return conf_ids[:1]
    heavy = heavy_atom_mol(mol_h)
    matches = heavy.GetSubstructMatches(
        heavy, uniquify=False, useChirality=False, maxMatches=_MAX_SYMMETRY_MATCHES
    )
    maps = [list(zip(match, range(len(match)))) for match in matches] or None
    kept: list[int] = []
    for cid in conf_ids:
        distinct = True
        for ref in kept:
            rms = rdMolAlign.GetBestRMS(heavy, heavy, ref, cid, map=maps)
            if rms < threshold_a:
                distinct = False
                break
        if distinct:
            kept.append(cid)
            if len(kept) >= limit:
                break
    return kept


def _without_isotopes(mol_h: Chem.Mol) -> Chem.Mol:
    """An isotope-free copy, unless isotope labels create stereo (e.g. CHD), which is then kept."""
    work = Chem.Mol(mol_h)
    for atom in work.GetAtoms():
        atom.SetIsotope(0)
    if len(Chem.FindPotentialStereo(work)) != len(Chem.FindPotentialStereo(mol_h)):
        return Chem.Mol(mol_h)
    return work


def _working_copy(mol_h: Chem.Mol) -> tuple[Chem.Mol, list[int]]:
    """Isotope-free copy in canonical atom and bond order, and that order.

    Isotopologues share one potential-energy surface, and a structure spelled
    with atoms in another order is the same structure: both then get the same
    conformers, to the last digit. The copy is read back from the canonical
    SMILES of its heavy atoms, hydrogens added after them, so its atoms and bonds
    come in an order fixed by the graph alone (Chem.RenumberAtoms keeps the
    input's bond order, which the embedding and the force field follow).
    Isotope labels that create stereo (e.g. CHD) are kept. order[k] is the input
    index of working atom k.
    """
    work = _without_isotopes(mol_h)
    for atom in work.GetAtoms():
        atom.SetIntProp("olibra_input_index", atom.GetIdx())
    heavy = Chem.RemoveHs(work, sanitize=False)
    smiles = Chem.MolToSmiles(heavy)
    output = [int(i) for i in heavy.GetProp("_smilesAtomOutputOrder").strip("[],").split(",") if i.strip()]
    order = [heavy.GetAtomWithIdx(i).GetIntProp("olibra_input_index") for i in output]
    canonical = Chem.AddHs(Chem.MolFromSmiles(smiles))
    if canonical.GetNumAtoms() != mol_h.GetNumAtoms():
        raise ConformerError(f"cannot put {smiles!r} in canonical atom order: hydrogen counts differ")
    hydrogens = {i: sorted(n.GetIdx() for n in work.GetAtomWithIdx(i).GetNeighbors()
                           if n.GetAtomicNum() == 1 and n.GetIdx() not in order)
                 for i in order}
    for atom in list(canonical.GetAtoms())[len(order):]:
        (parent,) = [n.GetIdx() for n in atom.GetNeighbors()]
        order.append(hydrogens[order[parent]].pop(0))
    return canonical, order


def mirror_image(mol: Chem.Mol) -> Chem.Mol:
    """The mirror image of `mol` as a structure: every tetrahedral centre inverted, atom order and
    double-bond geometry kept (a reflection leaves E/Z unchanged)."""
    out = Chem.Mol(mol)
    for atom in out.GetAtoms():
        tag = atom.GetChiralTag()
        if tag == Chem.ChiralType.CHI_TETRAHEDRAL_CW:
            atom.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
        elif tag == Chem.ChiralType.CHI_TETRAHEDRAL_CCW:
            atom.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CW)
    return out


def superposable_on_mirror_image(mol_or_smiles: Chem.Mol | str) -> bool:
    """True when a structure is its own mirror image (achiral, meso, or a material whose stereo is
    left open, i.e. both hands): its mirror image has the same canonical SMILES, isotopes included."""
    mol = to_mol(mol_or_smiles)
    return Chem.MolToSmiles(mirror_image(mol)) == Chem.MolToSmiles(mol)


def reflected(ens: ConformerEnsemble) -> ConformerEnsemble:
    """The mirror image of a conformer ensemble: every conformer reflected through the yz plane
    (x -> -x, exact in floating point), tetrahedral stereo tags inverted, energies and weights kept."""
    members = []
    for member in ens.members:
        mol = mirror_image(member.mol)
        for conformer in mol.GetConformers():
            positions = conformer.GetPositions()
            for atom, (x, y, z) in enumerate(positions):
                conformer.SetAtomPosition(atom, Point3D(-x, y, z))
        members.append(replace(member, mol=mol, mirrored=not member.mirrored))
    return replace(ens, members=tuple(members))


def representative(mol: Chem.Mol) -> tuple[Chem.Mol, bool]:
    """The member of `mol`'s mirror-image pair whose conformers are embedded, and whether `mol` is the
    other one (its conformers are then the representative's, reflected).

    Of the structure and its mirror image, the one with the smaller canonical SMILES (isotopes
    ignored unless they make the stereo) represents both; an achiral structure represents itself.
    """
    mirrored = mirror_image(mol)
    own = Chem.MolToSmiles(_without_isotopes(mol))
    other = Chem.MolToSmiles(_without_isotopes(mirrored))
    return (mirrored, True) if other < own else (mol, False)


def _single_conformer_mol(mol_h: Chem.Mol, work: Chem.Mol, order: list[int],
                          conf_id: int, *, mirrored: bool = False) -> Chem.Mol:
    """`mol_h` (input order, isotopes) with the coordinates of one working conformer, reflected
    through the yz plane (x -> -x, exact in floating point) when `mirrored`."""
    out = Chem.Mol(mol_h)
    out.RemoveAllConformers()
    positions = work.GetConformer(conf_id).GetPositions()
    if mirrored:
        positions = positions * np.array([-1.0, 1.0, 1.0])
    conf = Chem.Conformer(out.GetNumAtoms())
    for k, original in enumerate(order):
        conf.SetAtomPosition(original, Point3D(*positions[k]))
    conf.Set3D(True)
    conf.SetId(0)
    out.AddConformer(conf, assignId=False)
    return out


def _engine_copy(mol_h: Chem.Mol, work: Chem.Mol, order: list[int], conf_id: int) -> Chem.Mol:
    """The working molecule (canonical order, the representative's own geometry) with the isotopes
    of `mol_h` and one conformer: what the vibration engines compute on."""
    out = Chem.Mol(work, confId=conf_id)
    for k, original in enumerate(order):
        out.GetAtomWithIdx(k).SetIsotope(mol_h.GetAtomWithIdx(original).GetIsotope())
    out.GetConformer().SetId(0)
    return out


def ensemble(
    mol_or_smiles: Chem.Mol | str,
    *,
    max_conformers: int | None = None,
    energy_window_kcal: float = 8.0,
    rmsd_threshold_a: float = 0.5,
    temperature_k: float = 298.15,
    max_stereoisomers: int = 8,
    seed: int = 0xC0FFEE,
) -> ConformerEnsemble:
    """Low-energy conformers of a material with Boltzmann weights.

    max_conformers caps the conformers of the material, shared evenly
    over its stereoisomers (each gets ceil(cap / stereoisomers); None: a cap
    that grows with rotatable bonds, see default_max_conformers). energy_window_kcal
    (kcal/mol) above each stereoisomer's minimum; rmsd_threshold_a (angstrom)
    heavy-atom RMSD below which two conformers count as one; temperature_k
    (kelvin) for the Boltzmann weights. Unassigned stereocentres are
    enumerated (at most max_stereoisomers) and weighted equally; an
    enumerated stereoisomer that cannot be embedded while another can (an
    inverted bridgehead) is dropped. Conformers are computed on an
    isotope-free copy in canonical atom and bond order, so isotopologues and
    reordered inputs share geometries exactly; a stereoisomer whose mirror image
    is the representative of the pair (see :func:`representative`) gets the
    representative's conformers reflected, with the same energies and weights,
    so enantiomers are exact mirror images. Each member also carries the
    unreflected canonical copy the vibration engines compute on
    (:attr:`Conformer.engine_mol`). Deterministic for a given input and seed.
    """
    _check_knobs(max_conformers, energy_window_kcal, rmsd_threshold_a, temperature_k,
                 max_stereoisomers)
    mol = to_mol(mol_or_smiles)
    isomers = _stereoisomers(mol, max_stereoisomers, seed)

    total_cap = max_conformers if max_conformers is not None else default_max_conformers(mol)
    cap = math.ceil(total_cap / len(isomers))
    attempts = math.ceil(cap * _EMBED_OVERSAMPLING)

    # Each stereoisomer is embedded through the representative of its mirror-image pair, once per
    # representative: a mirror image gets the representative's conformers reflected, so a pair of
    # enantiomers (or the two halves of a racemate) share one set of geometries and energies.
    # First pass: quick embedding. An enumerated stereoisomer that fails it while another succeeds
    # is taken to be geometrically impossible and dropped; otherwise retry thoroughly.
    plans = []  # per stereoisomer: (input molecule with Hs, representative key, order, mirrored)
    works: dict[str, Chem.Mol] = {}
    conformer_ids: dict[str, list[int]] = {}
    for isomer in isomers:
        rep, mirrored = representative(isomer)
        work, order = _working_copy(Chem.AddHs(rep))
        key = Chem.MolToSmiles(Chem.RemoveHs(work, sanitize=False))
        if key not in works:
            works[key] = work
            conformer_ids[key] = _embed(work, attempts, seed, rmsd_threshold_a, thorough=False)
        plans.append((Chem.AddHs(isomer), key, order, mirrored))
    if not any(conformer_ids.values()):
        for key, work in works.items():
            conformer_ids[key] = _embed(work, attempts, seed, rmsd_threshold_a, thorough=True)
        failed = [key for key, ids in conformer_ids.items() if not ids]
        if failed:
            raise ConformerError(
                f"3D embedding failed for {failed[0]!r} even from random coordinates; "
                "check for strained or impossible stereochemistry"
            )
    plans = [plan for plan in plans if conformer_ids[plan[1]]]
    n_isomers = len(plans)

    kept_by_key: dict[str, list[tuple[int, float]]] = {}
    force_fields: set[str] = set()
    for key, work in works.items():
        if not conformer_ids[key]:
            continue
        force_field = _force_field(work)
        force_fields.add(force_field)
        energies = _optimize(work, force_field)
        by_id = dict(zip([c.GetId() for c in work.GetConformers()], energies))
        if not all(math.isfinite(by_id[c]) for c in conformer_ids[key]):
            raise ConformerError("force-field optimization returned a non-finite energy")
        by_energy = sorted(conformer_ids[key], key=lambda c: (by_id[c], c))
        e_min = by_id[by_energy[0]]
        in_window = [c for c in by_energy if by_id[c] - e_min <= energy_window_kcal]
        kept_by_key[key] = [(cid, by_id[cid] - e_min) for cid in _prune(work, in_window, rmsd_threshold_a, cap)]
    kept_conformers: list[tuple[Chem.Mol, Chem.Mol, float, int, bool]] = []
    for index, (mol_h, key, order, mirrored) in enumerate(plans):
        work = works[key]
        kept_conformers += [(_single_conformer_mol(mol_h, work, order, cid, mirrored=mirrored),
                             _engine_copy(mol_h, work, order, cid), energy, index, mirrored)
                            for cid, energy in kept_by_key[key]]
    energies = np.array([entry[2] for entry in kept_conformers], dtype=np.float64)
    groups = np.array([entry[3] for entry in kept_conformers])
    weights = boltzmann_weights(energies, groups, temperature_k=temperature_k)
    members = [Conformer(mol=conformer_mol, energy_kcal=float(energy), weight=float(weight), stereoisomer=int(index),
                         mirrored=mirrored, vibration_mol=engine_mol)
               for (conformer_mol, engine_mol, energy, index, mirrored), weight in zip(kept_conformers, weights)]
    force_field = "MMFF94" if force_fields == {"MMFF94"} else "UFF"
    return ConformerEnsemble(
        members=tuple(members),
        force_field=force_field,
        stereoisomer_count=n_isomers,
        representatives=tuple(plan[1] for plan in plans),
        parameters=parameters(
            max_conformers=max_conformers,
            energy_window_kcal=energy_window_kcal,
            rmsd_threshold_a=rmsd_threshold_a,
            temperature_k=temperature_k,
            max_stereoisomers=max_stereoisomers,
            seed=seed,
        ),
    )
