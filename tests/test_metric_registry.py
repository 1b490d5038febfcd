"""The metric registry: every consumer loops over it, so a new metric needs one class and one
register() call (the worked example of DEVELOPERS.md, "Adding a metric")."""

from dataclasses import dataclass

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from benchmarks import search as bench
from library.search import metrics
from library.search.index import SimilarityIndex
from library.search.metrics import DEFAULT_WEIGHT, Metric, usr_similarity


@dataclass(frozen=True)
class PlainUSRMetric(Metric):
    """USR similarity of the 12 all-atom moments that open the USRCAT vector (J. Cheminform. 4, 27 (2012))."""

    def similarity(self, query, catalogue, *, aligned=False, weight=DEFAULT_WEIGHT):
        a, b = query["shape"][..., :12], catalogue["shape"][..., :12]
        l1 = np.abs(a - b).sum(axis=-1) if aligned else cdist(a, b, "cityblock")
        return usr_similarity(l1 / 12).astype(np.float32)


@pytest.fixture
def with_plain_usr(monkeypatch):
    monkeypatch.setattr(metrics, "_REGISTRY", dict(metrics._REGISTRY))
    return metrics.register(PlainUSRMetric("usr", "USR similarity of the 12 all-atom moments",
                                           features=("shape",), records=("shape",)))


def test_registered_metrics_and_their_definitions():
    assert metrics.names() == ("shape", "overlay", "handedness", "vibration", "vibration-ir", "vibration-window",
                               "tunnelling", "blend", "blend-rank", "structure")
    assert metrics.names(indexed=True) == ("shape", "vibration", "vibration-ir", "vibration-window", "tunnelling",
                                           "blend", "blend-rank", "structure")
    assert all(m.description for m in metrics.metrics())
    # the USR formula of J. Comput. Chem. 28, 1711 (2007): S = 1 / (1 + mean |a - b|)
    assert usr_similarity(2.0) == pytest.approx(1 / 3)
    assert metrics.tanimoto(3, 5, 4) == pytest.approx(0.5)  # c / (a + b - c), from the definition
    with pytest.raises(ValueError, match="already registered"):
        metrics.register(metrics.get("shape"))
    with pytest.raises(ValueError, match="must be one of"):
        metrics.get("smell")


def test_rank_blend_mixes_catalogue_percentiles():
    from scipy.stats import percentileofscore

    ids, shape, fingerprints = bench.synthetic_catalogue(120, seed=3)
    index = SimilarityIndex().fit(ids, shape, fingerprints)
    a, b = np.triu_indices(index.size, 1)  # 7140 pairs: fewer than the sample, so every pair is the reference
    every = index.pair_scores(a, b, weight=0.5)
    pairs = index.pair_scores([1, 2, 3], [4, 5, 6], weight=0.5)
    # reference: scipy.stats.percentileofscore (kind='mean', the mid-rank percentile) over all pairs
    expected = {name: np.array([percentileofscore(every[name], v, kind="mean") / 100 for v in pairs[name]])
                for name in ("shape", "vibration")}
    assert pairs["blend-rank"] == pytest.approx(0.5 * expected["shape"] + 0.5 * expected["vibration"], abs=1e-5)
    shape_only = index.pair_scores([1, 2, 3], [4, 5, 6], weight=1.0)["blend-rank"]
    assert shape_only == pytest.approx(expected["shape"], abs=1e-5)
    # an even mix: the percentiles of the rank blend's two parts have the same spread (uniform 0-1)
    assert np.std(metrics.percentile_scores(index, "shape", every["shape"])) == pytest.approx(
        np.std(metrics.percentile_scores(index, "vibration", every["vibration"])), abs=0.01)


def test_a_new_metric_reaches_every_consumer(with_plain_usr):
    from library.cli import build_parser

    ids, shape, fingerprints = bench.synthetic_catalogue(300, seed=5)
    index = SimilarityIndex(pca_components=8).fit(ids, shape, fingerprints)
    assert "usr" in index.metrics()
    reference = 1.0 / (1.0 + cdist(shape[7:8, :12].astype(np.float64), shape[:, :12].astype(np.float64),
                                   "cityblock")[0] / 12)  # scipy as the outside reference
    reference[7] = -np.inf
    hits = index.query(query_id=7, metric="usr", k=5)
    assert [h.row for h in hits] == np.argsort(-reference, kind="stable")[:5].tolist()
    assert all("usr" in h.scores and "usr" in h.ranks for h in hits)
    assert index.pair_scores([1, 2], [3, 4])["usr"] == pytest.approx(
        [reference_pair(shape, 1, 3), reference_pair(shape, 2, 4)], abs=1e-6)
    matrix = index.similarity_matrix("usr", [0, 1, 2])
    assert matrix[0, 1] == pytest.approx(reference_pair(shape, 0, 1), abs=1e-6)
    lists = index.neighbors("usr", 3)  # no candidate space: scanned exactly
    assert lists.exact and lists.neighbor_rows[7][0] == hits[0].row
    parser = build_parser()
    arguments = parser.parse_args(["search", "Citral", "--metric", "usr"])
    assert arguments.metric == "usr"


def reference_pair(shape, a, b):
    return 1.0 / (1.0 + np.abs(shape[a, :12].astype(np.float64) - shape[b, :12]).mean())


# Structures from PubChem isomeric SMILES (from memory): (R)- and (S)-carvone, (+)/(-)-camphor,
# an achiral pair (acetophenone, propiophenone).
CARVONE_R = "CC1=CC[C@H](CC1=O)C(C)=C"  # CIP label R checked with RDKit's new CIP labeller
CARVONE_S = "CC1=CC[C@@H](CC1=O)C(C)=C"
CAMPHOR_PLUS = "C[C@@]12CC[C@@H](C1(C)C)CC2=O"
CAMPHOR_MINUS = "C[C@]12CC[C@H](C1(C)C)CC2=O"


@pytest.mark.parametrize("hand_a, hand_b", [(CARVONE_R, CARVONE_S), (CAMPHOR_PLUS, CAMPHOR_MINUS)])
def test_handedness_tells_mirror_images_apart_and_is_neutral_otherwise(hand_a, hand_b):
    from library import conformers

    handedness = metrics.get("handedness")
    a, b = conformers.ensemble(hand_a), conformers.ensemble(hand_b)
    # a mirror image built by olibra is the partner's conformers reflected: the score is the
    # rotation-only overlay of the two hands, below 1 because no rotation superposes them
    score = handedness.pair_similarity(a, b)
    assert score < 0.999
    # the reflected ensemble of a material is its mirror image too
    assert handedness.pair_similarity(a, conformers.reflected(a)) < 0.999
    # a material and itself: reflecting the partner can only lose overlap, never gain
    assert handedness.pair_similarity(a, a) == pytest.approx(1.0, abs=1e-6)
    # achiral partners (a material superposable on its mirror image): neutral, exactly 1
    achiral = conformers.ensemble("CC(=O)c1ccccc1")
    assert handedness.pair_similarity(a, achiral) == 1.0
    assert handedness.pair_similarity(conformers.ensemble("CCC(=O)c1ccccc1"), achiral) == 1.0


def test_carvone_constants_carry_the_hands_their_names_say():
    """The CIP labels of the test structures, by RDKit's CIP labeller (IUPAC 2013 rules)."""
    from rdkit import Chem
    from rdkit.Chem import rdCIPLabeler

    for smiles, label in ((CARVONE_R, "R"), (CARVONE_S, "S")):
        mol = Chem.MolFromSmiles(smiles)
        rdCIPLabeler.AssignCIPLabels(mol)
        assert [a.GetProp("_CIPCode") for a in mol.GetAtoms() if a.HasProp("_CIPCode")] == [label]
