"""The disagreement list a chemist reads: telling pairs first, then pairs past the thresholds, with the
observed similarity, the metric it sides with, and the pair flags the catalogue holds.

:mod:`library.search.disagreements` finds pairs in an index; this module decides which pairs are
telling and attaches what the catalogue knows about them.
"""

from __future__ import annotations

from dataclasses import dataclass

from library.search import disagreements
from library.search.catalogue_index import CatalogueIndex, MaterialInfo, load_index
from library.search.errors import SearchError
from library.search.index import SimilarityIndex
from library.search.observed import DESCRIPTORS, observed_similarity
from library.search.substitutes import build_filter

INDISTINGUISHABLE = 0.999  # a similarity this high means the metric cannot tell the two apart
RESOLVED = 0.995           # ... while the other metric, at or below this, does


@dataclass
class DisagreementRow:
    pair: disagreements.Disagreement
    a: MaterialInfo
    b: MaterialInfo
    flags: list[str]
    basis: str  # 'indistinguishable by shape' | 'indistinguishable by vibration' | 'thresholds'
    # True when the gap is smaller than the conformer noise of the two scores (see
    # library.search.uncertainty); None when not assessed (rows past `noise_rows`)
    within_noise: bool | None = None


def telling_pairs(index: SimilarityIndex, lists, observed, *, observed_alike: float,
                  observed_unalike: float, handedness_of=None,
                  vibration_metric: str = "vibration") -> list[tuple[disagreements.Disagreement, str]]:
    """Pairs one metric cannot tell apart while the other can: isotopologues (same shape, other
    vibrations) and mirror-image pairs (same vibrations, other handedness).

    `handedness_of(pairs)` scores the handedness metric (on demand, from stored conformers) of the
    pairs with indistinguishable spectra: the shape vector's chiral part is too small a share of it
    to tell a mirror-image pair apart, the handedness score is built to."""
    candidates = set()
    for found in lists:
        for row, neighbors in zip(found.rows.tolist(), found.neighbor_rows.tolist()):
            candidates |= {(min(row, o), max(row, o)) for o in neighbors if o >= 0}
    candidates = sorted(candidates)
    if not candidates:
        return []
    scores = index.pair_scores([a for a, _ in candidates], [b for _, b in candidates])
    alike_spectra = [i for i in range(len(candidates)) if float(scores[vibration_metric][i]) >= INDISTINGUISHABLE]
    handedness = (handedness_of([(int(index.ids_[candidates[i][0]]), int(index.ids_[candidates[i][1]]))
                                 for i in alike_spectra]) if handedness_of and alike_spectra else {})
    out = []
    for i, (row_a, row_b) in enumerate(candidates):
        shape, vibration = float(scores["shape"][i]), float(scores[vibration_metric][i])
        id_a, id_b = int(index.ids_[row_a]), int(index.ids_[row_b])
        hand = handedness.get((id_a, id_b))
        if shape >= INDISTINGUISHABLE and vibration <= RESOLVED:
            direction, basis, gap = disagreements.SHAPE_NOT_VIBRATION, "indistinguishable by shape", shape - vibration
        elif vibration >= INDISTINGUISHABLE and hand is not None and hand < INDISTINGUISHABLE:
            direction, basis, gap = (disagreements.VIBRATION_NOT_SHAPE, "indistinguishable by vibration, "
                                     "told apart by handedness", vibration - hand)
        elif vibration >= INDISTINGUISHABLE and hand is None and shape <= RESOLVED:
            direction, basis, gap = disagreements.VIBRATION_NOT_SHAPE, "indistinguishable by vibration", vibration - shape
        else:
            continue
        value = observed(id_a, id_b) if observed else None
        alike, sides = disagreements.sides_with(direction, value, observed_alike=observed_alike,
                                                observed_unalike=observed_unalike)
        structure = float(scores["structure"][i]) if "structure" in scores else None
        out.append((disagreements.Disagreement(
            id_a=id_a, id_b=id_b, direction=direction, score=abs(gap), shape=shape,
            vibration=vibration, structure=structure, shape_rank=None, vibration_rank=None, observed=value,
            observed_alike=alike, sides_with=sides, handedness=hand), basis))
    return out


def handedness_scorer(catalogue, cat_index: CatalogueIndex):
    """A callback [(id_a, id_b)] -> {(id_a, id_b): handedness} from the stored conformers."""
    from library.search import metrics as metric_registry
    from library.search.substitutes import stored_ensembles

    metric = metric_registry.get("handedness")

    def score(pairs):
        ensembles = stored_ensembles(catalogue, cat_index, {i for pair in pairs for i in pair})
        return {(a, b): metric.pair_similarity(ensembles[a], ensembles[b])
                for a, b in pairs if a in ensembles and b in ensembles}

    return score


def check_vibration_side(cat_index: CatalogueIndex, vibration_metric: str) -> str:
    """The vibration side's metric, checked against the list and this index (SearchError otherwise)."""
    try:
        disagreements.check_vibration_metric(vibration_metric)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    if vibration_metric not in cat_index.index.metrics():
        raise SearchError(f"the {vibration_metric} metric is not in this catalogue's index: some materials lack "
                          "its records; compute them first")
    return vibration_metric


def resolved_thresholds(cat_index: CatalogueIndex, *, vibration_metric: str = "vibration",
                        **thresholds) -> dict[str, tuple[float, str | None]]:
    """The four thresholds as similarities, each with the percentile it was asked as (see
    disagreements.resolve_thresholds); SearchError for a value that is neither."""
    check_vibration_side(cat_index, vibration_metric)
    try:
        parsed = {name: disagreements.parse_threshold(value, name.replace("_", " "))
                  for name, value in thresholds.items()}
        return disagreements.resolve_thresholds(cat_index.index, parsed, vibration_metric=vibration_metric)
    except ValueError as exc:
        raise SearchError(str(exc)) from None


def describe_thresholds(resolved: dict[str, tuple[float, str | None]], *, vibration_metric: str = "vibration") -> str:
    """One line: 'shape >= 0.912 (p90), vibration <= 0.600, ...' for the thresholds actually used
    (the vibration side named by its metric)."""
    signs = {"min": ">=", "max": "<="}
    side = {"shape": "shape", "vibration": vibration_metric}
    return ", ".join(f"{side[name.split('_', 1)[1]]} {signs[name.split('_', 1)[0]]} {value:.3f}"
                     + (f" ({asked} of catalogue pairs)" if asked else "")
                     for name, (value, asked) in resolved.items())


def find_disagreement_rows(catalogue, *, k: int = 20, min_shape: float | str = 0.9,
                           max_vibration: float | str = 0.6, min_vibration: float | str = 0.9,
                           max_shape: float | str = 0.6,
                           direction: str = "both", observation: str | None = DESCRIPTORS,
                           observed_alike: float = 0.5, observed_unalike: float = 0.2,
                           include_retired: bool = False, vibration_engine: str | None = None,
                           cat_index: CatalogueIndex | None = None,
                           noise_rows: int = 20,
                           vibration_metric: str = "vibration") -> tuple[list[DisagreementRow], str | None]:
    """Catalogue-wide pairs where shape and vibration disagree, with pair flags.

    First the telling pairs, which one metric cannot tell apart (similarity >= 0.999) while
    the other can (<= 0.995; for mirror images the handedness metric, below 0.999), by gap; then
    the pairs past the user's thresholds, by gap. The first `noise_rows` rows say whether their gap is
    within conformer noise. A threshold may be a percentile of the catalogue's pairs ('p95').
    `vibration_metric` (see disagreements.VIBRATION_SIDE_METRICS) scores the vibration side.
    """
    from library.catalogue import observations

    if cat_index is None:
        cat_index = load_index(catalogue, **({"vibration_engine": vibration_engine} if vibration_engine else {}))
    index = cat_index.index
    resolved = resolved_thresholds(cat_index, min_shape=min_shape, max_vibration=max_vibration,
                                   min_vibration=min_vibration, max_shape=max_shape,
                                   vibration_metric=vibration_metric)
    min_shape, max_vibration, min_vibration, max_shape = (
        resolved[name][0] for name in ("min_shape", "max_vibration", "min_vibration", "max_shape"))
    observed, label = observed_similarity(catalogue, observation)
    filters = build_filter(include_retired=include_retired, include_restricted=True)
    try:
        lists = {side: index.neighbors(metric, k, filters=filters)
                 for side, metric in (("shape", "shape"), ("vibration", vibration_metric))}
        found = disagreements.find_disagreements(
            index, k=k, min_shape=min_shape, max_vibration=max_vibration, min_vibration=min_vibration,
            max_shape=max_shape, direction=direction, observed=observed, observed_alike=observed_alike,
            observed_unalike=observed_unalike, filters=filters, shape_neighbors=lists["shape"],
            vibration_neighbors=lists["vibration"], vibration_metric=vibration_metric)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    telling = telling_pairs(index, lists.values(), observed, observed_alike=observed_alike,
                            observed_unalike=observed_unalike,
                            handedness_of=handedness_scorer(catalogue, cat_index), vibration_metric=vibration_metric)
    telling = [(p, basis) for p, basis in telling if direction in ("both", p.direction)]
    telling_ids = {(min(p.id_a, p.id_b), max(p.id_a, p.id_b)) for p, _ in telling}
    ordered = sorted(telling, key=lambda item: -item[0].score)
    ordered += [(p, "thresholds") for p in found if (min(p.id_a, p.id_b), max(p.id_a, p.id_b)) not in telling_ids]
    with catalogue.reading() as session:
        flags: dict[tuple[int, int], list[str]] = {}
        for flag in observations.list_flags(session):
            flags.setdefault((flag.material_a_id, flag.material_b_id), []).append(flag.kind)
    rows = [DisagreementRow(pair, cat_index.materials[pair.id_a], cat_index.materials[pair.id_b],
                            flags.get((min(pair.id_a, pair.id_b), max(pair.id_a, pair.id_b)), []), basis)
            for pair, basis in ordered]
    _assess_noise(catalogue, cat_index, rows[:noise_rows], vibration_metric)
    return rows, label


NOISE_RESAMPLES = 24


def _assess_noise(catalogue, cat_index: CatalogueIndex, rows: list[DisagreementRow],
                  vibration_metric: str = "vibration") -> None:
    """Set each row's `within_noise` from the conformer-resampling spreads of its two scores (left
    unknown when the vibration side's metric is not resampled, as for tunnelling)."""
    from library.search import uncertainty

    if not rows:
        return
    resampled = uncertainty.load_resampled(catalogue, {i for r in rows for i in (r.pair.id_a, r.pair.id_b)},
                                           cat_index.vibration_engine, resamples=NOISE_RESAMPLES)
    for row in rows:
        a, b = resampled.get(row.pair.id_a), resampled.get(row.pair.id_b)
        if a is None or b is None:
            continue
        spreads = uncertainty.pair_spreads(a, b)
        if row.pair.handedness is not None and row.pair.direction == disagreements.VIBRATION_NOT_SHAPE:
            spreads["shape"] = 0.0  # the handedness gap: overlays are not resampled, judge by vibration
        row.within_noise = uncertainty.within_noise(row.pair.score, spreads, ("shape", vibration_metric))
