"""Calibrated blend: weight recovery on synthetic data (a worked example), grouped folds that never put a
material on both sides, and the stored metric on a real catalogue."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from library.search import calibration, metrics


def _synthetic_pairs(materials: int = 40, seed: int = 1):
    rng = np.random.default_rng(seed)
    a, b = np.triu_indices(materials, 1)
    features = rng.uniform(size=(a.size, 3))
    return rng, a + 100, b + 100, features


def test_fit_recovers_known_weights():
    # worked example: observations generated from known non-negative weights (0.7, 0, 0.3) plus noise
    rng, _, _, features = _synthetic_pairs()
    target = features @ np.array([0.7, 0.0, 0.3]) + 2.0 + rng.normal(0, 0.01, size=len(features))
    weights = calibration.fit_weights(features, target)
    assert np.allclose(weights, [0.7, 0.0, 0.3], atol=0.02)


def test_fit_keeps_weights_non_negative_like_scipy_nnls():
    rng, _, _, features = _synthetic_pairs()
    target = features @ np.array([0.5, -0.8, 0.2]) + rng.normal(0, 0.01, size=len(features))
    weights = calibration.fit_weights(features, target)
    # reference: scipy.optimize.nnls on the centered problem, then scaled to sum 1
    x, y = features - features.mean(axis=0), target - target.mean()
    reference, _ = optimize.nnls(x, y)
    assert weights[1] == 0.0 and np.allclose(weights, reference / reference.sum())


def test_grouped_folds_never_put_a_material_on_both_sides():
    _, a, b, features = _synthetic_pairs()
    target = features @ np.array([0.6, 0.1, 0.3])
    folds = calibration.cross_validate(a, b, features, target, ("x", "y", "z"), folds=5, seed=2)
    assert len(folds) == 5
    held_out = []
    for fold in folds:
        train, test = set(fold.train_materials), set(fold.test_materials)
        assert not train & test
        held_out += fold.test_materials
        test_mask = calibration.pairs_within(a, b, np.array(fold.test_materials))
        fit_mask = calibration.pairs_within(a, b, np.array(fold.train_materials))
        assert not (test_mask & fit_mask).any()
        assert fold.test_pairs == test_mask.sum() and fold.train_pairs == fit_mask.sum()
        # noiseless target from the same kind of weights: the calibrated blend beats every single part
        assert fold.spearman["calibrated"] > max(fold.spearman[n] for n in "xyz")
    assert sorted(held_out) == sorted(set(a.tolist()) | set(b.tolist()))  # each material held out once


def test_too_few_materials_is_a_clear_error():
    with pytest.raises(ValueError, match="at least 10 materials"):
        calibration.grouped_folds([1, 2, 3], 5)


@pytest.fixture
def registry_kept():
    before = dict(metrics._REGISTRY)
    yield
    metrics._REGISTRY.clear()
    metrics._REGISTRY.update(before)


def test_calibrated_metric_registers_and_refuses_builtin_names(registry_kept):
    metric = metrics.register_calibrated("calibrated-test", {"shape": 0.25, "structure": 0.75, "vibration": 0.0},
                                         "test")
    assert metric.components == ("shape", "structure")
    assert "calibrated-test" in metrics.names(indexed=True)
    with pytest.raises(ValueError, match="built-in"):
        metrics.register_calibrated("blend", {"shape": 1.0}, "test")


@pytest.fixture
def computed(computed_template, tmp_path, monkeypatch):
    import shutil

    target = tmp_path / "catalogue.sqlite"
    shutil.copyfile(computed_template, target)
    monkeypatch.setenv("OLIBRA_CACHE", str(tmp_path / "cache"))
    return f"sqlite:///{target}"


def _run(capsys, *argv):
    from library import cli

    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_pair_classes_calibrate_and_search_on_a_computed_catalogue(computed, capsys, registry_kept):
    import json

    from library.catalogue.database import Catalogue

    code, out, err = _run(capsys, "--db", computed, "pairs", "classes", "--format", "json")
    assert code == 0, err
    counts = {row["name"]: row["pairs"] for row in json.loads(out)}
    # carvone enantiomers; benzaldehyde / benzaldehyde-d6; citral, citronellal and octanal with their
    # nitriles (the seed file's own pairs; common practice, no source)
    assert counts["enantiomers"] == 1 and counts["isotopologues"] == 1 and counts["aldehyde-nitrile"] == 3
    code, out, err = _run(capsys, "--db", computed, "pairs", "test", "aldehyde-nitrile", "--format", "json",
                          "--permutations", "99")
    assert code == 0, err
    report = json.loads(out)
    assert "Benjamini-Hochberg" in report["multiple_testing"]
    assert {r["metric"] for r in report["results"]} >= {"shape", "vibration", "structure", "blend-rank"}
    code, out, err = _run(capsys, "--db", computed, "pairs", "class", "add", "x", "--reaction", "[C:1=O>>C")
    assert code == 2 and "could not be parsed" in err

    code, out, err = _run(capsys, "--db", computed, "calibrate", "--observed", "descriptors", "--folds", "3",
                          "--format", "json")
    assert code == 0, err
    result = json.loads(out)
    assert all(w >= 0 for w in result["weights"].values())
    assert abs(sum(result["weights"].values()) - 1) < 1e-9
    assert set(result["mean_spearman"]) == {"calibrated", *result["features"]}
    code, out, err = _run(capsys, "--db", computed, "search", "Citral", "--metric", "calibrated-descriptors",
                          "-k", "3", "--format", "json")
    assert code == 0, err
    assert "stale" not in out
    code, out, err = _run(capsys, "--db", computed, "scorecard", "--observed", "descriptors", "--format", "json",
                          "--permutations", "99", "--resamples", "100")
    assert code == 0, err
    assert "calibrated-descriptors" in out and "in-sample" in out + err  # JSON carries the notes

    catalogue = Catalogue(computed)
    from sqlalchemy import select

    from library.catalogue.models import MaterialOdor

    with catalogue.transaction() as session:  # the observations change: the calibration goes stale
        session.delete(session.scalars(select(MaterialOdor).where(MaterialOdor.source_kind != "demo")).first())
    catalogue.dispose()
    code, out, err = _run(capsys, "--db", computed, "search", "Citral", "--metric", "calibrated-descriptors",
                          "-k", "3")
    assert code == 0, err
    assert "is stale" in out
