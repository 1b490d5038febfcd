"""How well each similarity metric agrees with observed similarity.

Given an observed pairwise similarity matrix over n materials (or their odor
descriptor sets, turned into Jaccard indices) and one similarity matrix per metric
over the same materials in the same order, report per metric:

* Spearman rank correlation over the n(n-1)/2 pairs of the upper triangle;
* a one-sided Mantel permutation p-value for positive association: material
  labels of the metric matrix are permuted (seeded) and
  ``p = (1 + #{r_perm >= r_obs}) / (1 + permutations)``
  (Mantel test: Cancer Res. 27, 209 (1967));
* a percentile bootstrap confidence interval of the Spearman correlation,
  resampling materials with replacement (pairs of a material with its own copy
  are dropped);
* precision at k: for each material with at least one relevant partner, the
  share of its k most similar materials under the metric that are relevant
  (share at least one odor descriptor, or observed similarity above a
  threshold), averaged over those materials.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import rankdata


@dataclass(frozen=True)
class MetricScore:
    """Agreement of one metric with the observations (correlations dimensionless, -1..1)."""

    metric: str
    materials: int
    pairs: int
    spearman: float
    mantel_p: float
    permutations: int
    ci_low: float
    ci_high: float
    confidence: float
    precision_at_k: float | None
    k: int


def jaccard_matrix(descriptor_sets: Sequence) -> np.ndarray:
    """n x n Jaccard indices of odor descriptor sets (0 for two empty sets; 1 on the diagonal)."""
    sets = [frozenset(s) for s in descriptor_sets]
    vocabulary = {word: i for i, word in enumerate(sorted({w for s in sets for w in s}))}
    member = np.zeros((len(sets), max(1, len(vocabulary))), np.float64)
    for i, words in enumerate(sets):
        member[i, [vocabulary[w] for w in words]] = 1.0
    inter = member @ member.T
    sizes = member.sum(axis=1)
    union = sizes[:, None] + sizes[None, :] - inter
    out = np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)
    np.fill_diagonal(out, 1.0)
    return out


def _square(matrix, name: str, n: int | None = None) -> np.ndarray:
    array = np.asarray(matrix, dtype=np.float64)
    if array.ndim != 2 or array.shape[0] != array.shape[1]:
        raise ValueError(f"{name} must be a square similarity matrix, got shape {array.shape}")
    if n is not None and array.shape[0] != n:
        raise ValueError(f"{name} covers {array.shape[0]} materials but the observations cover {n}")
    if array.shape[0] < 3:
        raise ValueError(f"{name} needs at least 3 materials, got {array.shape[0]}")
    if not np.isfinite(array).all():
        raise ValueError(f"{name} contains NaN or infinite values")
    if not np.allclose(array, array.T, atol=1e-6):
        raise ValueError(f"{name} must be symmetric")
    return array


def _rank_matrix(matrix: np.ndarray) -> np.ndarray:
    """Symmetric matrix holding the centered ranks of the upper-triangle values."""
    n = matrix.shape[0]
    upper = np.triu_indices(n, 1)
    ranks = rankdata(matrix[upper])
    ranks -= ranks.mean()
    out = np.zeros_like(matrix)
    out[upper] = ranks
    return out + out.T


def mantel_test(observed, metric, *, permutations: int = 999, seed: int = 0) -> tuple[float, float]:
    """(Spearman r over the upper triangle, one-sided Mantel permutation p-value)."""
    a = _square(observed, "observed")
    b = _square(metric, "metric", a.shape[0])
    if int(permutations) < 1:
        raise ValueError(f"permutations must be a positive integer, got {permutations!r}")
    n = a.shape[0]
    upper = np.triu_indices(n, 1)
    ra = _rank_matrix(a)
    rb = _rank_matrix(b)
    x = ra[upper]
    norm = np.sqrt((x @ x) * (rb[upper] @ rb[upper]))
    if norm == 0:
        return float("nan"), float("nan")
    r = float(x @ rb[upper] / norm)
    rng = np.random.default_rng(seed)
    count = 0
    for _ in range(int(permutations)):
        order = rng.permutation(n)
        # permuting labels only moves ranks around, so centering and norm are unchanged
        value = x @ rb[order][:, order][upper] / norm
        count += value >= r - 1e-12
    return r, (count + 1) / (int(permutations) + 1)


def bootstrap_intervals(
    observed, metrics: Sequence, *, resamples: int = 1000, confidence: float = 0.95, seed: int = 0
) -> list[tuple[float, float]]:
    """Percentile bootstrap intervals of the pairwise Spearman r of each metric, resampling materials.

    All metrics share the same resamples (and the observed ranks of each resample are
    computed once), so their intervals are comparable and the work is not repeated.
    """
    a = _square(observed, "observed")
    matrices = [_square(m, "metric", a.shape[0]) for m in metrics]
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence!r}")
    n = a.shape[0]
    rng = np.random.default_rng(seed)
    i, j = np.triu_indices(n, 1)
    values: list[list[float]] = [[] for _ in matrices]
    for _ in range(int(resamples)):
        pick = rng.integers(0, n, size=n)
        rows, cols = pick[i], pick[j]
        distinct = rows != cols
        rows, cols = rows[distinct], cols[distinct]
        ra = rankdata(a[rows, cols])
        ra -= ra.mean()
        norm_a = ra @ ra
        for found, matrix in zip(values, matrices):
            rb = rankdata(matrix[rows, cols])
            rb -= rb.mean()
            norm = np.sqrt(norm_a * (rb @ rb))
            if norm > 0:
                found.append(float(ra @ rb / norm))
    tail = (1 - confidence) / 2 * 100
    out = []
    for found in values:
        if not found:
            out.append((float("nan"), float("nan")))
        else:
            low, high = np.percentile(found, [tail, 100 - tail])
            out.append((float(low), float(high)))
    return out


def bootstrap_interval(
    observed, metric, *, resamples: int = 1000, confidence: float = 0.95, seed: int = 0
) -> tuple[float, float]:
    """Percentile bootstrap interval of the pairwise Spearman r, resampling materials."""
    return bootstrap_intervals(observed, [metric], resamples=resamples, confidence=confidence, seed=seed)[0]


def precision_at_k(metric, relevant, k: int = 5) -> float:
    """Mean share of relevant materials among each material's k most similar others.

    ``relevant`` is a boolean n x n matrix; materials without any relevant partner
    are left out of the mean. Ties in similarity are broken by lower index.
    """
    s = np.asarray(metric, dtype=np.float64).copy()
    relevant = np.asarray(relevant, dtype=bool)
    n = s.shape[0]
    if relevant.shape != s.shape:
        raise ValueError(f"relevant must be {s.shape}, got {relevant.shape}")
    if not 1 <= int(k) < n:
        raise ValueError(f"k must be between 1 and {n - 1}, got {k!r}")
    np.fill_diagonal(s, -np.inf)
    shares = []
    for row in range(n):
        partners = relevant[row].copy()
        partners[row] = False
        if not partners.any():
            continue
        order = np.lexsort((np.arange(n), -s[row]))[: int(k)]
        shares.append(partners[order].mean())
    return float(np.mean(shares)) if shares else float("nan")


def score_metrics(
    metrics: Mapping[str, np.ndarray],
    *,
    observed=None,
    descriptor_sets: Sequence | None = None,
    permutations: int = 999,
    resamples: int = 1000,
    confidence: float = 0.95,
    k: int = 5,
    relevance_threshold: float = 0.0,
    seed: int = 0,
) -> list[MetricScore]:
    """One :class:`MetricScore` per metric, in the order given.

    Give ``observed`` (n x n similarity) and/or ``descriptor_sets`` (one set of odor
    descriptors per material). Without ``observed`` the Jaccard matrix of the
    descriptor sets is the observation. Relevance for precision at k: sharing at
    least one descriptor when ``descriptor_sets`` is given, otherwise observed
    similarity above ``relevance_threshold``.
    """
    if observed is None and descriptor_sets is None:
        raise ValueError("give observed similarities or descriptor_sets")
    if not metrics:
        raise ValueError("metrics must name at least one similarity matrix")
    if descriptor_sets is not None:
        shared = jaccard_matrix(descriptor_sets)
        relevant = shared > 0
        if observed is None:
            observed = shared
    observed = _square(observed, "observed")
    n = observed.shape[0]
    if descriptor_sets is not None and len(descriptor_sets) != n:
        raise ValueError(f"descriptor_sets has {len(descriptor_sets)} materials but observed covers {n}")
    if descriptor_sets is None:
        relevant = observed > relevance_threshold
    results = []
    squares = {name: _square(matrix, f"metrics[{name!r}]", n) for name, matrix in metrics.items()}
    intervals = bootstrap_intervals(observed, list(squares.values()), resamples=resamples,
                                    confidence=confidence, seed=seed)
    for (name, matrix), (low, high) in zip(squares.items(), intervals):
        r, p = mantel_test(observed, matrix, permutations=permutations, seed=seed)
        precision = precision_at_k(matrix, relevant, k) if k < n else None
        results.append(
            MetricScore(
                metric=name,
                materials=n,
                pairs=n * (n - 1) // 2,
                spearman=r,
                mantel_p=p,
                permutations=int(permutations),
                ci_low=low,
                ci_high=high,
                confidence=confidence,
                precision_at_k=precision,
                k=int(k),
            )
        )
    return results
