"""Scorecard statistics on a synthetic catalogue: permutations, bootstrap resamples and the whole report.

The catalogue is synthetic (random points on a few latent axes, so the metrics correlate with the
observations and with each other as real ones do); only the timings mean anything.
"""

from __future__ import annotations

import time

import numpy as np

from library.search import scorecard

METRICS = ("shape", "overlay", "vibration", "blend", "structure")


def synthetic(materials: int, *, seed: int = 0) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """(observed similarity, one similarity matrix per metric) over `materials` synthetic materials."""
    rng = np.random.default_rng(seed)
    latent = rng.normal(size=(materials, 4))

    def similarity(noise: float) -> np.ndarray:
        points = latent + noise * rng.normal(size=latent.shape)
        distance = np.sqrt(((points[:, None, :] - points[None, :, :]) ** 2).sum(-1))
        out = np.exp(-distance / distance.mean())
        return (out + out.T) / 2

    return similarity(1.5), {name: similarity(1.0 + i / 2) for i, name in enumerate(METRICS)}


def run(materials: int = 1000, permutations: int = 999, resamples: int = 1000) -> None:
    started = time.perf_counter()
    observed, metrics = synthetic(materials)
    print(f"synthetic catalogue: {materials} materials, {materials * (materials - 1) // 2} pairs, "
          f"{len(metrics)} metrics ({time.perf_counter() - started:.2f} s to build)")
    matrices = list(metrics.values())
    started = time.perf_counter()
    scorecard.mantel_tests(observed, matrices, controls=[metrics["structure"]], permutations=permutations)
    mantel = time.perf_counter() - started
    print(f"Mantel and partial Mantel, {permutations} permutations, all metrics: {mantel:.2f} s")
    started = time.perf_counter()
    scorecard.bootstrap_values(observed, matrices, resamples=resamples)
    boot = time.perf_counter() - started
    print(f"bootstrap, {resamples} resamples, all metrics: {boot:.2f} s")
    print(f"permutations + resamples together: {mantel + boot:.2f} s (target at most 10 s)")
    started = time.perf_counter()
    report = scorecard.score_report(metrics, observed=observed, permutations=permutations, resamples=resamples)
    print(f"whole report (adds precision at k, paired comparisons of the leader with "
          f"{len(report.comparisons)} metrics): {time.perf_counter() - started:.2f} s")
