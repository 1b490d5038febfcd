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


# ---------------------------------------------------------------- partial, paired, chance, multiple testing

from scipy.stats import rankdata  # noqa: E402

from library.search import statistics  # noqa: E402
from library.search.scorecard import (  # noqa: E402
    bootstrap_values,
    mantel_tests,
    paired_permutation_p,
    partial_mantel_test,
    score_report,
)


def old_loop_mantel(observed, metric, permutations, seed):
    """The scorecard's earlier one-permutation-at-a-time loop, kept here as the reference."""
    n = observed.shape[0]
    upper = np.triu_indices(n, 1)
    x = rankdata(observed[upper]) - (n * (n - 1) / 2 + 1) / 2
    rb = np.zeros((n, n))
    rb[upper] = rankdata(metric[upper]) - (n * (n - 1) / 2 + 1) / 2
    rb = rb + rb.T
    norm = np.sqrt((x @ x) * (rb[upper] @ rb[upper]))
    r = x @ rb[upper] / norm
    rng = np.random.default_rng(seed)
    count = 0
    for _ in range(permutations):
        order = rng.permutation(n)
        count += x @ rb[order][:, order][upper] / norm >= r - 1e-12
    return r, (count + 1) / (permutations + 1)


def old_loop_bootstrap(observed, metric, resamples, seed):
    """The earlier re-ranking bootstrap loop (reference for the weighted full-sample-rank version)."""
    n = observed.shape[0]
    rng = np.random.default_rng(seed)
    i, j = np.triu_indices(n, 1)
    found = []
    for _ in range(resamples):
        pick = rng.integers(0, n, size=n)
        rows, cols = pick[i], pick[j]
        keep = rows != cols
        found.append(stats.spearmanr(observed[rows[keep], cols[keep]], metric[rows[keep], cols[keep]]).statistic)
    return np.array(found)


def test_vectorised_mantel_equals_old_loop_on_same_seed():
    rng = np.random.default_rng(10)
    observed = symmetric(rng, 20)
    metrics = [observed + 0.5 * symmetric(rng, 20), symmetric(rng, 20), observed + 2.0 * symmetric(rng, 20)]
    found = mantel_tests(observed, metrics, permutations=333, seed=7)
    for metric, (r, p, _, _) in zip(metrics, found):
        old_r, old_p = old_loop_mantel(observed, metric, 333, 7)
        assert r == pytest.approx(old_r, abs=1e-12)
        assert p == old_p  # same draws, same counts


def test_bootstrap_values_follow_the_re_ranking_loop():
    rng = np.random.default_rng(11)
    observed = symmetric(rng, 30)
    metric = observed + 0.6 * symmetric(rng, 30)
    fast = bootstrap_values(observed, [metric], resamples=200, seed=4)[:, 0]
    old = old_loop_bootstrap(observed, metric, 200, 4)
    # same resamples; full-sample ranks instead of re-ranking inside each resample: close, not equal
    assert np.corrcoef(fast, old)[0, 1] > 0.95
    assert np.abs(fast - old).max() < 0.05  # 30 materials; the gap shrinks as materials grow
    assert np.percentile(fast, [2.5, 97.5]) == pytest.approx(np.percentile(old, [2.5, 97.5]), abs=0.02)


def test_partial_correlation_matches_closed_formula_and_scipy_residuals():
    rng = np.random.default_rng(12)
    n = 18
    z = symmetric(rng, n)
    observed = z + symmetric(rng, n)
    metric = z + 0.7 * symmetric(rng, n) + 0.3 * observed
    upper = np.triu_indices(n, 1)
    r_xy = stats.spearmanr(observed[upper], metric[upper]).statistic
    r_xz = stats.spearmanr(observed[upper], z[upper]).statistic
    r_yz = stats.spearmanr(metric[upper], z[upper]).statistic
    # textbook first-order partial correlation on Spearman coefficients
    closed = (r_xy - r_xz * r_yz) / np.sqrt((1 - r_xz**2) * (1 - r_yz**2))
    r, _ = partial_mantel_test(observed, metric, [z], permutations=9)
    assert r == pytest.approx(closed, abs=1e-10)
    # manual scipy computation: residuals of the ranks on the control (scipy.stats.linregress)
    rx, ry, rz = (rankdata(m[upper]) for m in (observed, metric, z))
    fit_x, fit_y = stats.linregress(rz, rx), stats.linregress(rz, ry)
    ex = rx - (fit_x.intercept + fit_x.slope * rz)
    ey = ry - (fit_y.intercept + fit_y.slope * rz)
    assert r == pytest.approx(stats.pearsonr(ex, ey).statistic, abs=1e-10)
    assert statistics.partial_correlation(rx, ry, rz) == pytest.approx(closed, abs=1e-10)


def test_partial_mantel_p_matches_exhaustive_permutations():
    rng = np.random.default_rng(13)
    n = 5
    z = symmetric(rng, n)
    observed = z + symmetric(rng, n)
    metric = 0.5 * z + symmetric(rng, n) + 0.5 * observed
    upper = np.triu_indices(n, 1)

    def partial(x):  # closed formula on scipy Spearman coefficients, observation permuted
        r_xy = stats.spearmanr(x[upper], metric[upper]).statistic
        r_xz = stats.spearmanr(x[upper], z[upper]).statistic
        r_yz = stats.spearmanr(metric[upper], z[upper]).statistic
        return (r_xy - r_xz * r_yz) / np.sqrt((1 - r_xz**2) * (1 - r_yz**2))

    r_obs = partial(observed)
    # brute-force reference: all 5! label permutations of the observation
    exact = np.mean([partial(observed[np.array(o)][:, np.array(o)]) >= r_obs - 1e-9
                     for o in itertools.permutations(range(n))])
    permutations = 20_000
    _, p = partial_mantel_test(observed, metric, [z], permutations=permutations, seed=2)
    # Monte Carlo: binomial standard error <= 0.0036; allow 5 of them
    assert p == pytest.approx(exact, abs=5 * np.sqrt(0.25 / permutations) + 1 / permutations)


def test_paired_comparison_difference_and_exhaustive_sign_flips():
    rng = np.random.default_rng(14)
    n = 7
    observed = symmetric(rng, n)
    good, poor = observed + 0.4 * symmetric(rng, n), observed + 1.5 * symmetric(rng, n)
    upper = np.triu_indices(n, 1)
    rho = [stats.spearmanr(observed[upper], m[upper]).statistic for m in (good, poor)]
    x, a, b = (rankdata(m[upper]) - rankdata(m[upper]).mean() for m in (observed, good, poor))
    d_obs = x @ (a / np.linalg.norm(a) - b / np.linalg.norm(b)) / np.linalg.norm(x)
    # brute force over all 2^7 per-material coin patterns: a pair is swapped when exactly one coin is heads
    count = 0
    for coins in itertools.product([-1, 1], repeat=n):
        s = np.array(coins)[upper[0]] * np.array(coins)[upper[1]]
        d = x @ (s * (a / np.linalg.norm(a) - b / np.linalg.norm(b))) / np.linalg.norm(x)
        count += abs(d) >= abs(d_obs) - 1e-9
    exact = count / 2**n
    difference, p = paired_permutation_p(observed, good, poor, permutations=20_000, seed=1)
    assert difference == pytest.approx(rho[0] - rho[1], abs=1e-10)  # scipy.stats.spearmanr reference
    assert p == pytest.approx(exact, abs=5 * np.sqrt(0.25 / 20_000) + 1 / 20_000)


def test_chance_baseline_matches_random_neighbors():
    rng = np.random.default_rng(15)
    words = ["woody", "citrus", "floral", "musky", "green", "fruity", "spicy"]
    sets = [set(rng.choice(words, size=rng.integers(1, 3), replace=False)) for _ in range(40)]
    relevant = jaccard_matrix(sets) > 0
    exact = statistics.chance_precision(relevant)
    # simulation: precision at k of random similarity matrices (random neighbors), averaged
    simulated = np.mean([precision_at_k(symmetric(rng, 40), relevant, k=4) for _ in range(400)])
    assert simulated == pytest.approx(exact, abs=0.01)  # standard error of the mean ~0.002
    partners = relevant.sum(axis=1) - 1  # hand formula: relevant/(n-1), averaged over materials with a partner
    assert exact == pytest.approx(np.mean(partners[partners > 0] / 39))


def test_holm_and_benjamini_hochberg_against_references():
    # Holm worked from its definition (Scand. J. Stat. 6, 65 (1979)) by hand:
    # sorted 0.005, 0.01, 0.03, 0.04 -> 4*0.005, 3*0.01, 2*0.03, max(1*0.04, 0.06)
    assert statistics.holm([0.01, 0.04, 0.03, 0.005]) == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert statistics.holm([0.5, 0.9]) == pytest.approx([1.0, 1.0])  # capped at 1
    rng = np.random.default_rng(16)
    for _ in range(20):
        p = rng.random(rng.integers(1, 30)) ** 3
        # scipy.stats.false_discovery_control (method "bh") reference
        assert statistics.benjamini_hochberg(p) == pytest.approx(stats.false_discovery_control(p, method="bh"))
    with pytest.raises(ValueError, match="between 0 and 1"):
        statistics.holm([0.2, 1.5])


def test_score_report_controls_structure_and_summarizes():
    rng = np.random.default_rng(17)
    n = 30
    structure = symmetric(rng, n)
    observed = structure + 0.3 * symmetric(rng, n)
    metrics = {"shape": structure + 0.5 * symmetric(rng, n), "noise": symmetric(rng, n), "structure": structure}
    report = score_report(metrics, observed=observed, permutations=199, resamples=100, k=3)
    by = {s.metric: s for s in report.scores}
    assert by["structure"].partial_r is None and by["shape"].controls == ("structure",)
    # the shape metric is structure plus noise: little left once structure is removed
    assert abs(by["shape"].partial_r) < by["shape"].spearman
    column = [s.mantel_p for s in report.scores]
    assert [s.mantel_p_holm for s in report.scores] == pytest.approx(list(statistics.holm(column)))
    assert by["noise"].partial_p_holm == pytest.approx(min(1.0, max(2 * min(by["noise"].partial_p, by["shape"].partial_p),
                                                                     by["noise"].partial_p)))  # Holm over two tests
    assert report.comparisons[0].metric == "structure"
    assert all(c.p_holm >= c.p for c in report.comparisons)
    assert any("structure" in line and "Holm" in line for line in report.summary)
    assert by["noise"].chance_at_k == by["shape"].chance_at_k


def test_sides_with_tally_expectation_matches_brute_force_shuffles():
    from library.search.disagreements import SHAPE_NOT_VIBRATION, VIBRATION_NOT_SHAPE, Disagreement, \
        sides_with_tally

    def pair(direction, observed):
        return Disagreement(id_a=1, id_b=2, direction=direction, score=0.5, shape=0.9, vibration=0.1,
                            structure=None, shape_rank=None, vibration_rank=None, observed=observed)

    values = [0.0, 0.0, 0.1, 0.6, 0.9, 0.3]
    directions = [SHAPE_NOT_VIBRATION] * 4 + [VIBRATION_NOT_SHAPE] * 2
    pairs = [pair(d, v) for d, v in zip(directions, values)] + [pair(SHAPE_NOT_VIBRATION, None)]
    tally = sides_with_tally(pairs, permutations=2000, seed=0)
    # by hand: shape-not-vibration pairs observed 0, 0, 0.1 (unalike) side with vibration, 0.6 with shape;
    # vibration-not-shape 0.9 sides with vibration, 0.3 with neither
    assert (tally.observed_pairs, tally.shape, tally.vibration, tally.neither) == (6, 1, 4, 1)
    # brute-force reference: the mean over all 6! orderings of the observed values
    shape_counts = []
    for order in itertools.permutations(values):
        shape_counts.append(sum((d == SHAPE_NOT_VIBRATION and v >= 0.5) or (d == VIBRATION_NOT_SHAPE and v <= 0.2)
                                for d, v in zip(directions, order)))
    assert tally.expected_shape == pytest.approx(np.mean(shape_counts))
    exact_p = np.mean(np.array(shape_counts) >= 1)
    assert tally.p_shape == pytest.approx(exact_p, abs=5 * np.sqrt(0.25 / 2000) + 1 / 2000)
    assert sides_with_tally([pair(SHAPE_NOT_VIBRATION, None)]) is None
