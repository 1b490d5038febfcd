"""Scorecard against scipy.stats and brute-force permutation references."""

import itertools

import numpy as np
import pytest
from scipy import stats

from library.search.scorecard import (
    bootstrap_interval,
    jaccard_matrix,
    mantel_test,
    precision_at_k,
    score_metrics,
)


def symmetric(rng, n):
    a = rng.random((n, n))
    a = (a + a.T) / 2
    np.fill_diagonal(a, 1.0)
    return a


def test_spearman_matches_scipy():
    rng = np.random.default_rng(0)
    observed = symmetric(rng, 25)
    metric = observed + 0.3 * symmetric(rng, 25)
    r, _ = mantel_test(observed, metric, permutations=9)
    upper = np.triu_indices(25, 1)
    expected = stats.spearmanr(observed[upper], metric[upper]).statistic  # scipy.stats reference
    assert r == pytest.approx(expected, abs=1e-12)  # same arithmetic, float64 rounding only


def test_mantel_p_matches_exhaustive_permutations():
    rng = np.random.default_rng(1)
    n = 5
    observed = symmetric(rng, n)
    metric = observed + 0.4 * symmetric(rng, n)
    upper = np.triu_indices(n, 1)
    r_obs = stats.spearmanr(observed[upper], metric[upper]).statistic
    # brute-force reference: all 5! label permutations with scipy.stats.spearmanr
    count = 0
    for order in itertools.permutations(range(n)):
        order = np.array(order)
        permuted = metric[order][:, order]
        count += stats.spearmanr(observed[upper], permuted[upper]).statistic >= r_obs - 1e-12
    exact_p = count / 120
    permutations = 20_000
    _, p = mantel_test(observed, metric, permutations=permutations, seed=3)
    # Monte Carlo estimate: binomial standard error <= 0.0036 here; allow 5 of them
    assert p == pytest.approx(exact_p, abs=5 * np.sqrt(0.25 / permutations) + 1 / permutations)


def test_matrix_against_itself_gives_smallest_p():
    rng = np.random.default_rng(2)
    observed = symmetric(rng, 30)
    r, p = mantel_test(observed, observed, permutations=199, seed=0)
    assert r == pytest.approx(1.0)
    # only the identity permutation reaches r = 1 (probability 1/30! per draw): p = 1/(199 + 1)
    assert p == pytest.approx(1 / 200)


def test_independent_matrices_give_uniform_p_values():
    rng = np.random.default_rng(4)
    p_values = []
    for seed in range(150):
        a, b = symmetric(rng, 10), symmetric(rng, 10)
        p_values.append(mantel_test(a, b, permutations=99, seed=seed)[1])
    # under the null the permutation p-value is uniform (on the grid k/100);
    # scipy.stats.kstest against uniform: reject only at a small level
    assert stats.kstest(p_values, "uniform").pvalue > 0.001


def test_bootstrap_interval():
    rng = np.random.default_rng(5)
    observed = symmetric(rng, 40)
    noisy = observed + 0.5 * symmetric(rng, 40)
    r, _ = mantel_test(observed, noisy, permutations=9)
    low, high = bootstrap_interval(observed, noisy, resamples=300, seed=0)
    assert low < r < high
    assert high - low < 0.5
    # a monotone transform has Spearman 1 in every resample
    assert bootstrap_interval(observed, observed**3, resamples=50) == pytest.approx((1.0, 1.0))
    wide = bootstrap_interval(observed[:10, :10], noisy[:10, :10], resamples=300, seed=0)
    assert wide[1] - wide[0] > high - low  # fewer materials, wider interval


def test_precision_at_k_hand_example():
    # 4 materials; metric ranks: 0 -> 1, 2, 3; relevance by shared descriptors (hand-computed)
    descriptor_sets = [{"woody"}, {"woody", "amber"}, {"citrus"}, {"amber"}]
    relevant = jaccard_matrix(descriptor_sets) > 0
    metric = np.array(
        [
            [1.0, 0.9, 0.8, 0.1],
            [0.9, 1.0, 0.2, 0.3],
            [0.8, 0.2, 1.0, 0.7],
            [0.1, 0.3, 0.7, 1.0],
        ]
    )
    # material 0: top-1 is 1 (relevant) -> 1; material 1: top-1 is 0 (relevant) -> 1;
    # material 2: no relevant partner (left out); material 3: top-1 is 2 (not relevant) -> 0
    assert precision_at_k(metric, relevant, k=1) == pytest.approx(2 / 3)
    # k=2: material 0 -> {1, 2}: 1/2; material 1 -> {0, 3}: 2/2; material 3 -> {2, 1}: 1/2
    assert precision_at_k(metric, relevant, k=2) == pytest.approx((0.5 + 1.0 + 0.5) / 3)


def test_jaccard_matrix_values():
    m = jaccard_matrix([{"a", "b"}, {"b", "c"}, set()])
    assert m[0, 1] == pytest.approx(1 / 3)  # {b} / {a, b, c}
    assert m[0, 2] == 0.0 and m[2, 2] == 1.0


def test_score_metrics_side_by_side():
    rng = np.random.default_rng(6)
    words = ["woody", "citrus", "floral", "musky", "green", "fruity"]
    sets = [set(rng.choice(words, size=2, replace=False)) for _ in range(30)]
    observed = jaccard_matrix(sets)
    metrics = {"aligned": observed + 0.1 * symmetric(rng, 30), "noise": symmetric(rng, 30)}
    scores = score_metrics(metrics, descriptor_sets=sets, permutations=199, resamples=100, k=3)
    assert [s.metric for s in scores] == ["aligned", "noise"]
    aligned, noise = scores
    assert aligned.pairs == 435 and aligned.materials == 30
    assert aligned.spearman > 0.8 and aligned.mantel_p == pytest.approx(1 / 200)
    assert noise.mantel_p > aligned.mantel_p
    assert aligned.precision_at_k > noise.precision_at_k
    with pytest.raises(ValueError, match="noise"):
        score_metrics({"noise": np.ones((3, 4))}, observed=observed)
