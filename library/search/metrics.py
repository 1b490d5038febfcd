"""Similarity metrics: one object per metric, and the only place where each formula lives.

All similarities are on a 0-1 scale, larger meaning more alike. A metric reads one or more
*features*: per-material arrays the similarity index keeps in memory (see :data:`FEATURES`).

=========  ==================================================================================
shape      USR similarity ``1 / (1 + mean |a - b|)`` over the 72 shape values: USRCAT moments
           (J. Cheminform. 4, 27 (2012); USR, J. Comput. Chem. 28, 1711 (2007)) followed by
           the Chiral Shape Recognition moments (J. Mol. Graph. Model. 28, 368 (2009))
overlay    Gaussian shape Tanimoto of the best rotation-only superposition (J. Comput. Chem.
           17, 1653 (1996)); scored on demand from the stored conformers, not from the index
vibration  cosine of EVA fingerprints (J. Comput.-Aided Mol. Des. 11, 143 (1997)); the
           fingerprints are non-negative, so the cosine lies in 0-1
tunnelling ``1 / (1 + mean |a - b|)`` over receptor gaps 0-0.5 eV of the phonon-assisted
           tunnelling rate in decades above the receptor's floor rate (Phys. Rev. Lett. 98, 038101
           (2007); library.vibration.tunnelling): a receptor model of a contested hypothesis
blend      ``w * shape + (1 - w) * vibration``, ``w`` the shape weight in 0-1
blend-rank ``w * P(shape) + (1 - w) * P(vibration)``, P the percentile (0-1) of a similarity among
           the catalogue's pairs, so the two parts are on one scale and 0.5 is an even mix
structure  Tanimoto coefficient of Morgan radius-2, 2048-bit fingerprints (the 2D baseline)
=========  ==================================================================================

A metric's kernel, :meth:`Metric.similarity`, takes a query :class:`Block` and a catalogue
:class:`Block` and works in two modes: *cross* (every query row against every catalogue row,
``(Q, C)``) and *aligned* (rows paired element by element, with numpy broadcasting over the
leading axes: ``(n,)`` for ``n`` pairs, ``(R, C)`` for ``R`` queries each against its own ``C``
candidates). A metric may add a cheaper *first stage* over the whole catalogue (the compressed
fingerprints of the vibration metric) and a *candidate space* for catalogue-wide neighbor scans.

Adding a metric: subclass :class:`Metric` here, give it a name, the features it reads, a one-line
description and its kernel, and :func:`register` it. Index, neighbor lists, pair scores,
scorecard matrices, the CLI and the web loop over :func:`metrics`. See DEVELOPERS.md.

This module imports numpy only, so the command line can list metrics without loading the
chemistry stack.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

MORGAN_RADIUS = 2
MORGAN_BITS = 2048
DEFAULT_WEIGHT = 0.5  # the blend's shape weight unless the user says otherwise


# ---------------------------------------------------------------- features


@dataclass(frozen=True)
class Feature:
    """A per-material array kept by the similarity index.

    ``record_kind`` is the computed record it comes from (``None``: from the structure itself),
    ``arrays`` the record's arrays it is made of, in order; ``prepare`` turns user input (one row
    or many) into the stored form and raises ValueError naming ``label`` when it cannot.
    """

    name: str
    description: str
    record_kind: str | None
    arrays: tuple[str, ...]
    prepare: Callable[[object, str], np.ndarray]
    derived: Callable[[np.ndarray], dict[str, np.ndarray]] = lambda values: {}
    from_record: Callable[[np.ndarray], np.ndarray] | None = None  # record arrays -> the feature's values


def float_rows(value, label: str) -> np.ndarray:
    """A finite float32 matrix (rows x values) from one row or many."""
    array = np.asarray(value, dtype=np.float32)
    if array.ndim == 1:
        array = array[None, :]
    if array.ndim != 2:
        raise ValueError(f"{label} must be a 2-D array (materials x values), got shape {array.shape}")
    if array.shape[1] == 0:
        raise ValueError(f"{label} has no columns")
    if not np.isfinite(array).all():
        raise ValueError(f"{label} contains NaN or infinite values")
    return np.ascontiguousarray(array)


def unit_rows(value, label: str) -> np.ndarray:
    """Non-negative rows scaled to Euclidean norm 1 (fingerprints: cosine becomes a dot product)."""
    array = non_negative_rows(value, label, why=" (Gaussian-smoothed spectra)")
    norms = np.sqrt(np.einsum("ij,ij->i", array, array, dtype=np.float64))
    empty = np.flatnonzero(norms == 0)
    if empty.size:
        raise ValueError(f"{label} rows {empty[:5].tolist()} are all zero; cosine is undefined")
    if np.allclose(norms, 1.0, rtol=0.0, atol=1e-5):
        return array  # already unit rows (the index built from the database fills them so): no copy
    return np.ascontiguousarray(array / norms.astype(np.float32)[:, None])


def morgan_bits(smiles: str) -> np.ndarray:
    """Packed Morgan radius-2, 2048-bit fingerprint (256 uint8, big-endian bit order) of a SMILES."""
    from rdkit.Chem import rdFingerprintGenerator

    from library.structures import mol_from_smiles

    mol = mol_from_smiles(smiles)
    generator = rdFingerprintGenerator.GetMorganGenerator(radius=MORGAN_RADIUS, fpSize=MORGAN_BITS)
    return np.packbits(generator.GetFingerprintAsNumPy(mol).astype(bool))


def packed_bits(value, label: str) -> np.ndarray:
    """SMILES strings, 0/1 arrays of 2048 bits or packed 256-byte arrays -> (n, 256) uint8."""
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, np.ndarray) and len(value) and isinstance(value[0], str):
        packed = np.empty((len(value), MORGAN_BITS // 8), np.uint8)
        for i, smiles in enumerate(value):
            try:
                packed[i] = morgan_bits(smiles)
            except ValueError as error:
                raise ValueError(f"{label}[{i}]: {error}") from None
        return packed
    array = np.asarray(value)
    if array.ndim == 1:
        array = array[None, :]
    if array.ndim != 2:
        raise ValueError(f"{label} must be SMILES strings or a 2-D bit array, got shape {array.shape}")
    if array.shape[1] == MORGAN_BITS:
        if not np.isin(array, (0, 1)).all():
            raise ValueError(f"{label} has {MORGAN_BITS} columns, so it must hold only 0/1 bits")
        return np.packbits(array.astype(bool), axis=1)
    if array.shape[1] == MORGAN_BITS // 8 and array.dtype == np.uint8:
        return np.ascontiguousarray(array.copy())
    raise ValueError(f"{label} must have {MORGAN_BITS} 0/1 columns or {MORGAN_BITS // 8} packed uint8 columns, "
                     f"got shape {array.shape} dtype {array.dtype}")


def non_negative_rows(value, label: str, why: str = "") -> np.ndarray:
    """A finite, non-negative float32 matrix (rows x values) from one row or many; `why` is added to
    the message when a value is negative."""
    array = float_rows(value, label)
    if (array < 0).any():
        raise ValueError(f"{label} must be non-negative{why}")
    return array


def _row_sums(name: str) -> Callable[[np.ndarray], dict[str, np.ndarray]]:
    """Derived row sums ``NAME_sum`` (the one-to-many L1 kernel reads them)."""
    return lambda values: {f"{name}_sum": values.sum(axis=-1, dtype=np.float32)}


def _tunnelling_decades(rate_s: np.ndarray) -> np.ndarray:
    from library.vibration import tunnelling

    return tunnelling.decades_above_floor(rate_s).astype(np.float32)


def _bit_words(values: np.ndarray) -> dict[str, np.ndarray]:
    words = np.ascontiguousarray(values).view(np.uint64)
    return {"structure_words": words, "structure_count": np.bitwise_count(words).sum(axis=1, dtype=np.int32)}


FEATURES: dict[str, Feature] = {
    feature.name: feature for feature in (
        Feature("shape", "72 shape values: USRCAT (60) and chiral (12) moments, angstrom-based",
                "shape", ("usrcat", "chiral"), float_rows, _row_sums("shape")),
        Feature("fingerprint", "EVA fingerprint of the conformer-averaged harmonic spectrum, unit norm",
                "vibration", ("fingerprint",), unit_rows),
        Feature("fingerprint_ir", "EVA fingerprint with each mode weighted by its IR intensity, unit norm",
                "vibration", ("fingerprint_ir",), unit_rows),
        Feature("tunnelling", "Boltzmann-averaged inelastic tunnelling rate over receptor gaps 0-0.5 eV, in "
                "decades above the receptor floor rate", "tunnelling", ("tunnelling_spectrum",), non_negative_rows,
                _row_sums("tunnelling"), from_record=_tunnelling_decades),
        Feature("structure", "Morgan radius-2, 2048-bit fingerprint, packed", None, (), packed_bits, _bit_words),
    )
}


def feature_row(name: str, records: Mapping[str, Mapping[str, np.ndarray]], smiles: str):
    """One material's raw feature `name` from its computed records ({kind: arrays}) or its SMILES."""
    feature = FEATURES[name]
    if feature.record_kind is None:
        return smiles
    arrays = records[feature.record_kind]
    values = np.concatenate([np.asarray(arrays[part], np.float32).ravel() for part in feature.arrays])
    return values if feature.from_record is None else feature.from_record(values)


def record_arrays(kind: str) -> tuple[str, ...]:
    """The arrays of records of `kind` that some feature reads (what the index loads)."""
    return tuple(part for f in FEATURES.values() if f.record_kind == kind for part in f.arrays)


def prepare_feature(name: str, value, label: str | None = None) -> dict[str, np.ndarray]:
    """The stored form of feature `name` (rows) plus the arrays derived from it."""
    if name not in FEATURES:
        raise ValueError(f"unknown feature {name!r}; known: {', '.join(FEATURES)}")
    feature = FEATURES[name]
    values = feature.prepare(value, label or name)
    return {name: values, **feature.derived(values)}


@dataclass(frozen=True)
class Block:
    """Feature arrays of some materials: rows of a fitted index, or a query.

    ``arrays`` maps feature names (and their derived arrays such as ``shape_sum``) to arrays whose
    first axes are the materials. ``index`` is the index the rows came from (None for a query),
    for metrics that read fitted state.
    """

    arrays: Mapping[str, np.ndarray]
    index: object = None

    def __getitem__(self, name: str) -> np.ndarray:
        return self.arrays[name]

    def get(self, name: str, default=None):
        return self.arrays.get(name, default)

    def has(self, features: Sequence[str]) -> bool:
        return all(name in self.arrays for name in features)

    def take(self, rows) -> "Block":
        """The block's rows `rows` (any integer index array; a 2-D array gives 2-D leading axes)."""
        return Block({name: values[rows] for name, values in self.arrays.items()}, self.index)

    def expand(self, axis: int) -> "Block":
        """The block with a length-1 axis inserted at `axis` (for aligned broadcasting)."""
        return Block({name: np.expand_dims(values, axis) for name, values in self.arrays.items()}, self.index)

    @property
    def size(self) -> int:
        return len(next(iter(self.arrays.values())))


# ---------------------------------------------------------------- formulas


def usr_similarity(mean_absolute_difference):
    """USR similarity ``1 / (1 + mean |a - b|)`` of moment vectors (J. Comput. Chem. 28, 1711 (2007))."""
    return 1.0 / (1.0 + mean_absolute_difference)


def tanimoto(intersection, count_a, count_b):
    """Tanimoto coefficient ``c / (a + b - c)`` of bit sets (0 when both are empty)."""
    intersection = np.asarray(intersection, dtype=np.float64)
    union = np.asarray(count_a, dtype=np.float64) + np.asarray(count_b, dtype=np.float64) - intersection
    return np.divide(intersection, union, out=np.zeros(np.broadcast(intersection, union).shape),
                     where=union > 0)


def check_weight(weight: float) -> float:
    """The blend's shape weight, checked: a number in 0-1."""
    value = float(weight)
    if not 0.0 <= value <= 1.0:
        raise ValueError(f"weight (shape share of the blend) must be in 0-1, got {weight!r}")
    return value


# ---------------------------------------------------------------- metric objects


@dataclass(frozen=True)
class Metric:
    """One similarity metric (subclasses supply the kernel).

    ``features``: index features the kernel reads. ``records``: computed record kinds a material
    needs before the metric can score it. ``components``: for metrics built from others (the
    blend), their names; such a metric gives :meth:`combine` instead of its own kernel.
    ``indexed``: False for metrics scored on demand from stored records (overlay), which the index
    cannot compute for the whole catalogue.
    """

    name: str
    description: str
    features: tuple[str, ...] = ()
    records: tuple[str, ...] = ()
    components: tuple[str, ...] = ()
    indexed: bool = True
    uses_weight: bool = False

    def similarity(self, query: Block, catalogue: Block, *, aligned: bool = False,
                   weight: float = DEFAULT_WEIGHT) -> np.ndarray:
        """Similarities (0-1): cross ``(Q, C)``, or aligned with broadcasting (see module docstring)."""
        if not self.components:
            raise NotImplementedError(f"metric {self.name!r} has no kernel")
        parts = {name: get(name).similarity(query, catalogue, aligned=aligned, weight=weight)
                 for name in self.components}
        return self.combine(parts, weight=weight)

    def combine(self, parts: Mapping[str, np.ndarray], *, weight: float = DEFAULT_WEIGHT,
                index=None) -> np.ndarray:
        """A composite metric's similarity from its components' similarities (`index`: the fitted
        index the scores come from, for composites that read catalogue-wide distributions)."""
        raise NotImplementedError(f"metric {self.name!r} is not composite")

    def first_stage(self, index, query: Block, *, weight: float = DEFAULT_WEIGHT,
                    full: Callable[[str], np.ndarray] | None = None) -> np.ndarray | None:
        """Approximate scores of the query against the whole catalogue (larger = more alike), or None
        when the exact kernel is cheap enough. `full(name)` gives another metric's full scores."""
        return None

    def candidate_space(self, index, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """Vectors Y and column bias b with ``y_q . y_c + b_c`` larger for more alike materials, for
        grouped neighbor scans; None when the metric must be scanned exactly."""
        return None


@dataclass(frozen=True)
class MeanDifferenceMetric(Metric):
    """``1 / (1 + mean |a - b|)`` over the values of the metric's one feature (the USR form)."""

    def similarity(self, query, catalogue, *, aligned=False, weight=DEFAULT_WEIGHT):
        name = self.features[0]
        a, b = query[name], catalogue[name]
        width = a.shape[-1]
        if aligned:
            l1 = np.abs(a - b).sum(axis=-1, dtype=np.float64)
        elif a.shape[0] == 1:
            l1 = _l1_one_to_many(a[0], b, catalogue.get(f"{name}_sum"))[None, :]
        else:
            from scipy.spatial.distance import cdist

            l1 = cdist(a, b, "cityblock")
        return usr_similarity(l1 / width).astype(np.float32)

    def candidate_space(self, index, rows):
        vectors = index.features_[self.features[0]][rows]
        # Euclidean proxy for the L1 distance: -|q - c|^2 / 2 up to a per-query constant
        return vectors, -0.5 * np.einsum("ij,ij->i", vectors, vectors)


def _l1_one_to_many(query: np.ndarray, rows: np.ndarray, row_sums: np.ndarray | None) -> np.ndarray:
    """sum |q - r| for every row, as sum(q) + sum(r) - 2 sum(min(q, r)): one pass over the rows."""
    from library._threads import one_blas_thread

    n, width = rows.shape
    if row_sums is None:
        row_sums = rows.sum(axis=1, dtype=np.float32)
    out = np.empty(n, np.float32)
    ones = np.ones(width, np.float32)
    block = 4096  # stays in cache
    buffer = np.empty((min(block, n), width), np.float32)
    with one_blas_thread():
        for start in range(0, n, block):
            stop = min(start + block, n)
            part = buffer[: stop - start]
            np.minimum(rows[start:stop], query, out=part)
            np.dot(part, ones, out=out[start:stop])
    out *= np.float32(-2.0)
    out += row_sums
    out += np.float32(query.sum(dtype=np.float32))
    return np.maximum(out, np.float32(0.0), out=out)


def window_columns(width: int, window_cm1: tuple[float, float]) -> slice:
    """The fingerprint columns inside `window_cm1` on the stored fingerprints' grid (the record
    settings, library.vibration.spectrum.FINGERPRINT_DEFAULTS) of `width` evenly spaced points."""
    from library.vibration.spectrum import FINGERPRINT_DEFAULTS

    low, high = FINGERPRINT_DEFAULTS["min_cm1"], FINGERPRINT_DEFAULTS["max_cm1"]
    step = (high - low) / (width - 1)
    return slice(int(np.ceil((window_cm1[0] - low) / step - 1e-9)), int(np.floor((window_cm1[1] - low) / step + 1e-9)) + 1)


@dataclass(frozen=True)
class VibrationMetric(Metric):
    """Cosine of fingerprints (the metric's one feature), optionally over a window of the grid only."""

    window_cm1: tuple[float, float] | None = None

    def _vectors(self, block: Block) -> np.ndarray:
        values = block[self.features[0]]
        if self.window_cm1 is None:
            return values
        part = values[..., window_columns(values.shape[-1], self.window_cm1)]
        norms = np.sqrt(np.einsum("...d,...d->...", part, part))
        return part / np.where(norms > 0, norms, np.inf)[..., None].astype(np.float32)

    def similarity(self, query, catalogue, *, aligned=False, weight=DEFAULT_WEIGHT):
        a, b = self._vectors(query), self._vectors(catalogue)
        if aligned:
            dot = np.einsum("...d,...d->...", a, b)
        else:
            from library._threads import one_blas_thread

            with one_blas_thread() if a.shape[0] == 1 else contextlib.nullcontext():
                dot = a @ b.T
        return np.clip(dot, 0.0, 1.0).astype(np.float32)

    def first_stage(self, index, query, *, weight=DEFAULT_WEIGHT, full=None):
        if getattr(index, "compressed_", None) is None or self.features != ("fingerprint",) or self.window_cm1:
            return None
        from library._threads import one_blas_thread

        fingerprint = query["fingerprint"][0]
        with one_blas_thread():
            projected = (fingerprint - index.pca_mean_) @ index.pca_basis_.T
            out = index.compressed_ @ projected
        out += index.row_bias_
        out += np.float32(float(fingerprint @ index.pca_mean_) - index.mean_square_)
        return out

    def candidate_space(self, index, rows):
        if self.features == ("fingerprint",) and not self.window_cm1 and getattr(index, "compressed_", None) is not None:
            return index.compressed_[rows], index.row_bias_[rows]
        vectors = self._vectors(index.block(rows, self.features))
        return vectors, np.zeros(len(rows), np.float32)


@dataclass(frozen=True)
class BlendMetric(Metric):
    def combine(self, parts, *, weight=DEFAULT_WEIGHT, index=None):
        shape, vibration = parts["shape"], parts["vibration"]
        return (weight * shape + (1 - weight) * vibration).astype(np.float32)

    def first_stage(self, index, query, *, weight=DEFAULT_WEIGHT, full=None):
        if getattr(index, "compressed_", None) is None or full is None:
            return None
        return self.combine({name: full(name) for name in self.components}, weight=weight)


REFERENCE_PAIRS = 20_000  # random catalogue pairs whose scores define each component's percentiles


def reference_scores(index, name: str, *, pairs: int = REFERENCE_PAIRS, seed: int = 0) -> np.ndarray:
    """Sorted similarities of metric `name` over a seeded sample of catalogue pairs (all pairs when
    fewer), kept on the fitted index: the catalogue-wide distribution percentiles are read from."""
    cache = index.__dict__.setdefault("_reference_scores", {})
    if name not in cache:
        n = index.size
        if n < 2:
            raise ValueError("percentiles need an index of at least 2 materials")
        if n * (n - 1) // 2 <= pairs:
            a, b = np.triu_indices(n, 1)
        else:
            rng = np.random.default_rng(seed)
            a = rng.integers(0, n, size=pairs)
            b = rng.integers(0, n - 1, size=pairs)
            b = b + (b >= a)
        metric = get(name)
        features = features_of(metric)
        values = metric.similarity(index.block(a, features), index.block(b, features), aligned=True)
        cache[name] = np.sort(np.asarray(values, np.float64))
    return cache[name]


def percentile_scores(index, name: str, values: np.ndarray) -> np.ndarray:
    """Mid-rank percentile (0-1) of similarities `values` of metric `name` among the catalogue's pairs."""
    reference = reference_scores(index, name)
    values = np.asarray(values, np.float64)
    below = np.searchsorted(reference, values, side="left")
    upto = np.searchsorted(reference, values, side="right")
    return ((below + upto) / (2.0 * reference.size)).astype(np.float32)


@dataclass(frozen=True)
class RankBlendMetric(Metric):
    """Weighted mean of component percentiles over the catalogue's pairs: 0.5 is an even mix.

    ``fixed_weights`` ((metric, weight), ...) for a calibrated blend; otherwise the first component
    gets ``w`` and the second ``1 - w``. Percentiles come from the fitted index the catalogue block
    belongs to (see :func:`reference_scores`).
    """

    fixed_weights: tuple[tuple[str, float], ...] = ()
    stale: bool = False
    needs_index: bool = True  # scored only through a fitted index (percentiles of its catalogue pairs)

    def weights(self, weight: float) -> dict[str, float]:
        if self.fixed_weights:
            return dict(self.fixed_weights)
        return {self.components[0]: weight, self.components[1]: 1.0 - weight}

    def similarity(self, query, catalogue, *, aligned=False, weight=DEFAULT_WEIGHT):
        index = catalogue.index if catalogue.index is not None else query.index
        if index is None:
            raise ValueError(f"metric {self.name!r} reads percentiles from a fitted index; score it through one")
        parts = {name: get(name).similarity(query, catalogue, aligned=aligned, weight=weight)
                 for name in self.components}
        return self.combine(parts, weight=weight, index=index)

    def combine(self, parts, *, weight=DEFAULT_WEIGHT, index=None):
        if index is None:
            raise ValueError(f"metric {self.name!r} reads percentiles from a fitted index; score it through one")
        total = None
        for name, share in self.weights(weight).items():
            term = share * percentile_scores(index, name, parts[name])
            total = term if total is None else total + term
        return np.asarray(total, np.float32)

    def first_stage(self, index, query, *, weight=DEFAULT_WEIGHT, full=None):
        if getattr(index, "compressed_", None) is None or full is None:
            return None
        return self.combine({name: full(name) for name in self.components}, weight=weight, index=index)


def register_calibrated(name: str, weights: Mapping[str, float], description: str, *, stale: bool = False) -> Metric:
    """Register (or replace) a calibrated blend: fixed non-negative weights on component percentiles."""
    previous = _REGISTRY.get(name)
    if previous is not None and not (isinstance(previous, RankBlendMetric) and previous.fixed_weights):
        raise ValueError(f"{name!r} is a built-in metric; give the calibrated metric another name")
    components = tuple(m for m, w in weights.items() if w > 0)
    if not components:
        raise ValueError(f"calibrated metric {name!r} has no positive weight")
    records = tuple(dict.fromkeys(r for m in components for r in get(m).records))
    metric = RankBlendMetric(name, description, components=components, records=records,
                             fixed_weights=tuple((m, float(weights[m])) for m in components), stale=stale)
    _REGISTRY.pop(name, None)
    return register(metric)


@dataclass(frozen=True)
class StructureMetric(Metric):
    def similarity(self, query, catalogue, *, aligned=False, weight=DEFAULT_WEIGHT):
        count_a, count_b = query["structure_count"], catalogue["structure_count"]
        if aligned:
            words_a, words_b = query["structure_words"], catalogue["structure_words"]
            inter = np.bitwise_count(words_a & words_b).sum(axis=-1, dtype=np.int32)
            return tanimoto(inter, count_a, count_b).astype(np.float32)
        if query.size == 1:
            words = query["structure_words"][0]
            inter = np.bitwise_count(catalogue["structure_words"] & words).sum(axis=1, dtype=np.int32)[None, :]
        else:
            inter = np.asarray((_sparse_bits(query["structure"]) @ _sparse_bits(catalogue["structure"]).T)
                               .todense(), np.float32)
        return tanimoto(inter, count_a[:, None], count_b[None, :]).astype(np.float32)


def _sparse_bits(packed: np.ndarray):
    from scipy import sparse

    return sparse.csr_matrix(np.unpackbits(packed, axis=1).astype(np.float32))


@dataclass(frozen=True)
class OverlayMetric(Metric):
    """Scored on demand from stored conformers (see library.search.substitutes)."""

    def pair_similarity(self, ensemble_a, ensemble_b) -> float:
        """Gaussian shape Tanimoto (0-1) of the best rotation-only overlay of two conformer ensembles."""
        from library import shape

        return shape.overlay_similarity(ensemble_a, ensemble_b).shape_tanimoto


@dataclass(frozen=True)
class HandednessMetric(Metric):
    """Scored on demand from stored conformers: how little the pair's handedness sets it apart.

    With T the Gaussian shape Tanimoto of the best rotation-only overlay (J. Comput. Chem. 17, 1653
    (1996)), ``handedness(A, B) = 1 - max(0, T(A, mirror B) - T(A, B))``: the overlap a pair gains
    when one partner is reflected, the idea behind overlap-based chirality measures (J. Am. Chem.
    Soc. 114, 6006 (1992), from memory). It is 1 when reflecting changes nothing and falls for
    mirror-image pairs (T(A, mirror B) = 1 by construction, so the score is T(A, B)). When either
    material is superposable on its own mirror image (achiral, meso, or stereo left open), the pair
    and its reflected pair are the same pair, so the score is exactly 1: neutral, not noise.
    """

    def pair_similarity(self, ensemble_a, ensemble_b) -> float:
        from library import conformers, shape

        if any(conformers.superposable_on_mirror_image(e.members[0].mol) for e in (ensemble_a, ensemble_b)):
            return 1.0
        direct = shape.overlay_similarity(ensemble_a, ensemble_b).shape_tanimoto
        mirrored = shape.overlay_similarity(ensemble_a, conformers.reflected(ensemble_b)).shape_tanimoto
        return float(1.0 - max(0.0, mirrored - direct))


# ---------------------------------------------------------------- registry

_REGISTRY: dict[str, Metric] = {}


def register(metric: Metric) -> Metric:
    """Add a metric to the registry (its name must be new); returns it."""
    if metric.name in _REGISTRY:
        raise ValueError(f"a metric named {metric.name!r} is already registered")
    unknown = [f for f in metric.features if f not in FEATURES]
    if unknown:
        raise ValueError(f"metric {metric.name!r} reads unknown feature(s) {unknown}")
    missing = [c for c in metric.components if c not in _REGISTRY]
    if missing:
        raise ValueError(f"metric {metric.name!r} is built from unregistered metric(s) {missing}")
    _REGISTRY[metric.name] = metric
    return metric


def get(name: str) -> Metric:
    """The registered metric called `name` (ValueError naming the known ones otherwise)."""
    try:
        return _REGISTRY[name]
    except (KeyError, TypeError):
        raise ValueError(f"metric must be one of {', '.join(_REGISTRY)}, got {name!r}") from None


def metrics(*, indexed: bool | None = None) -> tuple[Metric, ...]:
    """Registered metrics in display order (optionally only those the index scores, or only the others)."""
    return tuple(m for m in _REGISTRY.values() if indexed is None or m.indexed == indexed)


def names(*, indexed: bool | None = None) -> tuple[str, ...]:
    """Names of :func:`metrics`, in display order."""
    return tuple(m.name for m in metrics(indexed=indexed))


def features_of(metric: Metric) -> tuple[str, ...]:
    """Every feature a metric reads, its components' included."""
    found = list(metric.features)
    for component in metric.components:
        found += [f for f in features_of(get(component)) if f not in found]
    return tuple(found)


register(MeanDifferenceMetric(
    "shape", "USR similarity 1/(1 + mean |a - b|) of USRCAT and chiral moments, Boltzmann-averaged",
    features=("shape",), records=("shape",)))
register(OverlayMetric(
    "overlay", "Gaussian shape Tanimoto of the best rotation-only overlay of the most populated conformers",
    records=("shape",), indexed=False))
register(HandednessMetric(
    "handedness", "1 - the overlay a pair gains when one partner is mirrored: below 1 only for pairs that "
    "differ in handedness, 1 when either is achiral", records=("shape",), indexed=False))
register(VibrationMetric(
    "vibration", "cosine of EVA fingerprints of the conformer-averaged harmonic spectra",
    features=("fingerprint",), records=("vibration",)))
register(VibrationMetric(
    "vibration-ir", "cosine of EVA fingerprints with each mode weighted by its IR intensity",
    features=("fingerprint_ir",), records=("vibration",)))
register(VibrationMetric(
    "vibration-window", "cosine of EVA fingerprints over 400-2400 cm-1 only, below the X-H stretches that "
    "dominate every organic spectrum", features=("fingerprint",), records=("vibration",),
    window_cm1=(400.0, 2400.0)))
register(MeanDifferenceMetric(
    "tunnelling", "1/(1 + mean |a - b|) of phonon-assisted tunnelling rates over receptor gaps, in decades above "
    "the receptor floor (Phys. Rev. Lett. 98, 038101 (2007)): a model of a contested hypothesis",
    features=("tunnelling",), records=("tunnelling",)))
register(BlendMetric(
    "blend", "w * shape + (1 - w) * vibration, w the shape weight (0-1)",
    components=("shape", "vibration"), records=("shape", "vibration"), uses_weight=True))
register(RankBlendMetric(
    "blend-rank", "w * percentile(shape) + (1 - w) * percentile(vibration), percentiles over the catalogue's "
    "pairs, so w = 0.5 is an even mix", components=("shape", "vibration"), records=("shape", "vibration"),
    uses_weight=True))
register(StructureMetric(
    "structure", "Tanimoto of Morgan radius-2, 2048-bit fingerprints: the 2D baseline",
    features=("structure",)))

