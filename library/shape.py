"""Shape descriptors and Gaussian-overlay similarity of conformer ensembles.

Descriptors (Boltzmann-weighted means over the ensemble, heavy atoms only
unless a structure has fewer than three heavy atoms, then all atoms):
  usr      12 moments, USR (J. Comput. Chem. 28, 1711 (2007)), RDKit GetUSR
  usrcat   60 moments, USRCAT (J. Cheminform. 4, 27 (2012)), RDKit GetUSRCAT
  chiral   12 moments, Chiral Shape Recognition (J. Mol. Graph. Model. 28,
           368 (2009)); written here, see chiral_moments
  npr1, npr2  normalized principal-moment ratios (J. Chem. Inf. Comput. Sci.
           43, 987 (2003)), unit atom weights
  radius_of_gyration_a, asphericity  unit atom weights (RDKit)
  volume_a3, surface_area_a2  van der Waals volume and surface of all atoms
           by the double cubic lattice method (J. Comput. Chem. 16, 273
           (1995)), RDKit DoubleCubicLatticeVolume with a zero probe radius
Overlay: Gaussian shape overlap (J. Comput. Chem. 17, 1653 (1996)) via
rdkit.Chem.rdShapeAlign, proper rotations and translations only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import rdMolDescriptors, rdShapeAlign

from library.conformers import ConformerEnsemble, ensemble, heavy_atom_mol
from library.errors import OlibraError

__all__ = [
    "ENGINE_NAME",
    "ENGINE_VERSION",
    "OverlayResult",
    "ShapeDescription",
    "ShapeError",
    "best_conformer_similarity",
    "chiral_moments",
    "conformer_moments",
    "describe",
    "describe_smiles",
    "moment_similarity",
    "overlay_similarity",
    "parameters",
    "shape_vector",
    "usr_moments",
]

ENGINE_NAME = "olibra-shape"
ENGINE_VERSION = f"1.0.0+rdkit-{rdBase.rdkitVersion}"

_SCALARS = (
    "npr1",
    "npr2",
    "radius_of_gyration_a",
    "asphericity",
    "volume_a3",
    "surface_area_a2",
)
# Cross products shorter than this (angstrom^2) count as collinear points.
_COLLINEAR_A2 = 1e-6


class ShapeError(OlibraError, ValueError):
    """Input that the shape engine cannot describe or compare."""


def parameters(**knobs) -> dict:
    """JSON-able settings of the shape engine, hashed to detect stale records.

    Knobs are the conformer-ensemble settings (see conformers.parameters);
    unknown knobs raise ShapeError.
    """
    from library import conformers

    try:
        ensemble_parameters = conformers.parameters(**knobs)
    except TypeError as exc:
        raise ShapeError(f"unknown shape parameter: {exc}") from None
    return {
        "engine": ENGINE_NAME,
        "engine_version": ENGINE_VERSION,
        "atoms": "heavy (all when fewer than 3 heavy atoms)",
        "weights": "Boltzmann",
        "surface": "double cubic lattice, probe radius 0 A",
        "chiral": "CSR, 4 reference points, 3 moments each",
        "ensemble": ensemble_parameters,
    }


@dataclass(frozen=True, eq=False)
class ShapeDescription:
    """Ensemble-weighted shape descriptors of one material (lengths in A)."""

    usr: np.ndarray
    usrcat: np.ndarray
    chiral: np.ndarray
    npr1: float
    npr2: float
    radius_of_gyration_a: float
    asphericity: float
    volume_a3: float
    surface_area_a2: float
    conformer_count: int
    stereoisomer_count: int
    force_field: str

    def to_arrays(self) -> dict[str, np.ndarray]:
        """float32 arrays for storage (usr 12, usrcat 60, chiral 12)."""
        return {
            "usr": np.asarray(self.usr, dtype=np.float32),
            "usrcat": np.asarray(self.usrcat, dtype=np.float32),
            "chiral": np.asarray(self.chiral, dtype=np.float32),
        }

    def summary(self) -> dict:
        """Small JSON-able dict of the scalar descriptors."""
        out = {name: round(float(getattr(self, name)), 6) for name in _SCALARS}
        out.update(
            conformer_count=int(self.conformer_count),
            stereoisomer_count=int(self.stereoisomer_count),
            force_field=str(self.force_field),
        )
        return out

    @classmethod
    def from_arrays(cls, arrays: dict, summary: dict) -> "ShapeDescription":
        """Rebuild from to_arrays() and summary() output."""
        try:
            vectors = {
                name: np.asarray(arrays[name], dtype=np.float32).reshape(size)
                for name, size in (("usr", 12), ("usrcat", 60), ("chiral", 12))
            }
            scalars = {name: float(summary[name]) for name in _SCALARS}
            return cls(
                **vectors,
                **scalars,
                conformer_count=int(summary["conformer_count"]),
                stereoisomer_count=int(summary["stereoisomer_count"]),
                force_field=str(summary["force_field"]),
            )
        except KeyError as exc:
            raise ShapeError(f"stored shape record lacks {exc}") from None
        except ValueError as exc:
            raise ShapeError(f"stored shape record is malformed: {exc}") from None


@dataclass(frozen=True)
class OverlayResult:
    """Best Gaussian overlay of two ensembles (all scores on 0-1).

    score: the quantity maximized over conformer pairs (per `mode`, averaged
    with color_tanimoto when color is used). shape_tanimoto: V_ab / (V_aa +
    V_bb - V_ab). tversky: V_ab / (alpha V_aa + beta V_bb), clipped to 1.
    color_tanimoto: pharmacophore-feature overlap Tanimoto (0 without color;
    equal to shape_tanimoto when neither structure has a feature).
    volume_ratio: min(V_aa, V_bb) / max(V_aa, V_bb). best_pair: member
    indices (a, b). V are Gaussian overlap volumes in A^3.
    """

    score: float
    shape_tanimoto: float
    tversky: float
    color_tanimoto: float
    volume_ratio: float
    best_pair: tuple[int, int]
    mode: str
    tversky_alpha: float
    tversky_beta: float
    pairs_compared: int


# ---------------------------------------------------------------- moments


def _three_moments(distances: np.ndarray) -> np.ndarray:
    """Mean, standard deviation and cbrt(third central moment)/std (RDKit's USR form)."""
    mean = distances.mean()
    centred = distances - mean
    std = math.sqrt(float(np.mean(centred**2)))
    third = float(np.cbrt(np.mean(centred**3)))
    return np.array([mean, std, third / std if std > 0 else 0.0])


def usr_moments(coords_a: np.ndarray) -> np.ndarray:
    """USR: 12 moments of atom distances to four reference points (A).

    Points: centroid, atom closest to it, atom farthest from it, atom
    farthest from that one (J. Comput. Chem. 28, 1711 (2007)).
    """
    xyz = _check_coords(coords_a)
    centroid = xyz.mean(axis=0)
    d_centroid = np.linalg.norm(xyz - centroid, axis=1)
    closest = xyz[int(np.argmin(d_centroid))]
    farthest = xyz[int(np.argmax(d_centroid))]
    d_farthest = np.linalg.norm(xyz - farthest, axis=1)
    farthest_from_farthest = xyz[int(np.argmax(d_farthest))]
    points = (centroid, closest, farthest, farthest_from_farthest)
    return np.concatenate([_three_moments(np.linalg.norm(xyz - p, axis=1)) for p in points])


def chiral_moments(coords_a: np.ndarray) -> np.ndarray:
    """Chiral Shape Recognition: 12 moments that differ between mirror images.

    Reference points (J. Mol. Graph. Model. 28, 368 (2009)): c1 centroid,
    c2 atom farthest from c1, c3 atom farthest from c2, and
    c4 = c1 + (|a| / (2 |a x b|)) (a x b) with a = c2 - c1, b = c3 - c1,
    a point off the c1-c2-c3 plane on the side fixed by handedness.
    Moments per point as in usr_moments. Collinear c1, c2, c3 (linear
    molecules, which are achiral) give c4 = c1.
    """
    xyz = _check_coords(coords_a)
    c1 = xyz.mean(axis=0)
    c2 = xyz[int(np.argmax(np.linalg.norm(xyz - c1, axis=1)))]
    c3 = xyz[int(np.argmax(np.linalg.norm(xyz - c2, axis=1)))]
    a = c2 - c1
    b = c3 - c1
    cross = np.cross(a, b)
    cross_norm = float(np.linalg.norm(cross))
    if cross_norm < _COLLINEAR_A2:
        c4 = c1
    else:
        c4 = c1 + (float(np.linalg.norm(a)) / (2.0 * cross_norm)) * cross
    return np.concatenate([_three_moments(np.linalg.norm(xyz - p, axis=1)) for p in (c1, c2, c3, c4)])


def _check_coords(coords_a) -> np.ndarray:
    xyz = np.asarray(coords_a, dtype=np.float64)
    if xyz.ndim != 2 or xyz.shape[1] != 3:
        raise ShapeError(f"coordinates must have shape (n, 3), got {xyz.shape}")
    if xyz.shape[0] < 3:
        raise ShapeError(f"shape moments need at least 3 atoms, got {xyz.shape[0]}")
    if not np.all(np.isfinite(xyz)):
        raise ShapeError("coordinates contain NaN or infinity")
    return xyz


# ---------------------------------------------------------------- similarity


def moment_similarity(a_vec, b_vec) -> np.ndarray | float:
    """USR similarity 1 / (1 + mean |a - b|) on 0-1 (J. Comput. Chem. 28, 1711 (2007)).

    Vectors of equal length n; b_vec may be a 2D array of rows (vectorized,
    returns one similarity per row).
    """
    a = np.asarray(a_vec, dtype=np.float64)
    b = np.asarray(b_vec, dtype=np.float64)
    if a.ndim != 1 or b.shape[-1] != a.shape[0] or b.ndim > 2:
        raise ShapeError(f"moment vectors must have equal length, got {a.shape} and {b.shape}")
    if a.shape[0] == 0:
        raise ShapeError("moment vectors are empty")
    from library.search.metrics import usr_similarity

    similarity = usr_similarity(np.abs(b - a).mean(axis=-1))
    return float(similarity) if b.ndim == 1 else similarity


def shape_vector(desc: ShapeDescription) -> np.ndarray:
    """float32 vector for the fast metric: USRCAT (60) then chiral (12)."""
    return np.concatenate([desc.usrcat, desc.chiral]).astype(np.float32)


# ---------------------------------------------------------------- describe


def _shape_atoms(mol_h: Chem.Mol) -> Chem.Mol:
    """The atoms the moments are taken over: heavy atoms, or all when fewer than 3 are heavy."""
    heavy = heavy_atom_mol(mol_h)
    target = heavy if heavy.GetNumAtoms() >= 3 else mol_h
    if target.GetNumAtoms() < 3:
        raise ShapeError(
            f"shape descriptors need at least 3 atoms; {Chem.MolToSmiles(mol_h)!r} has "
            f"{target.GetNumAtoms()}"
        )
    return target


def conformer_moments(ens: ConformerEnsemble) -> np.ndarray:
    """(conformers, 24) float32: USR (12) and chiral (12) moments of each conformer, in ensemble order.

    The conformer-level counterpart of the ensemble-averaged vectors: the best conformer pair of
    two materials predicts their Gaussian overlay better than the averages do.
    """
    rows = []
    for member in ens.members:
        xyz = _shape_atoms(member.mol).GetConformer(0).GetPositions()
        rows.append(np.concatenate([usr_moments(xyz), chiral_moments(xyz)]))
    return np.asarray(rows, dtype=np.float32)


def conformer_shape_values(ens: ConformerEnsemble) -> np.ndarray:
    """(conformers, 72) float32: each conformer's USRCAT (60) and chiral (12) moments, the values whose
    Boltzmann-weighted mean is the material's shape vector (:func:`shape_vector`)."""
    rows = []
    for member in ens.members:
        target = _shape_atoms(member.mol)
        rows.append(np.concatenate([rdMolDescriptors.GetUSRCAT(target, confId=0),
                                    chiral_moments(target.GetConformer(0).GetPositions())]))
    return np.asarray(rows, dtype=np.float32)


def best_conformer_similarity(moments_a: np.ndarray, moments_b: np.ndarray) -> float:
    """Largest USR similarity 1/(1 + mean |a - b|) over all conformer pairs of two materials (0-1)."""
    from library.search.metrics import usr_similarity

    distance = np.abs(moments_a[:, None, :] - moments_b[None, :, :]).mean(axis=-1)
    return float(usr_similarity(distance.min()))


def _conformer_descriptors(mol_h: Chem.Mol) -> dict:
    target = _shape_atoms(mol_h)
    xyz = target.GetConformer(0).GetPositions()
    lattice = rdMolDescriptors.DoubleCubicLatticeVolume(
        mol_h, isProtein=False, includeLigand=True, probeRadius=0.0
    )
    return {
        "usr": np.array(rdMolDescriptors.GetUSR(target, confId=0)),
        "usrcat": np.array(rdMolDescriptors.GetUSRCAT(target, confId=0)),
        "chiral": chiral_moments(xyz),
        "npr1": rdMolDescriptors.CalcNPR1(target, confId=0, useAtomicMasses=False),
        "npr2": rdMolDescriptors.CalcNPR2(target, confId=0, useAtomicMasses=False),
        "radius_of_gyration_a": rdMolDescriptors.CalcRadiusOfGyration(
            target, confId=0, useAtomicMasses=False
        ),
        "asphericity": rdMolDescriptors.CalcAsphericity(target, confId=0, useAtomicMasses=False),
        "volume_a3": lattice.GetVolume(),
        "surface_area_a2": lattice.GetSurfaceArea(),
    }


def describe(ens: ConformerEnsemble) -> ShapeDescription:
    """Boltzmann-weighted shape descriptors of a conformer ensemble (A, A^2, A^3)."""
    if not isinstance(ens, ConformerEnsemble):
        raise ShapeError(f"describe() needs a ConformerEnsemble, got {type(ens).__name__}")
    if not ens.members:
        raise ShapeError("conformer ensemble is empty")
    weights = ens.weights
    weights = weights / weights.sum()
    rows = [_conformer_descriptors(member.mol) for member in ens.members]

    def mean(name):
        return np.tensordot(weights, np.array([row[name] for row in rows], dtype=np.float64), 1)

    return ShapeDescription(
        usr=mean("usr").astype(np.float32),
        usrcat=mean("usrcat").astype(np.float32),
        chiral=mean("chiral").astype(np.float32),
        **{name: float(mean(name)) for name in _SCALARS},
        conformer_count=len(ens.members),
        stereoisomer_count=ens.stereoisomer_count,
        force_field=ens.force_field,
    )


def describe_smiles(smiles: str, **knobs) -> ShapeDescription:
    """describe(ensemble(smiles, **knobs)); errors are ValueError subclasses."""
    return describe(ensemble(smiles, **knobs))


# ---------------------------------------------------------------- overlay


def _shape_options(color: bool) -> rdShapeAlign.ShapeInputOptions:
    options = rdShapeAlign.ShapeInputOptions()
    options.useColors = color
    return options


def _rotation_determinant(ref_shape, probe_shape, matrix) -> float:
    """Determinant of the whole probe-to-reference linear map (+1 = rotation)."""
    rotation = np.array(matrix[:9], dtype=np.float64).reshape(3, 3)
    frames = np.linalg.det(np.array(ref_shape.inertialRot).reshape(3, 3)) * np.linalg.det(
        np.array(probe_shape.inertialRot).reshape(3, 3)
    )
    return float(np.linalg.det(rotation) * frames)


def _align_pair(mol_a: Chem.Mol, mol_b: Chem.Mol, color: bool) -> tuple[float, float, float, float]:
    """(shape Tanimoto, color Tanimoto, V_aa, V_bb) of the best rotation-only overlay.

    rdShapeAlign optimizes a quaternion (a proper rotation) from starting
    poses in each shape's principal-axes frame. Should the combined map ever
    be improper (a reflection), the pair is re-aligned from the raw
    coordinates without the principal-axes frames, which leaves rotations only.
    """
    options = _shape_options(color)
    opt_param = 0.5 if color else 1.0
    for normalize in (True, False):
        options.normalize = normalize
        ref_shape = rdShapeAlign.PrepareConformer(mol_a, 0, options)
        probe_shape = rdShapeAlign.PrepareConformer(mol_b, 0, options)
        shape_t, color_t, matrix = rdShapeAlign.AlignShapes(ref_shape, probe_shape, opt_param)
        determinant = _rotation_determinant(ref_shape, probe_shape, matrix) if normalize else (
            float(np.linalg.det(np.array(matrix[:9]).reshape(3, 3)))
        )
        if determinant > 0:
            if color and ref_shape.sof <= 0 and probe_shape.sof <= 0:
                color_t = shape_t  # neither has color features: nothing to disagree on
            return float(shape_t), float(color_t), float(ref_shape.sov), float(probe_shape.sov)
    raise ShapeError("shape alignment produced a reflection; refusing to score it")


def overlay_similarity(
    ens_a: ConformerEnsemble,
    ens_b: ConformerEnsemble,
    *,
    max_conformer_pairs: int = 25,
    mode: str = "tanimoto",
    color: bool = False,
    tversky_alpha: float = 0.95,
    tversky_beta: float = 0.05,
) -> OverlayResult:
    """Best Gaussian-overlay similarity over conformer pairs, on 0-1.

    Rotations and translations only, so mirror images do not superpose.
    Pairs are tried in order of decreasing weight product, at most
    max_conformer_pairs. mode 'tanimoto' maximizes V_ab/(V_aa+V_bb-V_ab);
    'tversky' maximizes V_ab/(tversky_alpha V_aa + tversky_beta V_bb)
    (default 0.95/0.05: how much of `ens_a` the other covers). With color,
    the score is the mean of that shape score and the color Tanimoto.
    """
    for name, ens in (("ens_a", ens_a), ("ens_b", ens_b)):
        if not isinstance(ens, ConformerEnsemble) or not ens.members:
            raise ShapeError(f"{name} must be a non-empty ConformerEnsemble")
    if mode not in ("tanimoto", "tversky"):
        raise ShapeError(f"mode must be 'tanimoto' or 'tversky', got {mode!r}")
    if max_conformer_pairs < 1:
        raise ShapeError(f"max_conformer_pairs must be >= 1, got {max_conformer_pairs!r}")
    if tversky_alpha < 0 or tversky_beta < 0 or tversky_alpha + tversky_beta <= 0:
        raise ShapeError("tversky_alpha and tversky_beta must be >= 0 and not both 0")

    pairs = sorted(
        ((i, j) for i in range(len(ens_a.members)) for j in range(len(ens_b.members))),
        key=lambda ij: (-ens_a.members[ij[0]].weight * ens_b.members[ij[1]].weight, ij),
    )[:max_conformer_pairs]

    best = None
    for i, j in pairs:
        shape_t, color_t, v_aa, v_bb = _align_pair(
            ens_a.members[i].mol, ens_b.members[j].mol, color
        )
        v_ab = shape_t * (v_aa + v_bb) / (1.0 + shape_t)
        tversky = min(1.0, v_ab / (tversky_alpha * v_aa + tversky_beta * v_bb))
        shape_score = shape_t if mode == "tanimoto" else tversky
        score = 0.5 * (shape_score + color_t) if color else shape_score
        if best is None or score > best[0]:
            best = (score, shape_t, tversky, color_t, min(v_aa, v_bb) / max(v_aa, v_bb), (i, j))
    score, shape_t, tversky, color_t, ratio, pair = best
    return OverlayResult(
        score=float(np.clip(score, 0.0, 1.0)),
        shape_tanimoto=float(np.clip(shape_t, 0.0, 1.0)),
        tversky=float(np.clip(tversky, 0.0, 1.0)),
        color_tanimoto=float(np.clip(color_t, 0.0, 1.0)),
        volume_ratio=float(ratio),
        best_pair=pair,
        mode=mode,
        tversky_alpha=float(tversky_alpha),
        tversky_beta=float(tversky_beta),
        pairs_compared=len(pairs),
    )
