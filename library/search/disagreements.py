"""Pairs of materials on which the shape and vibration metrics disagree.

Two directions:

* ``"shape-not-vibration"``: shape-alike but vibration-unalike (the isotopologue
  case: same shape, shifted vibrational modes);
* ``"vibration-not-shape"``: vibration-alike but shape-unalike (the mirror-image
  case: identical spectra, different chiral moments).

The scan is catalogue-wide but never loops over all pairs: it takes every
material's top-``k`` neighbor list under shape and under vibration
(:meth:`SimilarityIndex.neighbors`), scores each listed pair exactly under the other
metric, and keeps pairs past the thresholds. A pair is scored by the gap between
its two similarities (0-1, larger = stronger disagreement).

Optionally an observed similarity per pair (e.g. the Jaccard index of odor
descriptor sets, or the correlation of panel profiles) says which metric the
observation sides with.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from library.search.index import SearchFilter, SimilarityIndex

SHAPE_NOT_VIBRATION = "shape-not-vibration"
VIBRATION_NOT_SHAPE = "vibration-not-shape"
DIRECTIONS = (SHAPE_NOT_VIBRATION, VIBRATION_NOT_SHAPE)


@dataclass(frozen=True)
class Disagreement:
    """One pair on which shape and vibration disagree.

    ``shape``, ``vibration`` (and ``structure`` when the index has structure bits)
    are exact similarities on 0-1. ``score = |shape - vibration|``.
    ``shape_rank`` / ``vibration_rank``: the best rank either material gives the
    other in its neighbor list under that metric (1 = nearest), None if neither
    list holds it. ``observed`` is the observed similarity when given;
    ``observed_alike`` is True / False / None (between thresholds or unknown) and
    ``sides_with`` is "shape", "vibration" or None.
    """

    id_a: object
    id_b: object
    direction: str
    score: float
    shape: float
    vibration: float
    structure: float | None
    shape_rank: int | None
    vibration_rank: int | None
    observed: float | None = None
    observed_alike: bool | None = None
    sides_with: str | None = None
    handedness: float | None = None  # the handedness metric, when it was scored for the pair


def jaccard(a, b) -> float:
    """Jaccard index of two descriptor sets (0 when both are empty)."""
    a, b = set(a), set(b)
    union = len(a | b)
    return len(a & b) / union if union else 0.0


def _pair_ranks(lists) -> dict[tuple[int, int], int]:
    ranks: dict[tuple[int, int], int] = {}
    for row, neighbors in zip(lists.rows.tolist(), lists.neighbor_rows.tolist()):
        for position, other in enumerate(neighbors, start=1):
            if other < 0:
                continue
            key = (row, other) if row < other else (other, row)
            if position < ranks.get(key, 1 << 30):
                ranks[key] = position
    return ranks


# A threshold is a similarity in 0-1 or a percentile "pNN" of the metric over catalogue pairs.
THRESHOLD_METRICS = {"min_shape": "shape", "max_shape": "shape",
                     "min_vibration": "vibration", "max_vibration": "vibration"}
PERCENTILE_PAIRS = 20_000  # random distinct pairs the percentiles are read from (seeded)


def parse_threshold(value, label: str) -> float | str:
    """A similarity in 0-1 (float) or a percentile such as 'p95' (kept as text until resolved)."""
    text = str(value).strip().lower()
    if text.startswith("p"):
        try:
            percent = float(text[1:])
        except ValueError:
            percent = float("nan")
        if not 0.0 <= percent <= 100.0:
            raise ValueError(f"{label} {str(value)[:20]!r} is not a percentile; write p followed by 0-100, e.g. p95")
        return f"p{percent:g}"
    try:
        number = float(text)
    except ValueError:
        number = float("nan")
    if not 0.0 <= number <= 1.0:
        raise ValueError(f"{label} {str(value)[:20]!r} is neither a similarity between 0 and 1 (e.g. 0.9) "
                         "nor a percentile of the catalogue's pairs (e.g. p95)")
    return number


VIBRATION_SIDE_METRICS = ("vibration", "vibration-ir", "vibration-window", "tunnelling")


def check_vibration_metric(name: str) -> str:
    """The metric that speaks for the vibration hypothesis in a disagreement list, checked."""
    if name not in VIBRATION_SIDE_METRICS:
        raise ValueError(f"the vibration side must be one of {', '.join(VIBRATION_SIDE_METRICS)}, got {name!r}")
    return name


def resolve_thresholds(index: SimilarityIndex, thresholds: Mapping[str, float | str], *,
                       pairs: int = PERCENTILE_PAIRS, seed: int = 0,
                       vibration_metric: str = "vibration") -> dict[str, tuple[float, str | None]]:
    """{name: (similarity, the percentile it came from or None)} for thresholds named as in
    :data:`THRESHOLD_METRICS`. Percentiles are read from the metric's similarities over `pairs` random
    distinct catalogue pairs (seeded: the same catalogue gives the same values); the vibration
    thresholds from `vibration_metric`'s."""
    side = {"shape": "shape", "vibration": check_vibration_metric(vibration_metric)}
    out: dict[str, tuple[float, str | None]] = {}
    wanted = {THRESHOLD_METRICS[n] for n, v in thresholds.items() if isinstance(v, str)}
    scores: dict[str, np.ndarray] = {}
    if wanted:
        n = len(index.ids_)
        if n < 2:
            raise ValueError("percentile thresholds need at least two indexed materials")
        rng = np.random.default_rng(seed)
        a = rng.integers(0, n, pairs)
        b = (a + rng.integers(1, n, pairs)) % n  # never a material with itself
        scores = index.pair_scores(a, b)
    for name, value in thresholds.items():
        if isinstance(value, str):
            metric = side[THRESHOLD_METRICS[name]]
            out[name] = (float(np.percentile(scores[metric].astype(np.float64), float(value[1:]))), value)
        else:
            out[name] = (float(value), None)
    return out


def find_disagreements(
    index: SimilarityIndex,
    *,
    k: int = 20,
    min_shape: float = 0.9,
    max_vibration: float = 0.6,
    min_vibration: float = 0.9,
    max_shape: float = 0.6,
    direction: str = "both",
    observed: Mapping | Callable | None = None,
    observed_alike: float = 0.5,
    observed_unalike: float = 0.2,
    filters: SearchFilter | None = None,
    limit: int | None = None,
    shape_neighbors=None,
    vibration_neighbors=None,
    vibration_metric: str = "vibration",
) -> list[Disagreement]:
    """Disagreeing pairs, strongest first.

    ``"shape-not-vibration"`` pairs have shape >= ``min_shape`` and vibration <=
    ``max_vibration``; ``"vibration-not-shape"`` pairs have vibration >=
    ``min_vibration`` and shape <= ``max_shape`` (all similarities 0-1).
    ``direction`` is one of :data:`DIRECTIONS` or ``"both"``. ``k`` is the length of
    each material's neighbor lists (a pair must appear in one of them).

    ``observed``: a mapping ``{(id_a, id_b): similarity}`` (either order) or a callable
    ``(id_a, id_b) -> similarity or None``. A pair with observed similarity >=
    ``observed_alike`` counts as observed alike, <= ``observed_unalike`` as unalike.
    Precomputed :class:`NeighborLists` may be passed to skip the scans. ``vibration_metric`` (one of
    :data:`VIBRATION_SIDE_METRICS`) scores the vibration side: the EVA fingerprint by default, or
    the tunnelling receptor model.
    """
    check_vibration_metric(vibration_metric)
    if direction != "both" and direction not in DIRECTIONS:
        raise ValueError(f"direction must be 'both' or one of {DIRECTIONS}, got {direction!r}")
    for name, value in (
        ("min_shape", min_shape),
        ("max_vibration", max_vibration),
        ("min_vibration", min_vibration),
        ("max_shape", max_shape),
    ):
        if not 0.0 <= float(value) <= 1.0:
            raise ValueError(f"{name} must be a similarity in 0-1, got {value!r}")
    if observed is not None and not observed_unalike <= observed_alike:
        raise ValueError(
            f"observed_unalike ({observed_unalike}) must not exceed observed_alike ({observed_alike})"
        )
    if observed is not None and not (callable(observed) or isinstance(observed, Mapping)):
        raise ValueError("observed must be a mapping {(id_a, id_b): similarity} or a callable (id_a, id_b)")
    wanted = DIRECTIONS if direction == "both" else (direction,)

    lists = {}
    if SHAPE_NOT_VIBRATION in wanted:
        lists["shape"] = shape_neighbors if shape_neighbors is not None else index.neighbors("shape", k, filters=filters)
    if VIBRATION_NOT_SHAPE in wanted:
        lists["vibration"] = (
            vibration_neighbors if vibration_neighbors is not None else index.neighbors(vibration_metric, k, filters=filters)
        )
    ranks = {metric: _pair_ranks(found) for metric, found in lists.items()}
    pairs = sorted(set().union(*[set(r) for r in ranks.values()])) if ranks else []
    if not pairs:
        return []
    rows_a = np.array([p[0] for p in pairs], np.int64)
    rows_b = np.array([p[1] for p in pairs], np.int64)
    scores = index.pair_scores(rows_a, rows_b)
    shape, vibration = scores["shape"].astype(float), scores[vibration_metric].astype(float)
    structure = scores.get("structure")

    keep = np.zeros(len(pairs), bool)
    labels = np.empty(len(pairs), object)
    if SHAPE_NOT_VIBRATION in wanted:
        hit = (shape >= min_shape) & (vibration <= max_vibration)
        labels[hit] = SHAPE_NOT_VIBRATION
        keep |= hit
    if VIBRATION_NOT_SHAPE in wanted:
        hit = (vibration >= min_vibration) & (shape <= max_shape) & ~keep
        labels[hit] = VIBRATION_NOT_SHAPE
        keep |= hit

    found = []
    ids = index.ids_
    for i in np.flatnonzero(keep):
        pair = pairs[i]
        id_a, id_b = ids[pair[0]].item(), ids[pair[1]].item()
        value = _observed(observed, id_a, id_b)
        alike, sides = sides_with(str(labels[i]), value, observed_alike=observed_alike,
                                  observed_unalike=observed_unalike)
        found.append(
            Disagreement(
                id_a=id_a,
                id_b=id_b,
                direction=str(labels[i]),
                score=float(abs(shape[i] - vibration[i])),
                shape=float(shape[i]),
                vibration=float(vibration[i]),
                structure=None if structure is None else float(structure[i]),
                shape_rank=ranks.get("shape", {}).get(pair),
                vibration_rank=ranks.get("vibration", {}).get(pair),
                observed=value,
                observed_alike=alike,
                sides_with=sides,
            )
        )
    found.sort(key=lambda d: (-d.score, str(d.id_a), str(d.id_b)))
    return found[:limit] if limit is not None else found


def sides_with(direction: str, observed: float | None, *, observed_alike: float = 0.5,
               observed_unalike: float = 0.2) -> tuple[bool | None, str | None]:
    """(observed alike?, the metric the observation sides with) for a pair disagreeing in `direction`.

    A pair observed alike (>= `observed_alike`) sides with the metric that calls it alike; one
    observed unalike (<= `observed_unalike`) with the metric that tells it apart; in between, or
    unobserved, with neither.
    """
    if observed is None:
        return None, None
    alike = True if observed >= observed_alike else False if observed <= observed_unalike else None
    if alike is None:
        return None, None
    says_alike = "shape" if direction == SHAPE_NOT_VIBRATION else "vibration"
    says_unalike = "vibration" if says_alike == "shape" else "shape"
    return alike, says_alike if alike else says_unalike


def default_flag_kind(direction: str, sides_with_metric: str | None = None) -> str:
    """The pair-flag kind a person most likely means for a pair disagreeing in `direction`.

    A shape-alike, vibration-unalike pair is "shape-alike smell-different" unless the
    observation sides with shape (the two smell alike): then "vibration-unalike
    smell-alike"; the mirror case likewise. The names are those of
    library.catalogue.observations.FLAG_KINDS."""
    if direction == SHAPE_NOT_VIBRATION:
        return "vibration-unalike smell-alike" if sides_with_metric == "shape" else "shape-alike smell-different"
    if direction == VIBRATION_NOT_SHAPE:
        return "shape-unalike smell-alike" if sides_with_metric == "vibration" else "vibration-alike smell-different"
    raise ValueError(f"unknown direction {direction!r}; use one of {', '.join(DIRECTIONS)}")


def _observed(observed, id_a, id_b) -> float | None:
    if observed is None:
        return None
    if callable(observed) and not isinstance(observed, Mapping):
        value = observed(id_a, id_b)
    else:
        value = observed.get((id_a, id_b), observed.get((id_b, id_a)))
    if value is None:
        return None
    value = float(value)
    if not np.isfinite(value):
        raise ValueError(f"observed similarity for ({id_a!r}, {id_b!r}) is not finite: {value!r}")
    return value


@dataclass(frozen=True)
class SidesTally:
    """How many listed pairs side with each metric, and what a null keeping the observations expects.

    Null: the observed similarities of the listed pairs are shuffled over those pairs (so their
    distribution, and the base rate of pairs observed at about 0, is kept); ``expected_*`` is the exact
    mean under that shuffle and ``p_*`` the one-sided permutation p of a count at least as large.
    """

    observed_pairs: int
    shape: int
    vibration: int
    neither: int
    expected_shape: float
    expected_vibration: float
    p_shape: float
    p_vibration: float
    permutations: int


def sides_with_tally(pairs, *, observed_alike: float = 0.5, observed_unalike: float = 0.2,
                     permutations: int = 999, seed: int = 0) -> SidesTally | None:
    """Tally of ``sides_with`` over the pairs (Disagreement) that carry an observation; None if none do."""
    listed = [p for p in pairs if p.observed is not None]
    if not listed:
        return None
    if int(permutations) < 1:
        raise ValueError(f"permutations must be a positive integer, got {permutations!r}")
    says_shape = np.array([p.direction == SHAPE_NOT_VIBRATION for p in listed])
    values = np.array([p.observed for p in listed], dtype=np.float64)

    def counts(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        alike, unalike = v >= observed_alike, v <= observed_unalike
        shape = (says_shape & alike) | (~says_shape & unalike)
        vibration = (~says_shape & alike) | (says_shape & unalike)
        return shape.sum(axis=-1), vibration.sum(axis=-1)

    shape, vibration = (int(c) for c in counts(values))
    total = len(listed)
    alike_share = np.mean(values >= observed_alike)
    unalike_share = np.mean(values <= observed_unalike)
    n_shape_dir = int(says_shape.sum())
    expected_shape = alike_share * n_shape_dir + unalike_share * (total - n_shape_dir)
    expected_vibration = alike_share * (total - n_shape_dir) + unalike_share * n_shape_dir
    rng = np.random.default_rng(seed)
    shuffled = np.array([rng.permutation(values) for _ in range(int(permutations))])
    null_shape, null_vibration = counts(shuffled)
    return SidesTally(
        observed_pairs=total, shape=shape, vibration=vibration, neither=total - shape - vibration,
        expected_shape=float(expected_shape), expected_vibration=float(expected_vibration),
        p_shape=float((1 + (null_shape >= shape).sum()) / (1 + int(permutations))),
        p_vibration=float((1 + (null_vibration >= vibration).sum()) / (1 + int(permutations))),
        permutations=int(permutations))


def tally_lines(tally: SidesTally | None) -> list[str]:
    """Plain sentences for the tally (empty when no listed pair carries an observation)."""
    if tally is None:
        return []
    return [f"Of {tally.observed_pairs} listed pair(s) with an observation, {tally.shape} side with shape and "
            f"{tally.vibration} with vibration ({tally.neither} with neither).",
            f"Shuffling the observations over these pairs keeps their base rate and expects "
            f"{tally.expected_shape:.1f} for shape and {tally.expected_vibration:.1f} for vibration; one-sided "
            f"permutation p {tally.p_shape:.4f} (shape) and {tally.p_vibration:.4f} (vibration), "
            f"{tally.permutations} shuffles."]
