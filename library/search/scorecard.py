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
* a partial Mantel test of each metric controlling for other similarity
  matrices (by default the 2D ``structure`` metric): the Spearman partial
  correlation (Pearson partial correlation of the pair ranks) with a permutation
  p obtained by permuting the observation's material labels and recomputing the
  partial correlation (Syst. Zool. 35, 627 (1986));
* a chance baseline beside precision at k (the expected precision when each
  material's neighbors are drawn at random) and the lift over it;
* paired comparisons of the leading metric against every other: the difference
  of their Spearman correlations with a bootstrap interval over materials and a
  permutation p that swaps the two metrics' values per material;
* Holm-adjusted p-values (Scand. J. Stat. 6, 65 (1979)) over each family of tests
  run at once, and a plain-language summary.

Speed: permutations are drawn in blocks and share one gather of the observation's
rank matrix across all metrics; bootstrap resamples weight the pairs by how often
each material was drawn and correlate the full-sample pair ranks (a Pearson
correlation of the precomputed ranks, not a re-ranking inside every resample).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import rankdata

from library.search import statistics

TOLERANCE = 1e-5  # a permuted correlation this close to the observed one counts as reaching it
BLOCK = 16  # permutations or resamples handled per matrix product


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
    chance_at_k: float | None = None
    lift_at_k: float | None = None
    controls: tuple[str, ...] = ()
    partial_r: float | None = None
    partial_p: float | None = None
    mantel_p_holm: float | None = None
    partial_p_holm: float | None = None


@dataclass(frozen=True)
class MetricComparison:
    """Spearman r of ``metric`` minus that of ``other``, its bootstrap interval and a two-sided permutation p."""

    metric: str
    other: str
    difference: float
    ci_low: float
    ci_high: float
    p: float
    p_holm: float | None = None


@dataclass(frozen=True)
class Scorecard:
    """Every metric's score, the paired comparisons of the leader with the others, and a plain summary."""

    scores: list[MetricScore]
    comparisons: list[MetricComparison]
    summary: list[str]
    adjustment: str = "Holm"


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


def _centered_ranks(matrix: np.ndarray) -> np.ndarray:
    """Centered ranks (average ranks for ties) of the upper-triangle values, as a flat vector."""
    ranks = rankdata(matrix[np.triu_indices(matrix.shape[0], 1)])
    return ranks - ranks.mean()


def _rank_matrix(matrix: np.ndarray) -> np.ndarray:
    """Symmetric matrix holding the centered ranks of the upper-triangle values (zero diagonal)."""
    n = matrix.shape[0]
    out = np.zeros_like(matrix)
    out[np.triu_indices(n, 1)] = _centered_ranks(matrix)
    return out + out.T


def _positive_count(permutations) -> int:
    if int(permutations) < 1:
        raise ValueError(f"permutations must be a positive integer, got {permutations!r}")
    return int(permutations)


def _permuted_observations(rank_matrix: np.ndarray, permutations: int, seed: int):
    """Blocks of the observation's full rank matrix (flattened) under seeded label permutations.

    The k-th permutation draws ``order = rng.permutation(n)`` (the same draws as permuting the
    metric's labels by ``order``); permuting the observation by the inverse order gives the same
    statistic, and one gather then serves every metric.
    """
    n = rank_matrix.shape[0]
    rng = np.random.default_rng(seed)
    done = 0
    while done < permutations:
        block = min(BLOCK, permutations - done)
        out = np.empty((block, n * n), rank_matrix.dtype)
        for b in range(block):
            inverse = np.argsort(rng.permutation(n))
            out[b] = np.take(np.take(rank_matrix, inverse, axis=0), inverse, axis=1).ravel()
        yield out
        done += block


def mantel_tests(observed, metrics: Sequence, *, controls: Sequence = (), permutations: int = 999,
                 seed: int = 0) -> list[tuple[float, float, float | None, float | None]]:
    """(Spearman r, one-sided Mantel p, partial r, partial p) per metric, sharing every permutation.

    The partial columns are the Spearman partial correlation with ``controls`` (similarity matrices
    over the same materials) removed, and its one-sided permutation p: the observation's labels are
    permuted and the partial correlation recomputed against the fixed metric and controls, as in
    Syst. Zool. 35, 627 (1986). They are None without controls. ``p = (1 + #{r_perm >= r_obs}) /
    (1 + permutations)``.
    """
    a = _square(observed, "observed")
    ys = np.array([_centered_ranks(_square(m, "metric", a.shape[0])) for m in metrics])
    zs = np.array([_centered_ranks(_square(m, "control", a.shape[0])) for m in controls]).reshape(
        len(controls), ys.shape[1])
    permutations = _positive_count(permutations)
    ra = _rank_matrix(a)
    x = ra[np.triu_indices(a.shape[0], 1)]
    x_norm2 = x @ x
    y_norm = np.sqrt(np.einsum("ij,ij->i", ys, ys))
    m, c = ys.shape[0], zs.shape[0]
    if c:
        gram_inverse = np.linalg.pinv(zs @ zs.T)
        coefficients = (ys @ zs.T) @ gram_inverse  # metric ranks fitted on the controls
        residual = ys - coefficients @ zs
        residual_norm = np.sqrt(np.einsum("ij,ij->i", residual, residual))
    stacked = np.vstack([ys, zs])

    def statistics_of(products: np.ndarray):
        with np.errstate(invalid="ignore", divide="ignore"):
            plain = products[:, :m] / (np.sqrt(x_norm2) * y_norm)
            if not c:
                return plain, None
            on_controls = products[:, m:]
            fitted = np.einsum("bi,ij,bj->b", on_controls, gram_inverse, on_controls)
            x_residual = np.sqrt(np.maximum(x_norm2 - fitted, 0.0))
            # v . residual = v . y - coefficients . (Z v): one product per metric and control serves both tests
            partial = (products[:, :m] - on_controls @ coefficients.T) / (x_residual[:, None] * residual_norm)
            partial[:, residual_norm < 1e-9 * np.maximum(y_norm, 1)] = np.nan  # a metric that is a control
        return plain, partial

    # single precision halves the memory traffic of the gathers; ranks are exact in float32 below 2**23
    # pairs, and sums of products carry a relative error near 1e-6, hence the tolerance of the counts
    ra32 = ra.astype(np.float32)
    plain_obs, partial_obs = statistics_of((stacked @ x)[None, :])
    plain_count = np.zeros(m)
    partial_count = np.zeros(m)
    n = a.shape[0]
    full = np.zeros((stacked.shape[0], n, n))
    full[:, np.triu_indices(n, 1)[0], np.triu_indices(n, 1)[1]] = stacked
    full = full.reshape(stacked.shape[0], -1).astype(np.float32)  # upper triangle only
    for block in _permuted_observations(ra32, permutations, seed):
        plain, partial = statistics_of((block @ full.T).astype(np.float64))
        plain_count += (plain >= plain_obs - TOLERANCE).sum(axis=0)
        if partial is not None:
            partial_count += (partial >= partial_obs - TOLERANCE).sum(axis=0)
    out = []
    for i in range(m):
        r = float(plain_obs[0, i])
        p = (plain_count[i] + 1) / (permutations + 1) if np.isfinite(r) else float("nan")
        pr = pp = None
        if partial_obs is not None:
            pr = float(partial_obs[0, i])
            pp = (partial_count[i] + 1) / (permutations + 1) if np.isfinite(pr) else float("nan")
        out.append((r, float(p), pr, pp))
    return out


def mantel_test(observed, metric, *, permutations: int = 999, seed: int = 0) -> tuple[float, float]:
    """(Spearman r over the upper triangle, one-sided Mantel permutation p-value)."""
    r, p, _, _ = mantel_tests(observed, [metric], permutations=permutations, seed=seed)[0]
    return r, p


def partial_mantel_test(observed, metric, controls: Sequence, *, permutations: int = 999,
                        seed: int = 0) -> tuple[float, float]:
    """(Spearman partial r of metric and observation given the controls, one-sided permutation p)."""
    _, _, r, p = mantel_tests(observed, [metric], controls=controls, permutations=permutations, seed=seed)[0]
    return r, p


def bootstrap_values(observed, metrics: Sequence, *, resamples: int = 1000, seed: int = 0) -> np.ndarray:
    """resamples x metrics array of Spearman r over resampled materials (NaN where undefined).

    Each resample draws n materials with replacement (``rng.integers(0, n, size=n)``); a pair of
    distinct materials counts as often as the product of their draw counts, pairs of a material
    with its own copy are dropped, and the full-sample pair ranks are correlated with those weights.
    """
    a = _square(observed, "observed")
    n = a.shape[0]
    ys = np.array([_centered_ranks(_square(m, "metric", n)) for m in metrics])
    x = _centered_ranks(a)
    scale = max(1.0, float(np.abs(x).max()))
    x, ys = x / scale, ys / scale
    features = np.vstack([np.ones_like(x), x, x * x, ys, ys * ys, ys * x])
    full = np.zeros((features.shape[0], n, n))
    i, j = np.triu_indices(n, 1)
    full[:, i, j] = features
    full += full.transpose(0, 2, 1)
    # a sum over pairs of distinct materials weighted c_i c_j is the quadratic form c' F c / 2
    full = full.transpose(1, 0, 2).reshape(n, -1)
    rng = np.random.default_rng(seed)
    m = ys.shape[0]
    out = np.empty((int(resamples), m))
    done = 0
    while done < int(resamples):
        block = min(BLOCK * 4, int(resamples) - done)
        counts = np.stack([np.bincount(rng.integers(0, n, size=n), minlength=n) for _ in range(block)])
        counts = counts.astype(np.float64)
        sums = np.einsum("bkn,bn->bk", (counts @ full).reshape(block, -1, n), counts) / 2
        total, sx, sxx = sums[:, :1], sums[:, 1:2], sums[:, 2:3]
        sy, syy, sxy = sums[:, 3:3 + m], sums[:, 3 + m:3 + 2 * m], sums[:, 3 + 2 * m:]
        with np.errstate(invalid="ignore", divide="ignore"):
            cov = sxy - sx * sy / total
            var_x = sxx - sx * sx / total
            var_y = syy - sy * sy / total
            r = cov / np.sqrt(var_x * var_y)
        r[~((var_x > 1e-12) & (var_y > 1e-12))] = np.nan
        out[done:done + block] = np.clip(r, -1.0, 1.0)
        done += block
    return out


def _percentiles(values: np.ndarray, confidence: float) -> tuple[float, float]:
    found = values[np.isfinite(values)]
    if not found.size:
        return float("nan"), float("nan")
    tail = (1 - confidence) / 2 * 100
    low, high = np.percentile(found, [tail, 100 - tail])
    return float(low), float(high)


def _check_confidence(confidence: float) -> None:
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence!r}")


def bootstrap_intervals(
    observed, metrics: Sequence, *, resamples: int = 1000, confidence: float = 0.95, seed: int = 0
) -> list[tuple[float, float]]:
    """Percentile bootstrap intervals of the pairwise Spearman r of each metric, resampling materials.

    All metrics share the same resamples, so their intervals are comparable.
    """
    _check_confidence(confidence)
    values = bootstrap_values(observed, metrics, resamples=resamples, seed=seed)
    return [_percentiles(values[:, k], confidence) for k in range(values.shape[1])]


def bootstrap_interval(
    observed, metric, *, resamples: int = 1000, confidence: float = 0.95, seed: int = 0
) -> tuple[float, float]:
    """Percentile bootstrap interval of the pairwise Spearman r, resampling materials."""
    return bootstrap_intervals(observed, [metric], resamples=resamples, confidence=confidence, seed=seed)[0]


def paired_permutation_tests(observed, metric, others: Sequence, *, permutations: int = 999,
                             seed: int = 0) -> list[tuple[float, float]]:
    """(Spearman r of metric minus that of each other metric, two-sided permutation p), sharing the draws.

    Null: the two metrics are exchangeable. Each permutation swaps the two metrics' (normalized)
    pair ranks for every pair of each material picked by a fair coin, so a pair is swapped when
    exactly one of its materials was picked; ``p = (1 + #{|d_perm| >= |d_obs|}) / (1 + permutations)``.
    """
    a = _square(observed, "observed")
    n = a.shape[0]
    permutations = _positive_count(permutations)
    x = _centered_ranks(a)
    lead = _centered_ranks(_square(metric, "metric", n))
    ranked = [_centered_ranks(_square(o, "other", n)) for o in others]
    i, j = np.triu_indices(n, 1)
    weights = np.zeros((len(ranked), n, n))
    differences = []
    for k, y in enumerate(ranked):
        norms = [np.sqrt(v @ v) for v in (x, lead, y)]
        if min(norms) == 0:
            differences.append(float("nan"))
            continue
        weights[k, i, j] = x * (lead / norms[1] - y / norms[2]) / norms[0]
        differences.append(float(weights[k].sum()))
    weights += weights.transpose(0, 2, 1)
    stacked = weights.transpose(1, 0, 2).reshape(n, -1)
    rng = np.random.default_rng(seed)
    counts = np.zeros(len(ranked))
    done = 0
    while done < permutations:
        block = min(BLOCK * 4, permutations - done)
        signs = rng.choice(np.array([-1.0, 1.0]), size=(block, n))
        values = np.einsum("bkn,bn->bk", (signs @ stacked).reshape(block, -1, n), signs) / 2
        counts += (np.abs(values) >= np.abs(differences) - TOLERANCE).sum(axis=0)
        done += block
    return [(d, float((c + 1) / (permutations + 1)) if np.isfinite(d) else float("nan"))
            for d, c in zip(differences, counts)]


def paired_permutation_p(observed, metric, other, *, permutations: int = 999, seed: int = 0) -> tuple[float, float]:
    """(Spearman r of metric minus that of other, two-sided permutation p); see :func:`paired_permutation_tests`."""
    return paired_permutation_tests(observed, metric, [other], permutations=permutations, seed=seed)[0]


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


def score_report(
    metrics: Mapping[str, np.ndarray],
    *,
    observed=None,
    descriptor_sets: Sequence | None = None,
    permutations: int = 999,
    resamples: int = 1000,
    confidence: float = 0.95,
    k: int = 5,
    relevance_threshold: float = 0.0,
    controls: Sequence[str] | None = None,
    extra_controls: Mapping[str, np.ndarray] | None = None,
    seed: int = 0,
) -> Scorecard:
    """Every metric's :class:`MetricScore`, the leader's paired comparisons and a summary.

    Give ``observed`` (n x n similarity) and/or ``descriptor_sets`` (one set of odor
    descriptors per material). Without ``observed`` the Jaccard matrix of the
    descriptor sets is the observation. Relevance for precision at k: sharing at
    least one descriptor when ``descriptor_sets`` is given, otherwise observed
    similarity above ``relevance_threshold``. ``controls`` names the metrics the
    partial Mantel test controls for (default: ``structure`` when present);
    ``extra_controls`` adds similarity matrices that are not metrics (e.g. molecular size).
    """
    if observed is None and descriptor_sets is None:
        raise ValueError("give observed similarities or descriptor_sets")
    if not metrics:
        raise ValueError("metrics must name at least one similarity matrix")
    _check_confidence(confidence)
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
    squares = {name: _square(matrix, f"metrics[{name!r}]", n) for name, matrix in metrics.items()}
    if controls is None:
        controls = ["structure"] if "structure" in squares and len(squares) > 1 else []
    unknown = [c for c in controls if c not in squares]
    if unknown:
        raise ValueError(f"control metric(s) {', '.join(unknown)} not among the metrics {', '.join(squares)}")
    control_names = tuple(controls) + tuple(extra_controls or {})
    control_matrices = [squares[c] for c in controls] + [
        _square(m, f"controls[{name!r}]", n) for name, m in (extra_controls or {}).items()]
    names = list(squares)
    tests = mantel_tests(observed, list(squares.values()), controls=control_matrices,
                         permutations=permutations, seed=seed)
    values = bootstrap_values(observed, list(squares.values()), resamples=resamples, seed=seed)
    chance = statistics.chance_precision(relevant) if k < n else None
    mantel_holm = _adjusted([t[1] for t in tests])
    partial_holm = _adjusted([None if names[i] in controls else t[3] for i, t in enumerate(tests)])
    scores = []
    for col, (name, matrix) in enumerate(squares.items()):
        r, p, pr, pp = tests[col]
        low, high = _percentiles(values[:, col], confidence)
        precision = precision_at_k(matrix, relevant, k) if k < n else None
        lift = precision / chance if precision is not None and chance else None
        own = name in controls
        scores.append(MetricScore(
            metric=name, materials=n, pairs=n * (n - 1) // 2, spearman=r, mantel_p=p,
            permutations=int(permutations), ci_low=low, ci_high=high, confidence=confidence,
            precision_at_k=precision, k=int(k), chance_at_k=chance, lift_at_k=lift,
            controls=() if own else control_names, partial_r=None if own else pr,
            partial_p=None if own else pp, mantel_p_holm=mantel_holm[col], partial_p_holm=partial_holm[col]))
    comparisons = _compare_leader(observed, squares, scores, values, confidence=confidence,
                                  permutations=permutations, seed=seed)
    return Scorecard(scores, comparisons, summarize(scores, comparisons))


def _adjusted(p_values: list) -> list:
    """Holm-adjusted p over the finite entries; None or NaN entries stay None."""
    keep = [i for i, p in enumerate(p_values) if p is not None and np.isfinite(p)]
    out: list = [None] * len(p_values)
    for i, q in zip(keep, statistics.holm([p_values[i] for i in keep])):
        out[i] = float(q)
    return out


def _compare_leader(observed, squares, scores, values, *, confidence, permutations, seed) -> list[MetricComparison]:
    finite = [s for s in scores if np.isfinite(s.spearman)]
    if len(finite) < 2:
        return []
    leader = max(finite, key=lambda s: s.spearman)
    names = list(squares)
    lead = names.index(leader.metric)
    rest = [s.metric for s in finite if s.metric != leader.metric]
    tests = paired_permutation_tests(observed, squares[leader.metric], [squares[r] for r in rest],
                                     permutations=permutations, seed=seed)
    found = []
    for name, (difference, p) in zip(rest, tests):
        low, high = _percentiles(values[:, lead] - values[:, names.index(name)], confidence)
        found.append((leader.metric, name, difference, low, high, p))
    holm = statistics.holm([f[5] for f in found])
    return [MetricComparison(*f, p_holm=float(q)) for f, q in zip(found, holm)]


def summarize(scores: list[MetricScore], comparisons: list[MetricComparison], *, level: float = 0.05) -> list[str]:
    """Plain sentences: which metric leads, by how much, whether that is significant, what 2D structure explains."""
    lines = []
    if comparisons:
        leader = next(s for s in scores if s.metric == comparisons[0].metric)
        lines.append(f"{leader.metric} agrees best with the observations (Spearman {leader.spearman:.3f}).")
        for c in sorted(comparisons, key=lambda c: c.difference):
            verdict = "significant" if c.p_holm <= level else "not significant"
            lines.append(f"It leads {c.other} by {c.difference:.3f} ({int(leader.confidence * 100)} % interval "
                         f"{c.ci_low:.3f} to {c.ci_high:.3f}; paired permutation p {c.p:.4f}, Holm {c.p_holm:.4f}: "
                         f"{verdict} at {level:g}).")
    structure = next((s for s in scores if s.metric == "structure"), None)
    if structure is not None:
        lines.append(f"2D structure alone: Spearman {structure.spearman:.3f}, so it explains about "
                     f"{100 * structure.spearman ** 2:.1f} % of the rank variance of the observations.")
    partial = [s for s in scores if s.partial_r is not None and s.controls]
    if partial:
        beyond = [s.metric for s in partial if s.partial_p_holm is not None and s.partial_p_holm <= level]
        control = " and ".join(partial[0].controls)
        lines.append(f"Beyond {control}: " + ", ".join(f"{s.metric} partial r {s.partial_r:.3f}" for s in partial)
                     + (f"; significant after Holm: {', '.join(beyond)}." if beyond
                        else "; none is significant after Holm."))
    return lines


def score_metrics(metrics: Mapping[str, np.ndarray], **options) -> list[MetricScore]:
    """One :class:`MetricScore` per metric, in the order given (see :func:`score_report` for the options)."""
    return score_report(metrics, **options).scores


def _rounded(value) -> float | None:
    return None if value is None or not np.isfinite(value) else round(float(value), 4)


def score_json(score: MetricScore) -> dict:
    """One metric's figures as plain JSON values (NaN as None, 4 decimals)."""
    return {"metric": score.metric, "materials": score.materials, "pairs": score.pairs,
            "spearman": _rounded(score.spearman), "mantel_p": _rounded(score.mantel_p),
            "mantel_p_holm": _rounded(score.mantel_p_holm), "permutations": score.permutations,
            "ci_low": _rounded(score.ci_low), "ci_high": _rounded(score.ci_high), "confidence": score.confidence,
            "controls": list(score.controls), "partial_r": _rounded(score.partial_r),
            "partial_p": _rounded(score.partial_p), "partial_p_holm": _rounded(score.partial_p_holm),
            "k": score.k, "precision_at_k": _rounded(score.precision_at_k),
            "chance_at_k": _rounded(score.chance_at_k), "lift_at_k": _rounded(score.lift_at_k)}


def report_json(report: Scorecard) -> dict:
    """The whole scorecard as plain JSON values: metrics, paired comparisons, adjustment and summary."""
    return {"metrics": [score_json(s) for s in report.scores],
            "comparisons": [{"metric": c.metric, "other": c.other, "difference": _rounded(c.difference),
                             "ci_low": _rounded(c.ci_low), "ci_high": _rounded(c.ci_high), "p": _rounded(c.p),
                             "p_holm": _rounded(c.p_holm)} for c in report.comparisons],
            "adjustment": f"{report.adjustment} (family-wise, over the p-values of one column)",
            "summary": report.summary}
