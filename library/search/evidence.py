"""The scorecard over a catalogue: which materials are scored, every metric's similarity matrix over
them, and the observed similarity they are scored against (the statistics are in scorecard.py)."""

from __future__ import annotations

import numpy as np

from library.search.catalogue_index import CatalogueIndex, load_index
from library.search.errors import SearchError
from library.search.index import SimilarityIndex
from library.search.observed import DESCRIPTORS, observed_similarity

SCORECARD_MAX_MATERIALS = 3000


def metric_matrices(index: SimilarityIndex, rows: np.ndarray, *, weight: float = 0.5) -> dict[str, np.ndarray]:
    """Full similarity matrices (0-1) of the given index rows under every metric the index holds."""
    return {name: index.similarity_matrix(name, rows, weight=weight) for name in index.metrics()}


def run_scorecard(catalogue, *, observation: str = DESCRIPTORS, k: int = 5, permutations: int = 999,
                  resamples: int = 1000, weight: float = 0.5, seed: int = 0, vibration_engine: str | None = None,
                  cat_index: CatalogueIndex | None = None, control_size: bool = False,
                  include_demo: bool = False):
    """How well each metric predicts observed similarity, side by side (a scorecard.Scorecard: scores,
    paired comparisons, summary), the label of the observed similarity and notes.

    The partial Mantel test controls for the structure metric and, with ``control_size``, also for
    molecular size (closeness of molecular weight, g/mol: similarity -|MW_a - MW_b|). Demo entries
    (invented odor notes) are not observations and are left out unless ``include_demo``."""
    from library.catalogue import curation, observations
    from library.search import scorecard  # on use: it imports scipy.stats (about 0.4 s at start-up)

    if cat_index is None:
        cat_index = load_index(catalogue, **({"vibration_engine": vibration_engine} if vibration_engine else {}))
    index = cat_index.index
    notes = []
    descriptor_sets = observed = None
    if observation == DESCRIPTORS:
        ids = [i for i in index.ids_.tolist() if cat_index.materials[i].odors
               and (include_demo or not cat_index.materials[i].demo)]
        demo = sum(1 for i in index.ids_.tolist() if cat_index.materials[i].demo)
        if demo and not include_demo:
            notes.append(f"{demo} demo entr{'y' if demo == 1 else 'ies'} (invented odor notes) left out; "
                         "include them on request")
    else:
        with catalogue.reading() as session:
            try:
                observed_ids, _, _ = observations.observation_profiles(session, observation)
            except curation.CurationError as exc:
                raise SearchError(str(exc), remedy=exc.remedy) from None
        indexed = set(index.ids_.tolist())
        ids = [i for i in observed_ids if i in indexed]
        if len(ids) < len(observed_ids):
            notes.append(f"{len(observed_ids) - len(ids)} observed material(s) lack computed records")
    if len(ids) > SCORECARD_MAX_MATERIALS:
        rng = np.random.default_rng(seed)
        ids = sorted(rng.choice(ids, SCORECARD_MAX_MATERIALS, replace=False).tolist())
        notes.append(f"a seeded sample of {SCORECARD_MAX_MATERIALS} materials was scored")
    if len(ids) < 4:
        raise SearchError(f"only {len(ids)} material(s) have both observations and computed records; "
                          "the scorecard needs at least 4")
    rows = np.array([index.row_of(i) for i in ids])
    matrices = metric_matrices(index, rows, weight=weight)
    if observation == DESCRIPTORS:
        descriptor_sets = [set(cat_index.materials[i].odors) for i in ids]
        label = "odor descriptor Jaccard" + (" (demo notes included)" if include_demo else "")
    else:
        correlate, label = observed_similarity(catalogue, observation, include_demo=include_demo)
        observed = np.eye(len(ids))
        for x in range(len(ids)):
            for y in range(x + 1, len(ids)):
                value = correlate(ids[x], ids[y])
                observed[x, y] = observed[y, x] = 0.0 if value is None else value
    try:
        weights_g_mol = np.array([cat_index.materials[i].molecular_weight for i in ids], dtype=np.float64)
        extra = {"molecular size": -np.abs(weights_g_mol[:, None] - weights_g_mol[None, :])} if control_size else None
        report = scorecard.score_report(matrices, extra_controls=extra, observed=observed, descriptor_sets=descriptor_sets,
                                         permutations=permutations, resamples=resamples, k=k, seed=seed)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    from library.search.calibration import scorecard_notes

    notes += scorecard_notes(catalogue, observation, matrices)
    return report, label, notes
