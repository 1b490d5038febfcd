"""How much a pair score owes to which conformers the search happened to find.

A material's shape vector and fingerprint are Boltzmann-weighted means over a finite conformer
sample. Resampling that sample (a bootstrap over conformers, Ann. Stat. 7, 1 (1979)) and
re-scoring the pair gives the spread of each score under conformer sampling noise:

* each resample draws, within every stereoisomer, as many conformers as it has, uniformly with
  replacement, and weights each drawn conformer by its Boltzmann weight times how often it was
  drawn (renormalised so each stereoisomer keeps its share);
* the shape vector is the weighted mean of the conformers' stored shape values, the fingerprints
  are rebuilt from the conformers' stored modes with the record's own settings;
* materials whose conformers come from one embedded ensemble (mirror images and isotopologues)
  draw the same resamples, because a re-embedding would change them together: an enantiomer pair
  keeps vibration 1 and an isotopologue pair shape 1 in every resample.

The spread reported is the standard deviation over resamples, in similarity units (0-1). Metrics
scored on demand (overlay, handedness), the 2D structure metric, the tunnelling metric (its record
keeps only the averaged spectrum) and the percentile blends are not resampled.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, replace

import numpy as np

from library.search import metrics as metric_registry

RESAMPLES = 48
NOISE_SPREADS = 2.0  # a gap smaller than this many combined spreads is within conformer noise


@dataclass(frozen=True)
class ResampledFeatures:
    """Feature rows of one material over the resamples: {feature: (resamples, width)}."""

    features: dict[str, np.ndarray]


def _ensemble_key(shape_summary: dict, conformers: int) -> str:
    return "|".join(sorted(shape_summary.get("ensemble_of") or [])) + f"#{conformers}"


def _draws(rng: np.random.Generator, weights: np.ndarray, stereoisomers: np.ndarray,
           resamples: int) -> np.ndarray:
    """(resamples, conformers) resampled weights, each row summing to 1."""
    out = np.zeros((resamples, len(weights)))
    for stereo in np.unique(stereoisomers):
        members = np.flatnonzero(stereoisomers == stereo)
        share = weights[members].sum()
        picks = rng.integers(0, len(members), size=(resamples, len(members)))
        counts = np.stack([np.bincount(row, minlength=len(members)) for row in picks])
        drawn = counts * weights[members][None, :]
        totals = drawn.sum(axis=1, keepdims=True)
        out[:, members] = share * drawn / np.where(totals > 0, totals, 1.0)
    return out / out.sum(axis=1, keepdims=True)


def _rng(key: str, seed: int) -> np.random.Generator:
    digest = hashlib.sha256(f"{seed}:{key}".encode()).digest()
    return np.random.default_rng(int.from_bytes(digest[:8], "little"))


def resample_material(shape_arrays: dict, shape_summary: dict, vibration_arrays: dict | None,
                      vibration_summary: dict | None, *, resamples: int = RESAMPLES,
                      seed: int = 0) -> ResampledFeatures:
    """A material's shape vector and fingerprints over `resamples` conformer bootstrap resamples."""
    from library import computations
    from library.vibration.spectrum import VibrationSpectrum

    features = {}
    weights = np.asarray(shape_arrays["conformer_weight"], float)
    if "conformer_shape" not in shape_arrays:
        raise ValueError("the shape record predates per-conformer shape values; recompute it")
    key = _ensemble_key(shape_summary, len(weights))
    drawn = _draws(_rng("shape:" + key, seed), weights,
                   np.asarray(shape_arrays["conformer_stereoisomer"]).astype(int), resamples)
    features["shape"] = (drawn @ np.asarray(shape_arrays["conformer_shape"], float)).astype(np.float32)
    if vibration_arrays is not None:
        spec = VibrationSpectrum.from_arrays(vibration_arrays, vibration_summary)
        spec_weights = np.array([c.weight for c in spec.conformers])
        stereo = np.array([c.stereoisomer for c in spec.conformers])
        drawn = _draws(_rng("vibration:" + key, seed), spec_weights, stereo, resamples)
        rows: dict[str, list[np.ndarray]] = {}
        for row in drawn:
            again = replace(spec, conformers=tuple(replace(c, weight=float(w))
                                                   for c, w in zip(spec.conformers, row)))
            for name, values in computations.fingerprint_arrays(again).items():
                rows.setdefault(name, []).append(values)
        features.update({name: np.stack(values) for name, values in rows.items()})
    return ResampledFeatures(features)


def pair_spreads(a: ResampledFeatures, b: ResampledFeatures, *,
                 weight: float = metric_registry.DEFAULT_WEIGHT) -> dict[str, float]:
    """{metric: standard deviation of its pair score over the resamples} for every indexed metric
    whose features both materials have resampled (metrics read from a fitted index's catalogue-wide
    distribution, such as blend-rank, are left out: resampled features are outside any index)."""
    out = {}
    for metric in metric_registry.metrics(indexed=True):
        if getattr(metric, "needs_index", False):
            continue
        needed = metric_registry.features_of(metric)
        if not all(f in a.features and f in b.features for f in needed):
            continue
        blocks = [metric_registry.Block({name: values for f in needed
                                         for name, values in metric_registry.prepare_feature(f, side.features[f]).items()})
                  for side in (a, b)]
        scores = metric.similarity(blocks[0], blocks[1], aligned=True, weight=weight)
        out[metric.name] = float(np.std(scores.astype(np.float64)))
    return out


def load_resampled(catalogue, material_ids, vibration_engine: str, *, resamples: int = RESAMPLES,
                   seed: int = 0) -> dict[int, ResampledFeatures]:
    """Resampled features of some catalogue materials from their stored records (materials whose
    records lack what resampling needs are left out)."""
    from library.catalogue import records
    from library.search.catalogue_index import record_stamps

    stamps = record_stamps(vibration_engine)
    ids = sorted(set(material_ids))
    with catalogue.reading() as session:
        shape = records.load_records(session, "shape", stamps["shape"].engine_name, material_ids=ids)
        vibration = records.load_records(session, "vibration", stamps["vibration"].engine_name, material_ids=ids)
    out = {}
    for material_id in ids:
        if material_id not in shape:
            continue
        vib = vibration.get(material_id)
        try:
            out[material_id] = resample_material(
                shape[material_id].arrays, shape[material_id].summary,
                None if vib is None else vib.arrays, None if vib is None else vib.summary,
                resamples=resamples, seed=seed)
        except (ValueError, KeyError):
            continue
    return out


def within_noise(gap: float, spreads: dict[str, float], metrics: tuple[str, ...]) -> bool | None:
    """True when `gap` between two metrics' scores is smaller than NOISE_SPREADS combined spreads
    (None when either spread is unknown)."""
    if not all(m in spreads for m in metrics):
        return None
    combined = float(np.sqrt(sum(spreads[m] ** 2 for m in metrics)))
    return abs(gap) < NOISE_SPREADS * combined
