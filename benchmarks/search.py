"""Benchmark of the search core on synthetic catalogues with the real dimensions.

Synthetic catalogue (see :func:`synthetic_catalogue`): materials come in chemical
"families" of about 50. Each family has a prototype set of 24-40 normal-mode
frequencies (cm^-1) drawn from bands where organic odorants absorb (400-1500
skeletal, 1600-1780 C=C/C=O, 2850-3100 C-H stretches, a few 3200-3600 O-H); each
member jitters every frequency by a normal 12 cm^-1, drops a few and adds a few
random modes. The fingerprint is the EVA descriptor: a sum of Gaussians
(sigma 10 cm^-1) on the 0-4000 cm^-1 grid with 5 cm^-1 steps (801 values, float32).
Shape vectors have length 72 (60 USRCAT-like moments + 12 chirality moments):
a positive family prototype (gamma-distributed, 0.5-6 angstrom-like values)
times per-member log-normal noise (sigma 0.08).

Run ``olibra bench search`` (sizes 10k, 100k, 1M) or call :func:`run`.
Every figure printed is measured on this machine; nothing is asserted.
"""

from __future__ import annotations

import gc
import sys
import time
from typing import TextIO

import numpy as np

from library.search import metrics
from library.search.index import SimilarityIndex
from library.vibration.spectrum import grid_cm1

GRID_CM1 = grid_cm1()  # the fingerprint grid: 0-4000 cm^-1 in 5 cm^-1 steps, 801 points
SIGMA_CM1 = 10.0
SHAPE_LENGTH = 72
FAMILY_SIZE = 50
BANDS_CM1 = ((400, 1500, 0.62), (1600, 1780, 0.12), (2850, 3100, 0.22), (3200, 3600, 0.04))


def _modes(rng: np.random.Generator, count: int) -> np.ndarray:
    weights = np.array([b[2] for b in BANDS_CM1])
    band = rng.choice(len(BANDS_CM1), size=count, p=weights / weights.sum())
    low = np.array([b[0] for b in BANDS_CM1])[band]
    high = np.array([b[1] for b in BANDS_CM1])[band]
    return rng.uniform(low, high)


def eva_fingerprints(frequencies: np.ndarray, sigma_cm1: float = SIGMA_CM1) -> np.ndarray:
    """EVA fingerprints (rows x 801, float32) from a (rows x modes) array of cm^-1 (NaN = no mode).

    The real fingerprint code (library.vibration.spectrum.band_densities), each mode of unit weight,
    touching only grid points within 4 sigma so that a million rows take seconds.
    """
    from library.vibration.spectrum import band_densities

    amplitudes = np.where(np.isfinite(frequencies), 1.0, np.nan)
    return band_densities(frequencies, amplitudes, GRID_CM1, sigma_cm1, reach_sigma=4.0).astype(np.float32)


def synthetic_catalogue(n: int, *, seed: int = 0, chunk: int = 20_000) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(ids, shape vectors (n x 72 float32), fingerprints (n x 801 float32)); see module docstring."""
    rng = np.random.default_rng(seed)
    families = max(1, n // FAMILY_SIZE)
    mode_count = rng.integers(24, 41, size=families)
    prototypes = np.full((families, 40), np.nan)
    for f in range(families):
        prototypes[f, : mode_count[f]] = _modes(rng, mode_count[f])
    shape_prototypes = rng.gamma(4.0, 0.5, size=(families, SHAPE_LENGTH)) + 0.5
    family = rng.integers(0, families, size=n)
    shape = (shape_prototypes[family] * rng.lognormal(0.0, 0.08, size=(n, SHAPE_LENGTH))).astype(np.float32)
    fingerprints = np.empty((n, GRID_CM1.size), np.float32)
    for start in range(0, n, chunk):
        stop = min(start + chunk, n)
        freq = prototypes[family[start:stop]] + rng.normal(0.0, 12.0, size=(stop - start, 40))
        freq[rng.random(freq.shape) < 0.1] = np.nan  # dropped modes
        extra = _modes(rng, (stop - start) * 4).reshape(stop - start, 4)
        freq = np.concatenate([freq, extra], axis=1)
        fingerprints[start:stop] = eva_fingerprints(freq)
    ids = np.arange(n, dtype=np.int64)
    return ids, shape, fingerprints


def _exact_blend_top(index: SimilarityIndex, row: int, weight: float, k: int) -> np.ndarray:
    blend = index.scores("blend", index.block([row]), weight=weight)
    blend[row] = -np.inf
    top = np.argpartition(-blend, k)[:k]
    return top[np.argsort(-blend[top], kind="stable")]


def _percentiles(seconds: list[float]) -> tuple[float, float]:
    values = np.asarray(seconds) * 1e3
    return float(np.median(values)), float(np.percentile(values, 95))


def run(
    sizes=(10_000, 100_000, 1_000_000),
    *,
    out: TextIO = sys.stdout,
    seed: int = 0,
    queries: int = 50,
    peer_queries: int = 10,
    disagreement_limit: int = 100_000,
    k: int = 10,
    weight: float = 0.5,
) -> dict:
    """Measure build, query, peer, memory-floor and disagreement-scan figures; print and return them.

    The peer is scikit-learn's brute-force ``NearestNeighbors``: one model with
    ``metric="manhattan"`` on the shape vectors and one with ``metric="cosine"`` on
    the fingerprints; each answers ``kneighbors`` for all n materials (the only way
    it gives an exact blended ranking, since the blend is no single metric), the two
    distance lists are turned into similarities, blended and the top ``k`` taken.
    The peer answers ``peer_queries`` of the queries.
    """
    from sklearn.neighbors import NearestNeighbors

    from library.search.disagreements import find_disagreements

    def say(text: str) -> None:
        print(text, file=out, flush=True)

    results: dict = {}
    for n in sizes:
        figures: dict = {"n": int(n)}
        say(f"== catalogue of {n:,} synthetic materials (72 shape values, 801 fingerprint values) ==")
        started = time.perf_counter()
        ids, shape, fingerprints = synthetic_catalogue(n, seed=seed)
        figures["generate_s"] = time.perf_counter() - started
        say(f"generated in {figures['generate_s']:.1f} s")

        index = SimilarityIndex(random_state=seed)
        started = time.perf_counter()
        index.fit(ids, shape, fingerprints)
        figures["build_s"] = time.perf_counter() - started
        del fingerprints, shape
        gc.collect()
        figures["index_bytes"] = index.nbytes
        fast_bytes = index.shape_.nbytes + (index.compressed_.nbytes if index.compressed_ is not None else index.fingerprints_.nbytes)
        figures["fast_path_bytes"] = fast_bytes
        say(
            f"build {figures['build_s']:.2f} s; index matrices {index.nbytes / 2**20:,.1f} MiB "
            f"(fast path reads {fast_bytes / 2**20:,.1f} MiB: shape + compressed fingerprints)"
        )

        rng = np.random.default_rng(seed + 1)
        query_rows = rng.choice(n, size=min(queries, n), replace=False)
        index.query(query_id=int(ids[query_rows[0]]), metric="blend", weight=weight, k=k, ranks="none")  # warm-up
        timings = {"none": [], "estimated": []}
        recalls = []
        for row in query_rows:
            for mode in ("none", "estimated"):
                started = time.perf_counter()
                hits = index.query(query_id=int(ids[row]), metric="blend", weight=weight, k=k, ranks=mode)
                timings[mode].append(time.perf_counter() - started)
            exact = _exact_blend_top(index, int(row), weight, k)
            recalls.append(len({h.row for h in hits} & set(exact.tolist())) / k)
        figures["query_ms_median"], figures["query_ms_p95"] = _percentiles(timings["none"])
        figures["query_ranked_ms_median"], figures["query_ranked_ms_p95"] = _percentiles(timings["estimated"])
        figures["recall_at_10"] = float(np.mean(recalls))
        say(
            f"blended top-{k} ({len(query_rows)} queries): median {figures['query_ms_median']:.1f} ms, "
            f"p95 {figures['query_ms_p95']:.1f} ms; with estimated ranks under all metrics: median "
            f"{figures['query_ranked_ms_median']:.1f} ms, p95 {figures['query_ranked_ms_p95']:.1f} ms"
        )
        say(f"recall at {k} of the fast path against the exact blended ranking: {figures['recall_at_10']:.4f}")

        # memory-bandwidth floor: numpy reading the matrices once
        floor = []
        full_floor = []
        for _ in range(5):
            started = time.perf_counter()
            index.shape_.sum()
            (index.compressed_ if index.compressed_ is not None else index.fingerprints_).sum()
            floor.append(time.perf_counter() - started)
            started = time.perf_counter()
            index.fingerprints_.sum()
            full_floor.append(time.perf_counter() - started)
        figures["floor_ms"] = float(np.median(floor)) * 1e3
        figures["full_fingerprint_read_ms"] = float(np.median(full_floor)) * 1e3
        figures["floor_ratio"] = figures["query_ms_median"] / figures["floor_ms"]
        say(
            f"memory floor (numpy sum over shape + compressed matrices): {figures['floor_ms']:.1f} ms; "
            f"query / floor = {figures['floor_ratio']:.2f}x; reading all full fingerprints once: "
            f"{figures['full_fingerprint_read_ms']:.1f} ms"
        )

        # peer: scikit-learn brute force
        shape_model = NearestNeighbors(algorithm="brute", metric="manhattan").fit(index.shape_)
        vibration_model = NearestNeighbors(algorithm="brute", metric="cosine").fit(index.fingerprints_)
        peer_times = []
        peer_agree = []
        width = index.shape_.shape[1]
        for row in query_rows[:peer_queries]:
            started = time.perf_counter()
            distance, neighbor = shape_model.kneighbors(index.shape_[row : row + 1], n_neighbors=n)
            shape_similarity = np.empty(n)
            shape_similarity[neighbor[0]] = metrics.usr_similarity(distance[0] / width)
            distance, neighbor = vibration_model.kneighbors(index.fingerprints_[row : row + 1], n_neighbors=n)
            vibration_similarity = np.empty(n)
            vibration_similarity[neighbor[0]] = 1.0 - distance[0]
            blend = metrics.get("blend").combine({"shape": shape_similarity, "vibration": vibration_similarity},
                                                   weight=weight)
            blend[row] = -np.inf
            peer_top = np.argsort(-blend, kind="stable")[:k]
            peer_times.append(time.perf_counter() - started)
            ours = index.query(query_id=int(ids[row]), metric="blend", weight=weight, k=k, ranks="none")
            peer_agree.append(len({h.row for h in ours} & set(peer_top.tolist())) / k)
        del shape_model, vibration_model
        gc.collect()
        figures["peer_ms_median"] = _percentiles(peer_times)[0]
        figures["peer_ratio"] = figures["peer_ms_median"] / figures["query_ms_median"]
        figures["peer_overlap_at_10"] = float(np.mean(peer_agree))
        say(
            f"peer (scikit-learn NearestNeighbors brute, manhattan + cosine, {len(peer_times)} queries): "
            f"median {figures['peer_ms_median']:.1f} ms; peer / ours = {figures['peer_ratio']:.1f}x; "
            f"top-{k} overlap with ours {figures['peer_overlap_at_10']:.4f}"
        )

        if n <= disagreement_limit:
            started = time.perf_counter()
            found = find_disagreements(index, k=20, min_shape=0.9, max_vibration=0.6, min_vibration=0.9, max_shape=0.6)
            figures["disagreement_scan_s"] = time.perf_counter() - started
            figures["disagreements_found"] = len(found)
            say(
                f"disagreement scan (top-20 shape and vibration neighbor lists, whole catalogue): "
                f"{figures['disagreement_scan_s']:.1f} s, {len(found)} pairs past the thresholds"
            )
            # neighbor-list recall against exact queries on a sample
            lists = index.neighbors("vibration", 10)
            sample = rng.choice(n, size=min(100, n), replace=False)
            hit = 0
            for row in sample:
                exact = index.query(query_id=int(ids[row]), metric="vibration", k=10, exact=True, ranks="none")
                hit += len({h.row for h in exact} & set(lists.neighbor_rows[row].tolist()))
            figures["neighbor_recall_vibration_at_10"] = hit / (10 * sample.size)
            lists = index.neighbors("shape", 10)
            hit = 0
            for row in sample:
                exact = index.query(query_id=int(ids[row]), metric="shape", k=10, ranks="none")
                hit += len({h.row for h in exact} & set(lists.neighbor_rows[row].tolist()))
            figures["neighbor_recall_shape_at_10"] = hit / (10 * sample.size)
            say(
                f"neighbor-list recall at 10 vs exact ({sample.size} materials): shape "
                f"{figures['neighbor_recall_shape_at_10']:.4f}, vibration {figures['neighbor_recall_vibration_at_10']:.4f}"
            )
        else:
            say(f"disagreement scan skipped above {disagreement_limit:,} materials")
        results[int(n)] = figures
        del index
        gc.collect()
    return results




NEAR_TIE = 0.01  # overlay Tanimoto gap counted as a tie in the second recall figure


def overlay_recall(catalogue, *, queries: int = 20, k: int = 10, depths: tuple[int, ...] | None = None,
                   seed: int = 0, vibration_engine: str | None = None, say=print) -> dict:
    """Recall at k of the shape search as olibra runs it (moments, conformer-level moments, then
    overlay of `depth` candidates) against the exhaustive overlay ranking of the whole catalogue
    (kept in memory, so the speed-up is a lower bound), and the speed-up, per re-rank depth."""
    from library.search.catalogue_index import load_index
    from library.search.errors import SearchError
    from library.search.queries import indexed_query
    from library.search.substitutes import DEFAULT_RERANK_DEPTH, build_filter, find_substitutes, stored_ensembles

    depths = depths or (20, 40, DEFAULT_RERANK_DEPTH)
    options = {"vibration_engine": vibration_engine} if vibration_engine else {}
    cat_index = load_index(catalogue, use_cache=False, **options)
    ids = cat_index.index.ids_.tolist()
    if len(ids) < k + 1:
        raise SearchError(f"the catalogue has {len(ids)} indexed materials; the benchmark needs more than {k}")
    ensembles = stored_ensembles(catalogue, cat_index, ids)
    overlay_metric = metrics.get("overlay")
    rng = np.random.default_rng(seed)
    chosen = sorted(rng.choice(ids, size=min(queries, len(ids)), replace=False).tolist())
    everything = build_filter(include_retired=True, include_restricted=True)
    exhaustive_s = 0.0
    per_depth = {d: {"recall": [], "near": [], "seconds": 0.0} for d in depths}
    for query_id in chosen:
        started = time.perf_counter()
        others = [i for i in ids if i != query_id]
        scores = [overlay_metric.pair_similarity(ensembles[query_id], ensembles[c]) for c in others]
        exhaustive_s += time.perf_counter() - started
        order = np.argsort(-np.asarray(scores), kind="stable")
        exhaustive = {others[j] for j in order[:k]}
        kth_best = scores[order[k - 1]]
        score_of = dict(zip(others, scores))
        for depth, found in per_depth.items():
            started = time.perf_counter()
            outcome = find_substitutes(catalogue, indexed_query(cat_index, query_id), metric="shape", k=k,
                                       filters=everything, rerank_depth=depth, cat_index=cat_index)
            found["seconds"] += time.perf_counter() - started
            hits = [c.material.id for c in outcome.candidates]
            found["recall"].append(len(exhaustive & set(hits)) / k)
            found["near"].append(sum(score_of[h] >= kth_best - NEAR_TIE for h in hits) / k)
    say(f"two-stage shape search on the catalogue ({len(ids)} materials, {len(chosen)} queries): "
        f"exhaustive overlay ranking {exhaustive_s / len(chosen) * 1000:.0f} ms per query")
    figures = {"materials": len(ids), "queries": len(chosen),
               "exhaustive_s_per_query": exhaustive_s / len(chosen), "depths": {}}
    for depth, found in per_depth.items():
        row = {"recall_at_k": float(np.mean(found["recall"])), "near_tie_recall_at_k": float(np.mean(found["near"])),
               "two_stage_s_per_query": found["seconds"] / len(chosen), "speedup": exhaustive_s / found["seconds"]}
        figures["depths"][depth] = row
        say(f"  re-rank depth {depth:>3}: recall at {k} {row['recall_at_k']:.3f} (hits within {NEAR_TIE} of the "
            f"{k}th exhaustive score counted: {row['near_tie_recall_at_k']:.3f}); "
            f"{row['two_stage_s_per_query'] * 1000:.0f} ms per query, {row['speedup']:.1f}x faster")
    return figures
