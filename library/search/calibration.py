"""A blend calibrated on observed similarity, with cross-validation grouped by material.

Features: every indexed base metric (not the blends built from them), each similarity turned into
its percentile over the catalogue's pairs (library.search.metrics.percentile_scores), so weights
compare like with like. Target: the percentile of the observed similarity among the fitted pairs.
Fit: non-negative least squares (scipy.optimize.nnls) on centered features and target (the
intercept is free, the weights are not), weights then scaled to sum 1 (the ranking does not
depend on the scale). Nothing is tuned: there is no hyperparameter.

Grouped cross-validation: the materials with observations are split into folds (seeded); in each
fold the weights are fitted on pairs among the training materials only and scored (Spearman) on
pairs among the held-out materials only, so no material is on both sides. Every single metric is
scored on the same held-out pairs. The overlay metric is left out: it is computed per pair from
stored conformers (one alignment per pair, all pairs of the observed materials), far too slow for
a fit, and it cannot be ranked by the index, so a blend using it could not be searched.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass

import numpy as np

FOLDS = 5


@dataclass(frozen=True)
class Fold:
    train_materials: tuple[int, ...]
    test_materials: tuple[int, ...]
    train_pairs: int
    test_pairs: int
    spearman: dict[str, float]  # metric (and 'calibrated') -> Spearman on the held-out pairs


@dataclass(frozen=True)
class Calibration:
    name: str
    weights: dict[str, float]
    observed_source: str
    observed_revision: str
    features: tuple[str, ...]
    folds: tuple[Fold, ...]
    mean_spearman: dict[str, float]
    pairs: int
    materials: int
    left_out: str = ("overlay and handedness: scored per pair from stored conformers, too slow for every "
                     "pair and not rankable by the index")


def fit_weights(features: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Non-negative weights (summing to 1; all zero when nothing helps) of the columns of `features`
    that best predict `target` in least squares with a free intercept."""
    from scipy.optimize import nnls

    x = np.asarray(features, np.float64)
    y = np.asarray(target, np.float64)
    if x.ndim != 2 or y.shape != (x.shape[0],):
        raise ValueError(f"features must be (pairs, metrics) and target (pairs,), got {x.shape} and {y.shape}")
    weights, _ = nnls(x - x.mean(axis=0), y - y.mean())
    total = weights.sum()
    return weights / total if total > 0 else weights


def grouped_folds(materials: Sequence[int], folds: int = FOLDS, *, seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train materials, test materials) per fold: a seeded partition of the materials."""
    ids = np.asarray(sorted(set(int(m) for m in materials)))
    if ids.size < 2 * folds:
        raise ValueError(f"grouped cross-validation with {folds} folds needs at least {2 * folds} materials "
                         f"with observations, got {ids.size}")
    order = np.random.default_rng(seed).permutation(ids)
    parts = np.array_split(order, folds)
    return [(np.sort(np.concatenate(parts[:k] + parts[k + 1:])), np.sort(parts[k])) for k in range(folds)]


def pairs_within(pair_a: np.ndarray, pair_b: np.ndarray, materials: np.ndarray) -> np.ndarray:
    """Boolean mask of pairs whose two materials are both in `materials`."""
    return np.isin(pair_a, materials) & np.isin(pair_b, materials)


def _percentile_ranks(values: np.ndarray) -> np.ndarray:
    from scipy.stats import rankdata

    return (rankdata(values) - 0.5) / values.size


def _spearman(x: np.ndarray, y: np.ndarray) -> float:
    """Spearman r, NaN when either side is constant (no ranking to compare)."""
    from scipy.stats import spearmanr

    if np.ptp(x) == 0 or np.ptp(y) == 0:
        return float("nan")
    return float(spearmanr(x, y).statistic)


def cross_validate(pair_a: np.ndarray, pair_b: np.ndarray, features: np.ndarray, target: np.ndarray,
                   names: Sequence[str], *, folds: int = FOLDS, seed: int = 0) -> list[Fold]:
    """Grouped cross-validation of the non-negative blend against each single feature (see module)."""
    out = []
    for train, test in grouped_folds(np.concatenate([pair_a, pair_b]), folds, seed=seed):
        assert not set(train.tolist()) & set(test.tolist()), "a material is on both sides of a fold"
        fit_mask = pairs_within(pair_a, pair_b, train)
        test_mask = pairs_within(pair_a, pair_b, test)
        if fit_mask.sum() < 3 or test_mask.sum() < 3:
            continue
        weights = fit_weights(features[fit_mask], _percentile_ranks(target[fit_mask]))
        held_out = features[test_mask]
        scores = {"calibrated": _spearman(held_out @ weights, target[test_mask])}
        for column, name in enumerate(names):
            scores[name] = _spearman(held_out[:, column], target[test_mask])
        out.append(Fold(tuple(train.tolist()), tuple(test.tolist()), int(fit_mask.sum()), int(test_mask.sum()), scores))
    if not out:
        raise ValueError("no fold had 3 or more held-out pairs with observations; add observations")
    return out


def feature_names() -> tuple[str, ...]:
    """Indexed metrics that are not built from other metrics: the calibration's candidate parts."""
    from library.search import metrics

    return tuple(m.name for m in metrics.metrics(indexed=True) if not m.components)


# ---------------------------------------------------------------- on a catalogue


def observation_revision(catalogue, source: str) -> str:
    """A hash of the observations behind `source` ('descriptors' or a data set name): it changes when
    any of them changes, which makes a calibration fitted on them stale."""
    from sqlalchemy import select

    from library.catalogue import observations
    from library.catalogue.models import MaterialOdor, OdorDescriptor
    from library.search.observed import DESCRIPTORS

    digest = hashlib.sha256(source.encode())
    with catalogue.reading() as session:
        if source == DESCRIPTORS:
            rows = session.execute(select(MaterialOdor.material_id, OdorDescriptor.term, MaterialOdor.source_kind)
                                   .join(OdorDescriptor).order_by(MaterialOdor.material_id, OdorDescriptor.term))
            digest.update(json.dumps([list(r) for r in rows]).encode())
        else:
            ids, variables, matrix = observations.observation_profiles(session, source)
            digest.update(json.dumps([list(map(int, ids)), list(map(str, variables))]).encode())
            digest.update(np.ascontiguousarray(np.asarray(matrix, np.float64)).tobytes())
    return digest.hexdigest()[:16]


def calibrate(catalogue, observed: str, *, name: str | None = None, folds: int = FOLDS, seed: int = 0,
              cat_index=None, include_demo: bool = False) -> Calibration:
    """Learn, cross-validate and return (not store) a calibrated blend for observation source `observed`
    (demo entries' invented odor notes count only with `include_demo`)."""
    from library.search import metrics
    from library.search.catalogue_index import load_index
    from library.search.errors import SearchError
    from library.search.observed import observed_similarity

    cat_index = cat_index or load_index(catalogue)
    index = cat_index.index
    similarity, _ = observed_similarity(catalogue, observed, include_demo=include_demo)
    ids = [int(i) for i in index.ids_]
    rows_a, rows_b, values = [], [], []
    for i in range(len(ids)):
        for j in range(i + 1, len(ids)):
            value = similarity(ids[i], ids[j])
            if value is not None and np.isfinite(value):
                rows_a.append(i)
                rows_b.append(j)
                values.append(value)
    if len(values) < 10:
        raise SearchError(f"only {len(values)} pairs have an observed similarity under {observed!r}; "
                          "calibration needs more observations")
    rows_a, rows_b = np.asarray(rows_a), np.asarray(rows_b)
    target = np.asarray(values, np.float64)
    names = tuple(n for n in feature_names() if n in index.metrics())
    scores = index.pair_scores(rows_a, rows_b)
    features = np.column_stack([metrics.percentile_scores(index, n, scores[n]) for n in names]).astype(np.float64)
    ids_array = np.asarray(ids)
    pair_a, pair_b = ids_array[rows_a], ids_array[rows_b]
    try:
        fold_results = cross_validate(pair_a, pair_b, features, target, names, folds=folds, seed=seed)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    weights = fit_weights(features, _percentile_ranks(target))
    keys = ("calibrated",) + names
    mean = {k: float(np.nanmean([f.spearman[k] for f in fold_results])) for k in keys}
    return Calibration(name or f"calibrated-{observed}"[:60], {n: float(w) for n, w in zip(names, weights)},
                       observed, observation_revision(catalogue, observed), names, tuple(fold_results), mean,
                       len(values), int(np.unique(np.concatenate([pair_a, pair_b])).size))


def store(catalogue, calibration: Calibration) -> None:
    """Store (or replace) the calibrated metric in the catalogue and register it."""
    from sqlalchemy import select

    from library.catalogue.models import CalibratedMetric
    from library.search import metrics

    if calibration.name in metrics.names() and calibration.name not in stored_names(catalogue):
        raise ValueError(f"{calibration.name!r} is a built-in metric; choose another --name")
    report = {"mean_spearman": calibration.mean_spearman, "pairs": calibration.pairs,
              "materials": calibration.materials, "folds": len(calibration.folds),
              "fold_pairs": [[f.train_pairs, f.test_pairs] for f in calibration.folds]}
    with catalogue.transaction() as session:
        row = session.scalar(select(CalibratedMetric).where(CalibratedMetric.name == calibration.name))
        if row is None:
            row = CalibratedMetric(name=calibration.name)
            session.add(row)
        row.weights_json = json.dumps(calibration.weights)
        row.observed_source = calibration.observed_source
        row.observed_revision = calibration.observed_revision
        row.report_json = json.dumps(report)
    _register(calibration.name, calibration.weights, calibration.observed_source, calibration.observed_revision,
              stale=False)


def stored_names(catalogue) -> set[str]:
    from sqlalchemy import select

    from library.catalogue.models import CalibratedMetric

    with catalogue.reading() as session:
        return set(session.scalars(select(CalibratedMetric.name)))


def _register(name: str, weights: Mapping[str, float], source: str, revision: str, *, stale: bool):
    from library.search import metrics

    parts = ", ".join(f"{w:.2f} x P({m})" for m, w in weights.items() if w > 0)
    text = (f"calibrated on {source!r} (observations {revision}): {parts}; P the percentile over the catalogue's pairs"
            + ("; STALE: its observations changed since, calibrate it again" if stale else ""))
    return metrics.register_calibrated(name, weights, text, stale=stale)


def register_stored(catalogue) -> list[str]:
    """Register every calibrated metric stored in the catalogue, marking stale ones; returns their names."""
    from sqlalchemy import select
    from sqlalchemy.exc import OperationalError, ProgrammingError

    from library.catalogue.models import CalibratedMetric

    try:
        with catalogue.reading() as session:
            rows = [(r.name, json.loads(r.weights_json), r.observed_source, r.observed_revision)
                    for r in session.scalars(select(CalibratedMetric))]
    except (OperationalError, ProgrammingError):
        return []  # a catalogue from before calibrated metrics existed
    names = []
    for name, weights, source, revision in rows:
        try:
            current = observation_revision(catalogue, source)
        except Exception:  # noqa: BLE001 - the observation set was removed: stale
            current = None
        known = {m: w for m, w in weights.items() if m in feature_names()}
        if not any(w > 0 for w in known.values()):
            continue
        _register(name, known, source, revision, stale=current != revision)
        names.append(name)
    return names


def as_json(calibration: Calibration) -> dict:
    out = asdict(calibration)
    out["folds"] = [{"train_materials": len(f.train_materials), "test_materials": len(f.test_materials),
                     "train_pairs": f.train_pairs, "test_pairs": f.test_pairs, "spearman": f.spearman}
                    for f in calibration.folds]
    out["cross_validation"] = ("grouped by material: weights fitted on pairs among training materials, "
                               "Spearman on pairs among held-out materials only")
    return out


def scorecard_notes(catalogue, observation: str, metric_names) -> list[str]:
    """What the scorecard must say beside a calibrated metric: fitted on these very observations (its
    figure there is in-sample; the grouped cross-validated Spearman is the honest one), or stale."""
    from sqlalchemy import select
    from sqlalchemy.exc import OperationalError, ProgrammingError

    from library.catalogue.models import CalibratedMetric
    from library.search import metrics

    try:
        with catalogue.reading() as session:
            rows = [(r.name, r.observed_source, json.loads(r.report_json))
                    for r in session.scalars(select(CalibratedMetric)) if r.name in set(metric_names)]
    except (OperationalError, ProgrammingError):
        return []
    notes = []
    for name, source, report in rows:
        cross = report.get("mean_spearman", {}).get("calibrated")
        if source == observation:
            notes.append(f"{name} was calibrated on these observations, so its figures here are in-sample; its "
                         f"cross-validated Spearman (folds grouped by material) is {cross:.3f}")
        else:
            notes.append(f"{name} was calibrated on {source!r} (cross-validated Spearman {cross:.3f} there)")
        if getattr(metrics.get(name), "stale", False):
            notes.append(f"{name} is stale: its observations changed since it was calibrated")
    return notes
