"""Disagreement scan on a synthetic index: a planted same-shape pair and a planted same-spectrum pair
pass the thresholds. Real mirror-image pairs (told apart only by the handedness metric) are tested on
computed records in tests/test_web_search.py and tests/test_search_service.py."""

import numpy as np
import pytest

from benchmarks import search as bench
from library.search.disagreements import (
    SHAPE_NOT_VIBRATION,
    VIBRATION_NOT_SHAPE,
    find_disagreements,
    jaccard,
)
from library.search.index import SimilarityIndex


@pytest.fixture(scope="module")
def planted():
    ids, shape, fingerprints = bench.synthetic_catalogue(500, seed=4)
    ids = np.array([f"m{i}" for i in range(len(ids))])
    # isotopologue-like: identical shape, fingerprint of another family (modes shifted)
    shape[1] = shape[0]
    fingerprints[1] = bench.eva_fingerprints(np.array([[700.0, 1100.0, 2150.0, 2200.0, 2250.0]]))[0]
    # same spectrum, other shape: identical fingerprint, every shape value 1 angstrom apart (the size of
    # the difference between unrelated odorants, not a mirror image: that one is far smaller)
    fingerprints[3] = fingerprints[2]
    shape[3] = shape[2] + 1.0
    index = SimilarityIndex(pca_components=16).fit(ids, shape, fingerprints)
    return index


def test_planted_pairs_are_found(planted):
    found = find_disagreements(planted, k=10, min_shape=0.9, max_vibration=0.6, min_vibration=0.9, max_shape=0.6)
    pairs = {(d.id_a, d.id_b): d for d in found}
    isotopologue = pairs[("m0", "m1")]
    assert isotopologue.direction == SHAPE_NOT_VIBRATION
    assert isotopologue.shape == pytest.approx(1.0)  # identical shape vectors
    assert isotopologue.shape_rank == 1
    assert isotopologue.score == pytest.approx(1.0 - isotopologue.vibration)
    same_spectrum = pairs[("m2", "m3")]
    assert same_spectrum.direction == VIBRATION_NOT_SHAPE
    assert same_spectrum.vibration == pytest.approx(1.0, abs=1e-6)  # identical fingerprints, float32 dot
    # every value 1 apart: S = 1 / (1 + mean |a - b|) = 1 / 2 (USR, J. Comput. Chem. 28, 1711 (2007))
    assert same_spectrum.shape == pytest.approx(0.5, rel=1e-5)
    assert [d.score for d in found] == sorted((d.score for d in found), reverse=True)
    for d in found:  # every reported pair is past its thresholds
        if d.direction == SHAPE_NOT_VIBRATION:
            assert d.shape >= 0.9 and d.vibration <= 0.6
        else:
            assert d.vibration >= 0.9 and d.shape <= 0.6


def test_direction_filter_and_thresholds(planted):
    only_shape = find_disagreements(planted, k=10, direction=SHAPE_NOT_VIBRATION)
    assert only_shape and all(d.direction == SHAPE_NOT_VIBRATION for d in only_shape)
    strict = find_disagreements(planted, k=10, direction=VIBRATION_NOT_SHAPE, max_shape=0.05)
    assert all(d.shape <= 0.05 for d in strict)
    assert ("m2", "m3") not in {(d.id_a, d.id_b) for d in strict}
    with pytest.raises(ValueError, match="direction"):
        find_disagreements(planted, direction="sideways")
    with pytest.raises(ValueError, match="min_shape"):
        find_disagreements(planted, min_shape=2)


def test_observed_axis(planted):
    descriptors = {"m0": {"woody", "amber"}, "m1": {"woody", "amber"}, "m2": {"citrus"}, "m3": {"musky"}}

    def observed(a, b):
        if a in descriptors and b in descriptors:
            return jaccard(descriptors[a], descriptors[b])
        return None

    found = find_disagreements(planted, k=10, observed=observed, observed_alike=0.5, observed_unalike=0.2)
    pairs = {(d.id_a, d.id_b): d for d in found}
    assert pairs[("m0", "m1")].observed == 1.0
    assert pairs[("m0", "m1")].observed_alike is True
    assert pairs[("m0", "m1")].sides_with == "shape"
    assert pairs[("m2", "m3")].observed_alike is False
    assert pairs[("m2", "m3")].sides_with == "shape"  # shape said unalike, observation agrees
    mapping = find_disagreements(planted, k=10, observed={("m1", "m0"): 0.3})
    isotopologue = {(d.id_a, d.id_b): d for d in mapping}[("m0", "m1")]
    assert isotopologue.observed == 0.3 and isotopologue.observed_alike is None and isotopologue.sides_with is None


def test_jaccard():
    assert jaccard({"a", "b"}, {"b", "c"}) == pytest.approx(1 / 3)  # |{b}| / |{a, b, c}|
    assert jaccard(set(), set()) == 0.0


def test_percentile_thresholds_read_the_catalogue_distribution(planted):
    from library.search import disagreements as d

    index = planted
    resolved = d.resolve_thresholds(index, {"min_shape": "p0", "max_shape": "p100", "max_vibration": 0.25})
    n = len(index.ids_)
    rows_a, rows_b = np.triu_indices(n, 1)
    scores = index.pair_scores(rows_a, rows_b)["shape"]
    # sampled pairs lie among all pairs: p0 and p100 sit inside the exact range, and a number stays as given
    assert scores.min() - 1e-6 <= resolved["min_shape"][0] <= resolved["max_shape"][0] <= scores.max() + 1e-6
    assert resolved["min_shape"][1] == "p0" and resolved["max_vibration"] == (0.25, None)
    assert d.resolve_thresholds(index, {"min_shape": "p50"}) == d.resolve_thresholds(index, {"min_shape": "p50"})
    for bad in ("p-1", "p101", "1.5", "high"):
        with pytest.raises(ValueError, match="percentile|similarity"):
            d.parse_threshold(bad, "minimum shape")


def test_a_vibration_side_the_index_cannot_score_is_refused_by_name(planted):
    from types import SimpleNamespace

    from library.search.disagreement_policy import resolved_thresholds
    from library.search.errors import SearchError

    fitted = SimpleNamespace(index=planted)  # shape and EVA fingerprints only: no tunnelling feature
    with pytest.raises(SearchError, match="the tunnelling metric is not in this catalogue's index"):
        resolved_thresholds(fitted, vibration_metric="tunnelling", max_vibration="p5")
    with pytest.raises(SearchError, match="the vibration side must be one of vibration, vibration-ir"):
        resolved_thresholds(fitted, vibration_metric="structure", max_vibration="p5")
    used = resolved_thresholds(fitted, vibration_metric="vibration", max_vibration="p5")
    assert used["max_vibration"][1] == "p5" and 0 <= used["max_vibration"][0] <= 1
