"""Shape engine: moments, NPR corners, volume, invariances, overlay, chirality."""

from __future__ import annotations

import json

import numpy as np
import pytest
from rdkit import Chem, rdBase
from rdkit.Chem import AllChem, rdMolDescriptors, rdShapeAlign
from rdkit.Geometry import Point3D
from scipy.spatial.transform import Rotation

from library import shape
from library.conformers import Conformer, ConformerEnsemble, ensemble
from library.shape import (
    ENGINE_NAME,
    ENGINE_VERSION,
    ShapeDescription,
    ShapeError,
    chiral_moments,
    describe,
    describe_smiles,
    moment_similarity,
    overlay_similarity,
    shape_vector,
    usr_moments,
)

R_CARVONE = "CC1=CC[C@@H](CC1=O)C(C)=C"
R_CAMPHOR = "C[C@@]12CC[C@@H](C1(C)C)CC2=O"
S_CAMPHOR = "C[C@]12CC[C@H](C1(C)C)CC2=O"
NEROLIN = "COc1ccc2ccccc2c1"
NEROLIN_D10 = "[2H]C([2H])([2H])Oc1c([2H])c([2H])c2c([2H])c([2H])c([2H])c([2H])c2c1[2H]"


def _transformed(ens: ConformerEnsemble, fn) -> ConformerEnsemble:
    """Copy of an ensemble with fn applied to every conformer's (n, 3) coordinates."""
    members = []
    for member in ens.members:
        mol = Chem.Mol(member.mol)
        conf = mol.GetConformer(0)
        xyz = fn(conf.GetPositions())
        for i, (x, y, z) in enumerate(xyz):
            conf.SetAtomPosition(i, Point3D(float(x), float(y), float(z)))
        members.append(Conformer(mol=mol, energy_kcal=member.energy_kcal, weight=member.weight,
                                 stereoisomer=member.stereoisomer))
    return ConformerEnsemble(members=tuple(members), force_field=ens.force_field,
                             stereoisomer_count=ens.stereoisomer_count,
                             parameters=ens.parameters)


def _mirror(xyz):
    return xyz * np.array([-1.0, 1.0, 1.0])


@pytest.fixture(scope="module")
def carvone():
    return ensemble(R_CARVONE)


@pytest.fixture(scope="module")
def camphors():
    return ensemble(R_CAMPHOR), ensemble(S_CAMPHOR)


# ------------------------------------------------------------------ moments


def _four_point_mol(xs):
    mol = Chem.MolFromSmiles("CCCC")
    conf = Chem.Conformer(4)
    for i, x in enumerate(xs):
        conf.SetAtomPosition(i, Point3D(float(x), 0.0, 0.0))
    conf.Set3D(True)
    mol.AddConformer(conf)
    return mol


def test_usr_moments_match_hand_calculation_and_rdkit():
    # Four points on a line at x = 0, 2, 3, 7 (placed by hand). Third moment
    # is cbrt(mean cubed deviation) / std, the form RDKit's GetUSR uses.
    # centroid 3: distances 3,1,0,4 -> mean 2, var (1+1+4+4)/4 = 2.5,
    #   std 1.58114, cubed deviations (1-1-8+8)/4 = 0 -> 0
    # closest atom to centroid is x=3 itself: same distances -> 2, 1.58114, 0
    # farthest from centroid x=7: distances 7,5,4,0 -> mean 4, var 6.5,
    #   std 2.54951, cubed (27+1+0-64)/4 = -9 -> cbrt(-9)/2.54951 = -0.81588
    # farthest from x=7 is x=0: distances 0,2,3,7 -> mean 3, std 2.54951,
    #   cubed (-27-1+0+64)/4 = 9 -> +0.81588
    hand = [2, 1.58114, 0, 2, 1.58114, 0, 4, 2.54951, -0.81588, 3, 2.54951, 0.81588]
    xyz = np.array([[x, 0.0, 0.0] for x in (0, 2, 3, 7)])
    assert usr_moments(xyz) == pytest.approx(hand, abs=1e-5)  # hand values to 5 decimals
    rdkit_usr = rdMolDescriptors.GetUSR(_four_point_mol((0, 2, 3, 7)))
    assert usr_moments(xyz) == pytest.approx(rdkit_usr, abs=1e-12)  # same arithmetic


def test_chiral_moments_match_hand_calculation():
    # Points (placed by hand) with centroid at the origin:
    #   P1 (3,0,0), P2 (-1,2,0), P3 (-1,-1,1), P4 (-1,-1,-1)
    # c2 = P1 (|P1| = 3 is largest); c3 = P2 (|P2-P1| = sqrt(20) is largest)
    # a = (3,0,0), b = (-1,2,0), a x b = (0,0,6); c4 = (3 / (2*6)) (0,0,6) = (0,0,1.5)
    # distances to c4: sqrt(11.25)=3.3541, sqrt(7.25)=2.6926, 1.5, sqrt(8.25)=2.8723
    #   mean 2.6047; deviations .7494 .0879 -1.1047 .2676 -> std 0.6821;
    #   mean cubed deviation -0.22685 -> cbrt -0.6100 -> / std = -0.8943
    xyz = np.array([(3, 0, 0), (-1, 2, 0), (-1, -1, 1), (-1, -1, -1)], dtype=float)
    moments = chiral_moments(xyz)
    assert moments[9:12] == pytest.approx([2.6047, 0.6821, -0.8943], abs=2e-4)  # 4-digit hand arithmetic
    # c1, c2, c3 coincide with USR's centroid, farthest and farthest-from-farthest
    usr = usr_moments(xyz)
    assert moments[0:3] == pytest.approx(usr[0:3], abs=1e-12)
    assert moments[3:9] == pytest.approx(usr[6:12], abs=1e-12)


def test_chiral_moments_tell_mirror_images_apart_but_usr_does_not():
    # an irregular tetrahedron of four distinct points is chiral
    xyz = np.array([(0, 0, 0), (3.1, 0.2, 0.1), (0.4, 2.2, 0.3), (0.5, 0.7, 1.6)])
    assert usr_moments(_mirror(xyz)) == pytest.approx(usr_moments(xyz), abs=1e-12)
    # only the 3 moments about c4 can change, so the gap is small but far
    # above the 1e-12 arithmetic noise of the USR comparison just made
    assert moment_similarity(chiral_moments(xyz), chiral_moments(_mirror(xyz))) < 0.99


def test_moment_similarity_definition_and_vectorized_rows():
    # mean |a - b| = (1 + 3) / 2 = 2 -> 1 / (1 + 2) = 1/3 (the USR formula)
    assert moment_similarity([0.0, 0.0], [1.0, 3.0]) == pytest.approx(1 / 3, abs=1e-15)
    rows = np.array([[0.0, 0.0], [1.0, 3.0]])
    assert moment_similarity([0.0, 0.0], rows) == pytest.approx([1.0, 1 / 3], abs=1e-15)
    with pytest.raises(ShapeError):
        moment_similarity([1.0, 2.0], [1.0, 2.0, 3.0])


def test_too_few_points_raise():
    with pytest.raises(ShapeError, match="at least 3"):
        usr_moments(np.zeros((2, 3)))


# ------------------------------------------------------------------ NPR corners


@pytest.mark.parametrize(
    ("smiles", "corner"),
    [
        # corners of the NPR triangle, J. Chem. Inf. Comput. Sci. 43, 987 (2003)
        ("CC#CC#CC", (0.0, 1.0)),  # hexa-2,4-diyne: rod
        ("c1ccccc1", (0.5, 0.5)),  # benzene: disc
        ("CC(C)(C)C", (1.0, 1.0)),  # neopentane: sphere
        ("C1C2CC3CC1CC(C2)C3", (1.0, 1.0)),  # adamantane: sphere
    ],
)
def test_npr_corners(smiles, corner):
    desc = describe_smiles(smiles)
    # force-field geometries deviate from ideal symmetry by ~0.01
    assert (desc.npr1, desc.npr2) == pytest.approx(corner, abs=0.02)


# ------------------------------------------------------------------ volume and area


def test_volume_agrees_with_rdkit_grid_volume(carvone):
    desc = describe(carvone)
    grid = sum(m.weight * AllChem.ComputeMolVolume(m.mol, gridSpacing=0.2) for m in carvone.members)
    # different numerical methods (cubic lattice vs 0.2 A grid) and radii sets: 5 %
    assert desc.volume_a3 == pytest.approx(grid, rel=0.05)
    # surface of a van der Waals body is below that of separate spheres and
    # above that of one sphere of equal volume (isoperimetric inequality)
    sphere = (36 * np.pi * desc.volume_a3**2) ** (1 / 3)
    assert sphere < desc.surface_area_a2


# ------------------------------------------------------------------ invariances


def _flat(desc: ShapeDescription) -> np.ndarray:
    scalars = [desc.npr1, desc.npr2, desc.radius_of_gyration_a, desc.asphericity,
               desc.volume_a3, desc.surface_area_a2]
    return np.concatenate([desc.usr, desc.usrcat, desc.chiral, scalars])


def _assert_same_shape(got: np.ndarray, want: np.ndarray) -> None:
    # moments and PMI ratios: float32 storage, 1e-3
    assert got[:-2] == pytest.approx(want[:-2], rel=1e-3, abs=1e-3)
    # volume and area: the cubic lattice is fixed in space, so turning the
    # molecule moves it across lattice points (measured up to 0.8 %): 1.5 %
    assert got[-2:] == pytest.approx(want[-2:], rel=0.015)


def test_invariant_under_rotation_translation_and_renumbering(carvone):
    base = _flat(describe(carvone))
    rotation = Rotation.random(random_state=7).as_matrix()  # proper, det +1
    moved = _transformed(carvone, lambda xyz: xyz @ rotation.T + np.array([5.0, -3.0, 11.0]))
    _assert_same_shape(_flat(describe(moved)), base)

    members = []
    for member in carvone.members:
        order = list(range(member.mol.GetNumAtoms()))[::-1]
        members.append(Conformer(mol=Chem.RenumberAtoms(member.mol, order),
                                 energy_kcal=member.energy_kcal, weight=member.weight,
                                 stereoisomer=member.stereoisomer))
    renumbered = ConformerEnsemble(members=tuple(members), force_field=carvone.force_field,
                                   stereoisomer_count=1, parameters=carvone.parameters)
    _assert_same_shape(_flat(describe(renumbered)), base)
    # the same structure given with its atoms in another order gets the same ensemble
    plain = Chem.MolFromSmiles(R_CARVONE)
    reordered = Chem.RenumberAtoms(plain, list(range(plain.GetNumAtoms()))[::-1])
    assert Chem.MolToSmiles(reordered) == Chem.MolToSmiles(plain)
    _assert_same_shape(_flat(describe(ensemble(reordered))), base)


# ------------------------------------------------------------------ similarity


def test_self_similarity_is_one(carvone):
    desc = describe(carvone)
    vec = shape_vector(desc)
    assert vec.dtype == np.float32 and vec.shape == (72,)
    assert moment_similarity(vec, vec) == 1.0
    result = overlay_similarity(carvone, carvone)
    assert result.shape_tanimoto == pytest.approx(1.0, abs=1e-4)  # optimizer tolerance
    assert result.tversky == pytest.approx(1.0, abs=1e-4)
    assert result.volume_ratio == pytest.approx(1.0, abs=1e-9)


def test_tversky_with_equal_weights_is_dice(camphors):
    a, b = camphors
    dice = overlay_similarity(a, b, mode="tversky", tversky_alpha=0.5, tversky_beta=0.5)
    t = dice.shape_tanimoto
    # Dice = 2T / (1 + T) for the same overlap volume (set-similarity identity)
    assert dice.tversky == pytest.approx(2 * t / (1 + t), abs=1e-9)


def test_isotopologue_scores_one_on_every_shape_metric():
    light, heavy = ensemble(NEROLIN), ensemble(NEROLIN_D10)
    assert sum(a.GetIsotope() == 2 for a in heavy.members[0].mol.GetAtoms()) == 10
    dl, dh = describe(light), describe(heavy)
    # independent embeddings of a rigid aromatic; only the methyl rotor can differ
    for name in ("usr", "usrcat", "chiral"):
        assert moment_similarity(getattr(dl, name), getattr(dh, name)) > 0.99
    assert overlay_similarity(light, heavy).shape_tanimoto > 0.99
    assert dh.volume_a3 == pytest.approx(dl.volume_a3, rel=0.01)
    assert (dh.npr1, dh.npr2) == pytest.approx((dl.npr1, dl.npr2), abs=0.01)


def test_exact_mirror_image_same_usr_different_chiral_descriptor(carvone):
    mirrored = _transformed(carvone, _mirror)
    da, db = describe(carvone), describe(mirrored)
    # USR moments are distances only: identical up to float32 rounding
    assert moment_similarity(da.usr, db.usr) == pytest.approx(1.0, abs=1e-6)
    assert moment_similarity(da.usrcat, db.usrcat) == pytest.approx(1.0, abs=1e-6)
    # the chiral descriptor differs well above that rounding noise
    assert moment_similarity(da.chiral, db.chiral) < 0.999
    assert overlay_similarity(carvone, mirrored).shape_tanimoto < 0.99


def test_camphor_enantiomers(camphors):
    r, s = camphors
    dr, ds = describe(r), describe(s)
    # rigid: independent embeddings agree closely on distances
    assert moment_similarity(dr.usr, ds.usr) > 0.999
    assert moment_similarity(dr.chiral, ds.chiral) < 0.97
    overlay = overlay_similarity(r, s)
    assert overlay.shape_tanimoto < 0.98
    # reflected back, the same pair superposes: the gap is chirality, not the optimizer
    back = overlay_similarity(r, _transformed(s, _mirror))
    assert back.shape_tanimoto > 0.995


def test_alignment_is_a_proper_rotation(camphors):
    r, s = camphors
    probe = Chem.Mol(s.members[0].mol)
    before = probe.GetConformer().GetPositions()
    options = rdShapeAlign.ShapeInputOptions()
    options.useColors = False
    rdShapeAlign.AlignMol(r.members[0].mol, probe, options, options)
    after = probe.GetConformer().GetPositions()
    # least-squares linear map before -> after; rigid motion gives det +1
    p, q = before - before.mean(0), after - after.mean(0)
    linear, *_ = np.linalg.lstsq(p, q, rcond=None)
    assert np.linalg.det(linear) == pytest.approx(1.0, abs=1e-4)


def test_color_score_is_on_unit_scale(carvone, camphors):
    result = overlay_similarity(carvone, camphors[0], color=True)
    assert 0.0 <= result.color_tanimoto <= 1.0
    assert 0.0 <= result.score <= 1.0


# ------------------------------------------------------------------ records


def test_record_round_trip_and_engine_identity(carvone):
    desc = describe(carvone)
    arrays = desc.to_arrays()
    assert {k: (v.dtype, v.shape) for k, v in arrays.items()} == {
        "usr": (np.float32, (12,)), "usrcat": (np.float32, (60,)), "chiral": (np.float32, (12,)),
    }
    summary = json.loads(json.dumps(desc.summary()))
    rebuilt = ShapeDescription.from_arrays(
        {k: np.frombuffer(v.tobytes(), dtype=np.float32) for k, v in arrays.items()}, summary)
    assert np.array_equal(shape_vector(rebuilt), shape_vector(desc))
    assert rebuilt.summary() == desc.summary()
    assert ENGINE_NAME == "olibra-shape"
    assert rdBase.rdkitVersion in ENGINE_VERSION
    params = shape.parameters()
    json.dumps(params)
    assert shape.parameters(seed=1) != params
    with pytest.raises(ShapeError):
        shape.parameters(colour=True)
    with pytest.raises(ShapeError, match="lacks"):
        ShapeDescription.from_arrays(arrays, {})


def test_bad_overlay_and_describe_input(carvone):
    with pytest.raises(ShapeError, match="mode"):
        overlay_similarity(carvone, carvone, mode="dice")
    with pytest.raises(ShapeError):
        describe("CCO")
    with pytest.raises(ValueError):
        describe_smiles("C1CC")
