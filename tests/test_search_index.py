"""SimilarityIndex against brute-force references (numpy, scipy, scikit-learn, RDKit)."""

import io

import numpy as np
import pytest
from rdkit import DataStructs
from rdkit import Chem
from rdkit.Chem import rdFingerprintGenerator
from scipy.spatial.distance import cdist
from sklearn.metrics.pairwise import cosine_similarity

from benchmarks import search as bench
from library.search.index import RevisionMismatchError, SearchFilter, SimilarityIndex

SMILES = ["CCO", "CC(C)=CCCC(C)=CCO", "O=Cc1ccccc1", "CC(=O)OCC", "CCCCCCCC=O", "c1ccc2ccccc2c1", "CC1=CCC(CC1)C(C)=C"]


def catalogue(n=400, shape_width=72, seed=1):
    ids, shape, fingerprints = bench.synthetic_catalogue(n, seed=seed)
    return ids, shape[:, :shape_width], fingerprints


def reference_scores(shape, fingerprints, row, weight=0.5):
    # scipy cdist cityblock and scikit-learn cosine_similarity as the outside references
    l1 = cdist(shape[row : row + 1].astype(np.float64), shape.astype(np.float64), "cityblock")[0]
    shape_similarity = 1.0 / (1.0 + l1 / shape.shape[1])
    vibration = cosine_similarity(fingerprints[row : row + 1].astype(np.float64), fingerprints.astype(np.float64))[0]
    return {"shape": shape_similarity, "vibration": vibration, "blend": weight * shape_similarity + (1 - weight) * vibration}


@pytest.fixture(scope="module")
def data():
    return catalogue()


@pytest.mark.parametrize("metric", ["shape", "vibration", "blend"])
def test_top_k_equals_brute_force(data, metric):
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    for row in (0, 17, 233):
        expected = reference_scores(shape, fingerprints, row, weight=0.3)[metric]
        expected[row] = -np.inf
        hits = index.query(query_id=int(ids[row]), metric=metric, weight=0.3, k=10)
        got = np.array([h.score for h in hits])
        order = np.argsort(-expected, kind="stable")[:10]
        # float32 storage vs float64 reference: ~1e-6 relative
        np.testing.assert_allclose(got, expected[order], atol=2e-6)
        assert [h.row for h in hits] == order.tolist()


def test_pca_path_recall_and_exact_scores(data):
    ids, shape, fingerprints = data
    exact = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    fast = SimilarityIndex(pca_components=8, min_candidates=40, candidate_multiplier=4).fit(ids, shape, fingerprints)
    assert fast.compressed_ is not None and fast.compressed_.shape == (len(ids), 8)
    found = 0
    for row in range(0, 400, 20):
        truth = {h.row for h in exact.query(query_id=int(ids[row]), metric="vibration", k=10)}
        hits = fast.query(query_id=int(ids[row]), metric="vibration", k=10)
        found += len(truth & {h.row for h in hits})
        reference = reference_scores(shape, fingerprints, row)["vibration"]
        # second stage is exact: scores equal the cosine reference (float32 rounding)
        np.testing.assert_allclose([h.score for h in hits], reference[[h.row for h in hits]], atol=2e-6)
    # 8 components on family-structured data: the two-stage path should find almost all true neighbors
    assert found / (20 * 10) >= 0.95


def test_first_stage_identity_is_exact_with_all_components(data):
    # with as many components as the PCA sample allows the compressed scores equal the cosine
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=399).fit(ids, shape, fingerprints)
    approx = index.scores("vibration", index.query_block(fingerprint=index.fingerprints_[5]), approximate=True)
    reference = reference_scores(shape, fingerprints, 5)["vibration"]
    np.testing.assert_allclose(approx, reference, atol=1e-4)  # float32 sums over 801 values


def test_ranks_consistent_with_full_sort(data):
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    row = 42
    reference = reference_scores(shape, fingerprints, row)
    hits = index.query(query_id=int(ids[row]), metric="blend", k=15, ranks="exact")
    for position, hit in enumerate(hits, start=1):
        assert hit.rank == position
        assert hit.ranks["blend"] == position  # no ties in continuous random data
        for metric in ("shape", "vibration"):
            others = np.delete(reference[metric], row)
            expected = 1 + np.count_nonzero(others > hit.scores[metric] + 1e-6)
            # margin 1e-6 for float32 vs float64 near-ties
            assert abs(hit.ranks[metric] - expected) <= np.count_nonzero(np.abs(others - hit.scores[metric]) < 1e-6)
    estimated = index.query(query_id=int(ids[row]), metric="blend", k=15, ranks="estimated")
    assert [h.ranks for h in estimated] == [h.ranks for h in hits]  # no compression: estimated == exact


def test_structure_metric_matches_rdkit_tanimoto():
    n = len(SMILES)
    rng = np.random.default_rng(0)
    shape = rng.random((n, 12)).astype(np.float32)
    fingerprints = rng.random((n, 801)).astype(np.float32)
    index = SimilarityIndex(pca_components=None).fit(list(SMILES), shape, fingerprints, structure_bits=SMILES)
    generator = rdFingerprintGenerator.GetMorganGenerator(radius=2, fpSize=2048)
    fps = [generator.GetFingerprint(Chem.MolFromSmiles(s)) for s in SMILES]
    hits = index.query(query_id="CC(C)=CCCC(C)=CCO", metric="structure", k=n - 1)
    for hit in hits:
        # RDKit's own Tanimoto on the same Morgan bits as the reference
        expected = DataStructs.TanimotoSimilarity(fps[1], fps[SMILES.index(hit.id)])
        assert hit.score == pytest.approx(expected, abs=1e-6)
    assert [h.score for h in hits] == sorted((h.score for h in hits), reverse=True)
    lists = index.neighbors("structure", 2)
    for row, neighbors in zip(lists.rows, lists.neighbor_rows):
        sims = [DataStructs.TanimotoSimilarity(fps[row], fps[j]) if j != row else -1 for j in range(n)]
        assert lists.scores[row][0] == pytest.approx(max(sims), abs=1e-6)


def test_filters():
    ids, shape, fingerprints = catalogue(200)
    rng = np.random.default_rng(3)
    words = ["citrus", "woody", "floral", "musky"]
    descriptors = [set(rng.choice(words, size=rng.integers(0, 3), replace=False)) for _ in ids]
    properties = {
        "molecular_weight": rng.uniform(100, 300, len(ids)),
        "logp": rng.uniform(0, 6, len(ids)),
        "descriptors": descriptors,
        "status": np.where(rng.random(len(ids)) < 0.2, "retired", "active"),
        "restricted": rng.random(len(ids)) < 0.2,
    }
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints, properties=properties)
    chosen = SearchFilter(
        molecular_weight_range=(150, 250),
        logp_range=(1, 5),
        must_have={"woody"},
        must_not_have={"musky"},
        exclude_restricted=True,
    )
    expected = [
        i
        for i in range(len(ids))
        if 150 <= properties["molecular_weight"][i] <= 250
        and 1 <= properties["logp"][i] <= 5
        and "woody" in descriptors[i]
        and "musky" not in descriptors[i]
        and properties["status"][i] == "active"
        and not properties["restricted"][i]
        and i != 0
    ]
    hits = index.query(query_id=0, metric="shape", k=len(ids), filters=chosen)
    assert sorted(h.row for h in hits) == expected
    reference = reference_scores(shape, fingerprints, 0)["vibration"]
    for hit in hits:  # ranks are among the filtered catalogue only
        assert hit.ranks["vibration"] == 1 + sum(reference[j] > reference[hit.row] + 1e-6 for j in expected)
    assert index.query(query_id=0, k=5, filters=SearchFilter(must_have={"no-such-word"})) == []
    kept_self = index.query(query_id=0, metric="shape", k=1, exclude_query=False, filters=SearchFilter(exclude_retired=False))
    assert kept_self[0].row == 0 and kept_self[0].score == pytest.approx(1.0)
    bare = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    with pytest.raises(ValueError, match="molecular_weight"):
        bare.query(query_id=0, filters=SearchFilter(molecular_weight_range=(1, 2)))


def test_neighbors_match_brute_force():
    ids, shape, fingerprints = catalogue(600)
    index = SimilarityIndex(pca_components=16, exact_below=0, clusters=12, probes=4).fit(ids, shape, fingerprints)
    exact = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    for metric in ("shape", "vibration", "blend"):
        exact_lists = exact.neighbors(metric, 5)
        assert exact_lists.exact
        for row in (0, 100, 599):
            reference = reference_scores(shape, fingerprints, row)[metric]
            reference[row] = -np.inf
            np.testing.assert_allclose(exact_lists.scores[row], np.sort(reference)[::-1][:5], atol=2e-6)
        approx = index.neighbors(metric, 5)
        assert not approx.exact
        recall = np.mean([len(set(a) & set(b)) / 5 for a, b in zip(approx.neighbor_rows, exact_lists.neighbor_rows)])
        # 4 of 12 groups probed on family-structured data: nearly every true neighbor is found
        assert recall >= 0.95, (metric, recall)


def test_rerank_callback_orders_hits(data):
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    calls = []

    def overlay(query_id, candidate_ids):
        calls.append((query_id, list(candidate_ids)))
        return [1.0 / (1 + (int(c) % 7)) for c in candidate_ids]

    hits = index.query(query_id=3, metric="shape", k=5, rerank=overlay, rerank_depth=30)
    assert calls[0][0] == 3 and len(calls[0][1]) == 30
    assert [h.scores["overlay"] for h in hits] == sorted((h.scores["overlay"] for h in hits), reverse=True)
    assert all(h.id in calls[0][1] for h in hits)
    with pytest.raises(ValueError, match="0-1"):
        index.query(query_id=3, metric="shape", rerank=lambda q, c: [2.0] * len(c))


def test_rerank_may_leave_candidates_unscored(data):
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    plain = index.query(query_id=3, metric="shape", k=20)

    def every_other(query_id, candidate_ids):  # re-scores the even positions only, in reverse order
        return [float("nan") if i % 2 else 1.0 - i / 100 for i in range(len(candidate_ids))]

    hits = index.query(query_id=3, metric="shape", k=20, rerank=every_other, rerank_depth=20)
    scored = [h for h in hits if "overlay" in h.scores]
    assert [h.id for h in scored] == [plain[i].id for i in range(0, 20, 2)]
    # the unscored follow in their moment order, with their shape score and no overlay
    assert [h.id for h in hits[len(scored):]] == [plain[i].id for i in range(1, 20, 2)]
    assert all(h.score == pytest.approx(h.scores["shape"]) for h in hits[len(scored):])
    with pytest.raises(ValueError, match="at least one scored"):
        index.query(query_id=3, metric="shape", rerank=lambda q, c: [float("nan")] * len(c))


def test_save_load_round_trip_and_revision(tmp_path, data):
    ids, shape, fingerprints = data
    properties = {"descriptors": [{"green"} if i % 2 else set() for i in range(len(ids))]}
    index = SimilarityIndex(pca_components=8).fit(ids, shape, fingerprints, properties=properties)
    path = tmp_path / "index.npz"
    index.save(path, revision="rev-7")
    loaded = SimilarityIndex.load(path, "rev-7")
    assert loaded is not None and loaded.pca_components == 8
    chosen = SearchFilter(must_have={"green"})
    assert index.query(query_id=9, k=10, filters=chosen) == loaded.query(query_id=9, k=10, filters=chosen)
    assert SimilarityIndex.load(path, "rev-8") is None
    with pytest.raises(RevisionMismatchError, match="rev-7"):
        SimilarityIndex.load(path, "rev-8", strict=True)
    assert SimilarityIndex.load(tmp_path / "missing.npz", "rev-7") is None


def test_input_errors_name_the_input(data):
    ids, shape, fingerprints = data
    with pytest.raises(ValueError, match="fingerprints"):
        SimilarityIndex().fit(ids, shape, fingerprints[:-1])
    with pytest.raises(ValueError, match="non-negative"):
        SimilarityIndex().fit(ids, shape, -fingerprints)
    with pytest.raises(ValueError, match="unique"):
        SimilarityIndex().fit(np.zeros(len(ids), int), shape, fingerprints)
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    with pytest.raises(ValueError, match="metric"):
        index.query(query_id=1, metric="smell")
    with pytest.raises(ValueError, match="weight"):
        index.query(query_id=1, weight=1.5)
    with pytest.raises(ValueError, match="not in the index"):
        index.query(query_id=10_000)
    with pytest.raises(ValueError, match="not fitted"):
        SimilarityIndex().query(query_id=1)


def test_external_query_equals_member_query(data):
    ids, shape, fingerprints = data
    index = SimilarityIndex(pca_components=None).fit(ids, shape, fingerprints)
    member = index.query(query_id=11, k=5)
    outside = index.query(shape=shape[11], fingerprint=fingerprints[11] * 3.0, k=6)  # scale must not matter
    assert outside[0].row == 11
    assert [h.row for h in outside[1:]] == [h.row for h in member]


def test_bench_smoke_prints():
    out = io.StringIO()
    figures = bench.run(sizes=(1500,), out=out, queries=5, peer_queries=2)
    text = out.getvalue()
    assert "median" in text and "peer" in text and "recall" in text
    assert figures[1500]["recall_at_10"] > 0.9


def test_concurrent_queries_give_the_serial_answers(data):
    # a web server asks one fitted index from several threads at once: every answer must equal the
    # answer to the same question asked alone (first-stage scores, neighbor groupings and BLAS
    # thread limits are shared state)
    from concurrent.futures import ThreadPoolExecutor

    ids, shape, fingerprints = data

    def fitted():
        return SimilarityIndex(pca_components=16, exact_below=0, clusters=8, probes=3).fit(ids, shape, fingerprints)

    questions = [(int(ids[row]), metric) for row in range(0, 400, 9) for metric in ("shape", "vibration", "blend")]

    def ask(index, question):
        query_id, metric = question
        hits = index.query(query_id=query_id, metric=metric, weight=0.4, k=8)
        return [(h.id, round(h.score, 6), tuple(sorted(h.ranks.items()))) for h in hits]

    serial_index = fitted()
    serial = [ask(serial_index, q) for q in questions]
    serial_lists = {m: serial_index.neighbors(m, 5).neighbor_rows for m in ("shape", "vibration", "blend")}
    shared = fitted()  # fresh, so that its caches are filled by competing threads
    with ThreadPoolExecutor(max_workers=8) as pool:
        lists = list(pool.map(lambda m: (m, shared.neighbors(m, 5).neighbor_rows), ["shape", "vibration", "blend"] * 3))
        answers = list(pool.map(lambda q: ask(shared, q), questions * 3))
    assert answers == serial * 3
    for metric, rows in lists:
        np.testing.assert_array_equal(rows, serial_lists[metric])
