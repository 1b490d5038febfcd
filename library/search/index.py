"""Similarity index over the catalogue: every registered metric, ranked in memory.

The metrics and their formulas live in :mod:`library.search.metrics`; this module keeps the
per-material feature matrices (float32 shape values, unit-norm fingerprints, packed structure
bits), filters, and ranks with the metrics' kernels. Everything loops over the metric registry.

Memory: for N materials with an 801-value fingerprint and a 72-value shape vector the index holds
about ``N * (801 + 72) * 4`` bytes (3.5 GB at one million materials) plus, when compression is
on, ``N * pca_components * 4`` bytes for the compressed fingerprints and 256 bytes per material
for the structure bits. No N x N matrix is ever formed, except by :meth:`similarity_matrix`,
which is for a few thousand materials at most.

Speed: metrics with a first stage (vibration, blend) run in two stages when ``pca_components`` is
set: the first stage scores every material with the PCA-compressed fingerprints (exactly
``q . x = (q - m) . (x - m) + q . m + x . m - m . m`` with the centered part projected), keeps the
best few hundred, and a second stage re-scores those exactly. Other metrics are always exact.

Threads: a fitted (or loaded) index is read-only apart from one cache of coarse groupings for
neighbor scans, which is filled under a lock, so one index may answer queries from many threads.
"""

from __future__ import annotations

import json
import math
import os
import threading
from collections.abc import Callable, Iterable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np

from library.search import metrics as metric_registry
from library.search.metrics import Block, check_weight

RANK_MODES = ("exact", "estimated", "none")
FORMAT_VERSION = 3
SHAPE_PROBE_SHARE = 12  # neighbors(): groups probed = clusters / share, unless `probes` is given
VIBRATION_PROBE_SHARE = 3
PROPERTY_KEYS = ("molecular_weight", "logp", "descriptors", "status", "restricted")
STATUSES = ("active", "retired")
CONFIG_KEYS = ("pca_components", "pca_sample_size", "candidate_multiplier", "min_candidates",
               "neighbor_candidates", "exact_below", "clusters", "probes", "n_jobs", "random_state")

#: Callback that re-scores candidates, e.g. by Gaussian shape overlay:
#: ``(query_id, candidate_ids) -> scores in 0-1``, one per candidate, same order.
OverlayScorer = Callable[[object, Sequence[object]], Sequence[float]]


def indexed_metrics() -> tuple[str, ...]:
    """Names of the metrics the index can rank by (the registry's indexed metrics)."""
    return metric_registry.names(indexed=True)


class _Columns(NamedTuple):
    """Sparse columns: the rows of column j are indices[indptr[j]:indptr[j + 1]], in ascending order."""

    indptr: np.ndarray
    indices: np.ndarray


class RevisionMismatchError(ValueError):
    """A cached index was built from a different catalogue revision."""


@dataclass(frozen=True)
class SearchFilter:
    """Restrictions on which catalogue materials a search may return.

    Ranges are inclusive; a material with an unknown (NaN) value fails a range.
    ``molecular_weight_range`` is in g/mol; ``logp_range`` is computed log10 of the
    octanol/water partition coefficient (Crippen), dimensionless.
    """

    molecular_weight_range: tuple[float, float] | None = None
    logp_range: tuple[float, float] | None = None
    must_have: frozenset[str] = frozenset()
    must_not_have: frozenset[str] = frozenset()
    exclude_retired: bool = True
    exclude_restricted: bool = False
    exclude_ids: frozenset = frozenset()

    def __post_init__(self) -> None:
        for name in ("must_have", "must_not_have", "exclude_ids"):
            value = getattr(self, name)
            if isinstance(value, str):
                raise ValueError(f"{name} must be a collection of values, not the single string {value!r}")
            object.__setattr__(self, name, frozenset(value))
        for name in ("molecular_weight_range", "logp_range"):
            value = getattr(self, name)
            if value is None:
                continue
            if len(value) != 2 or not float(value[0]) <= float(value[1]):
                raise ValueError(f"{name} must be (low, high) with low <= high, got {value!r}")
            object.__setattr__(self, name, (float(value[0]), float(value[1])))
        overlap = self.must_have & self.must_not_have
        if overlap:
            raise ValueError(f"descriptors both required and excluded: {sorted(overlap)}")


@dataclass(frozen=True)
class Hit:
    """One search result.

    ``rank`` and ``score`` are under the metric the search ranked by (1 = best).
    ``scores`` holds every available metric's similarity (0-1) for this material;
    ``ranks`` its rank under each metric among the filtered catalogue (see
    :meth:`SimilarityIndex.query` for how exact they are).
    """

    id: object
    row: int
    rank: int
    score: float
    scores: Mapping[str, float]
    ranks: Mapping[str, int]


@dataclass(frozen=True)
class NeighborLists:
    """Catalogue-wide neighbor lists under one metric.

    ``rows`` are the catalogue rows that were searched (all rows passing the filter),
    ``neighbor_rows[i]`` the best ``k`` other rows for ``rows[i]`` in decreasing
    similarity (``-1`` pads short lists), ``scores[i]`` their exact similarities
    (0-1, NaN pads). ``exact`` says whether candidates came from a full scan.
    """

    metric: str
    rows: np.ndarray
    neighbor_rows: np.ndarray
    scores: np.ndarray
    exact: bool


def _ordered_top(scores: np.ndarray, count: int) -> np.ndarray:
    """Indices of the ``count`` largest finite scores, best first, ties by lower index."""
    valid = int(np.count_nonzero(scores > -np.inf))
    count = min(count, valid)
    if count <= 0:
        return np.empty(0, np.int64)
    if count < scores.size:
        part = np.argpartition(-scores, count - 1)[:count]
        # ties at the cut: include every index whose score equals the cut score
        cut = scores[part].min()
        part = np.flatnonzero(scores >= cut)
    else:
        part = np.arange(scores.size)
    order = np.lexsort((part, -scores[part]))
    return part[order][:count]


def _row_top(scores: np.ndarray, count: int) -> np.ndarray:
    """Per-row positions of the ``count`` largest scores (best first) of a 2-D array."""
    count = min(count, scores.shape[1])
    if count <= 0:
        return np.empty((scores.shape[0], 0), np.int64)
    if count < scores.shape[1]:
        part = np.argpartition(-scores, count - 1, axis=1)[:, :count]
    else:
        part = np.broadcast_to(np.arange(scores.shape[1]), scores.shape).copy()
    values = np.take_along_axis(scores, part, axis=1)
    order = np.lexsort((part, -values), axis=1)
    return np.take_along_axis(part, order, axis=1)


class SimilarityIndex:
    """Ranks catalogue materials under every registered metric whose features it holds.

    Parameters
    ----------
    pca_components:
        Number of PCA components of the normalized vibrational fingerprints used by the
        fast first stage, or ``None`` to always score fingerprints exactly.
    pca_sample_size:
        Materials sampled (seeded) to fit the PCA.
    candidate_multiplier, min_candidates:
        The first stage of a query keeps ``max(min_candidates, candidate_multiplier * k)``
        candidates for exact re-scoring.
    neighbor_candidates:
        Candidates per material kept by the first stage of :meth:`neighbors`
        (at least ``k + 10``).
    exact_below:
        :meth:`neighbors` scans all pairs exactly when at most this many materials pass
        the filter (unless told otherwise).
    clusters, probes:
        Coarse clustering used by :meth:`neighbors` on large catalogues: materials are
        grouped into ``clusters`` k-means groups (default about sqrt(N)); each group
        looks for neighbors in its ``probes`` nearest groups (default clusters / 12 for
        shape, clusters / 3 for vibration).
    n_jobs:
        Worker threads for the catalogue-wide neighbor scan.
    random_state:
        Seed for every random step (PCA sample, k-means).
    """

    def __init__(
        self,
        *,
        pca_components: int | None = 64,
        pca_sample_size: int = 20_000,
        candidate_multiplier: int = 20,
        min_candidates: int = 200,
        neighbor_candidates: int = 40,
        exact_below: int = 4096,
        clusters: int | None = None,
        probes: int | None = None,
        n_jobs: int = 2,
        random_state: int = 0,
    ) -> None:
        self.pca_components = pca_components
        self.pca_sample_size = pca_sample_size
        self.candidate_multiplier = candidate_multiplier
        self.min_candidates = min_candidates
        self.neighbor_candidates = neighbor_candidates
        self.exact_below = exact_below
        self.clusters = clusters
        self.probes = probes
        self.n_jobs = n_jobs
        self.random_state = random_state

    # ------------------------------------------------------------------ fitting
    def _check_config(self) -> None:
        if self.pca_components is not None and (int(self.pca_components) < 1):
            raise ValueError(f"pca_components must be a positive integer or None, got {self.pca_components!r}")
        for name in ("pca_sample_size", "candidate_multiplier", "min_candidates", "neighbor_candidates", "n_jobs"):
            if int(getattr(self, name)) < 1:
                raise ValueError(f"{name} must be a positive integer, got {getattr(self, name)!r}")
        for name in ("clusters", "probes"):
            value = getattr(self, name)
            if value is not None and int(value) < 1:
                raise ValueError(f"{name} must be a positive integer or None, got {value!r}")

    def fit(
        self,
        ids: Sequence,
        shape_vectors=None,
        fingerprints=None,
        structure_bits=None,
        properties: Mapping[str, Sequence] | None = None,
        *,
        features: Mapping[str, object] | None = None,
    ) -> "SimilarityIndex":
        """Build the index.

        ``ids``: one unique identifier per material. Features, one row per material (see
        :data:`library.search.metrics.FEATURES`): ``shape_vectors`` (N, n) shape moments
        (angstrom-based moments, as produced by the shape module); ``fingerprints`` (N, G)
        non-negative vibrational fingerprints on a fixed cm^-1 grid, L2-normalized once here;
        ``structure_bits``: SMILES strings, (N, 2048) 0/1 bits or (N, 256) packed uint8; any
        other registered feature by name in ``features``. ``properties``: optional mapping with
        any of ``molecular_weight`` (g/mol), ``logp`` (dimensionless), ``descriptors`` (a set of
        odor descriptor words per material), ``status`` ("active"/"retired") and ``restricted``
        (bool).
        """
        self._check_config()
        ids_array = np.asarray(ids)
        if ids_array.ndim != 1 or ids_array.size == 0:
            raise ValueError(f"ids must be a non-empty 1-D sequence, got shape {ids_array.shape}")
        if ids_array.dtype == object:
            raise ValueError("ids must all be strings or all be integers")
        n = ids_array.size
        if np.unique(ids_array).size != n:
            raise ValueError("ids must be unique; duplicates found")
        given = dict(features or {})
        for name, value in (("shape", shape_vectors), ("fingerprint", fingerprints), ("structure", structure_bits)):
            if value is not None:
                given[name] = value
        if "shape" not in given or "fingerprint" not in given:
            raise ValueError("fit needs shape_vectors and fingerprints (one row per material)")
        labels = {"shape": "shape_vectors", "fingerprint": "fingerprints", "structure": "structure_bits"}
        arrays: dict[str, np.ndarray] = {}
        for name, value in given.items():
            prepared = metric_registry.prepare_feature(name, value, labels.get(name, name))
            if len(prepared[name]) != n:
                raise ValueError(f"{labels.get(name, name)} has {len(prepared[name])} rows but there are {n} materials")
            arrays.update(prepared)
        self.ids_ = ids_array
        self.features_ = arrays
        self.extra_ = {}
        self._set_properties(properties, n)
        self._fit_compression()
        self._finish()
        return self

    def _finish(self) -> None:
        """Everything derived from the fitted arrays, computed now so that queries only read."""
        self._row_of = {value: i for i, value in enumerate(self.ids_.tolist())}
        self._arrays_of = {name: (name, *metric_registry.FEATURES[name].derived(values[:1]))
                           for name, values in self.features_.items() if name in metric_registry.FEATURES}
        self.extra_ = getattr(self, "extra_", {})
        self._coarse: dict = {}
        self._coarse_lock = threading.Lock()
        self._catalogue = Block(self.features_, self)

    @property
    def shape_(self) -> np.ndarray:
        """(N, n) float32 shape values."""
        return self.features_["shape"]

    @property
    def fingerprints_(self) -> np.ndarray:
        """(N, G) float32 unit-norm fingerprints."""
        return self.features_["fingerprint"]

    @property
    def structure_(self) -> np.ndarray | None:
        """(N, 256) packed Morgan bits, or None when no structures were given."""
        return self.features_.get("structure")

    def _set_properties(self, properties, n: int) -> None:
        properties = dict(properties or {})
        unknown = set(properties) - set(PROPERTY_KEYS)
        if unknown:
            raise ValueError(f"unknown properties {sorted(unknown)}; known: {PROPERTY_KEYS}")
        self.molecular_weight_ = self.logp_ = self.retired_ = self.restricted_ = None
        self.descriptor_vocabulary_ = None
        self._descriptor_columns = None
        for key in ("molecular_weight", "logp"):
            if key in properties:
                values = np.asarray(properties[key], dtype=np.float64)
                if values.shape != (n,):
                    raise ValueError(f"properties[{key!r}] must have one value per material ({n}), got {values.shape}")
                setattr(self, key + "_", values)
        if "status" in properties:
            status = np.asarray(properties["status"], dtype=str)
            if status.shape != (n,):
                raise ValueError(f"properties['status'] must have one value per material ({n}), got {status.shape}")
            bad = sorted(set(np.unique(status)) - set(STATUSES))
            if bad:
                raise ValueError(f"properties['status'] has unknown values {bad}; allowed {STATUSES}")
            self.retired_ = status == "retired"
        if "restricted" in properties:
            restricted = np.asarray(properties["restricted"])
            if restricted.shape != (n,) or not np.isin(restricted, (0, 1)).all():
                raise ValueError(f"properties['restricted'] must be one bool per material ({n})")
            self.restricted_ = restricted.astype(bool)
        if "descriptors" in properties:
            sets = list(properties["descriptors"])
            if len(sets) != n:
                raise ValueError(f"properties['descriptors'] must have one set per material ({n}), got {len(sets)}")
            vocabulary = sorted({word for words in sets for word in _words(words)})
            column = {word: i for i, word in enumerate(vocabulary)}
            indptr = np.zeros(n + 1, np.int64)
            indices = []
            for i, words in enumerate(sets):
                cols = sorted({column[w] for w in _words(words)})
                indices.extend(cols)
                indptr[i + 1] = indptr[i] + len(cols)
            self._set_descriptors(np.asarray(vocabulary, dtype=str), indptr, np.asarray(indices, np.int32))

    def _set_descriptors(self, vocabulary: np.ndarray, indptr: np.ndarray, indices: np.ndarray) -> None:
        self.descriptor_vocabulary_ = vocabulary
        self._descriptor_indptr = indptr
        self._descriptor_indices = indices
        # the same sets by column (which rows carry each word): a CSC layout built with NumPy alone,
        # so that loading an index needs no scipy.sparse import (about 0.3 s at every search)
        rows = np.repeat(np.arange(indptr.size - 1, dtype=np.int32), np.diff(indptr))
        counts = np.bincount(indices, minlength=max(1, vocabulary.size))
        column_ptr = np.zeros(counts.size + 1, np.int64)
        np.cumsum(counts, out=column_ptr[1:])
        self._descriptor_columns = _Columns(column_ptr, rows[np.argsort(indices, kind="stable")])
        self._descriptor_column_of = {str(word): i for i, word in enumerate(vocabulary)}

    def _fit_compression(self) -> None:
        fingerprints = self.fingerprints_
        n, width = fingerprints.shape
        self.pca_mean_ = self.pca_basis_ = self.compressed_ = self.row_bias_ = None
        self.mean_square_ = 0.0
        if self.pca_components is None or int(self.pca_components) >= min(n, width):
            return
        from sklearn.decomposition import PCA

        rng = np.random.default_rng(self.random_state)
        sample = np.sort(rng.choice(n, size=min(n, self.pca_sample_size), replace=False))
        pca = PCA(n_components=int(self.pca_components), svd_solver="auto", random_state=self.random_state)
        # a sample of every row is the matrix itself: fit on it rather than on a copy of it
        pca.fit(fingerprints if sample.size == n else fingerprints[sample])
        self.pca_mean_ = pca.mean_.astype(np.float32)
        self.pca_basis_ = np.ascontiguousarray(pca.components_.astype(np.float32))
        self.compressed_ = np.empty((n, self.pca_basis_.shape[0]), np.float32)
        self.row_bias_ = np.empty(n, np.float32)
        block = 4_096  # rows per step: the temporaries stay a few MB however large the index
        for start in range(0, n, block):
            chunk = fingerprints[start : start + block]
            self.compressed_[start : start + block] = (chunk - self.pca_mean_) @ self.pca_basis_.T
            self.row_bias_[start : start + block] = chunk @ self.pca_mean_
        self.mean_square_ = float(self.pca_mean_ @ self.pca_mean_)

    # ------------------------------------------------------------------ helpers
    def _check_fitted(self) -> None:
        if not hasattr(self, "ids_"):
            raise ValueError("this SimilarityIndex is not fitted yet; call fit(...) or load(...) first")

    @property
    def size(self) -> int:
        """Number of materials in the index."""
        self._check_fitted()
        return int(self.ids_.size)

    @property
    def nbytes(self) -> int:
        """Bytes held by the index matrices (features, derived arrays, compression)."""
        self._check_fitted()
        arrays = [*self.features_.values(), self.compressed_, self.row_bias_]
        return int(sum(a.nbytes for a in arrays if a is not None))

    def metrics(self) -> tuple[str, ...]:
        """Names of the indexed metrics whose features this index holds, in display order."""
        return tuple(m.name for m in metric_registry.metrics(indexed=True)
                     if self._catalogue.has(metric_registry.features_of(m)))

    def row_of(self, material_id) -> int:
        """Catalogue row of ``material_id``; ValueError if it is not in the index."""
        self._check_fitted()
        try:
            return self._row_of[material_id.item() if isinstance(material_id, np.generic) else material_id]
        except (KeyError, TypeError):
            raise ValueError(f"material id {material_id!r} is not in the index") from None

    def _contains(self, material_id) -> bool:
        try:
            self.row_of(material_id)
        except ValueError:
            return False
        return True

    def block(self, rows, features: Iterable[str] | None = None) -> Block:
        """The feature arrays (all, or only `features` and what is derived from them) of catalogue
        rows `rows` (any integer index array; a 2-D array gives 2-D leading axes)."""
        self._check_fitted()
        rows = np.asarray(rows)
        names = self.features_ if features is None else [a for f in features for a in self._arrays_of[f]]
        return Block({name: self.features_[name][rows] for name in names}, self)

    def _rows_for(self, metric, rows) -> Block:
        return self.block(rows, metric_registry.features_of(metric))

    def filter_mask(self, filters: SearchFilter | None) -> np.ndarray | None:
        """Boolean mask of catalogue rows passing ``filters`` (None = all rows)."""
        self._check_fitted()
        if filters is None:
            filters = SearchFilter()
        if not isinstance(filters, SearchFilter):
            raise ValueError(f"filters must be a SearchFilter, got {type(filters).__name__}")
        n = self.size
        mask = np.ones(n, bool)
        touched = False
        for name, values in (("molecular_weight_range", self.molecular_weight_), ("logp_range", self.logp_)):
            bounds = getattr(filters, name)
            if bounds is None:
                continue
            if values is None:
                raise ValueError(f"filter {name} needs the property {name[:-6]!r}, which was not given to fit()")
            with np.errstate(invalid="ignore"):
                mask &= (values >= bounds[0]) & (values <= bounds[1])
            touched = True
        if filters.must_have or filters.must_not_have:
            if self._descriptor_columns is None:
                raise ValueError("descriptor filters need the property 'descriptors', which was not given to fit()")
            columns = self._descriptor_columns
            for word in filters.must_have:
                col = self._descriptor_column_of.get(str(word))
                if col is None:
                    mask[:] = False
                    continue
                has = np.zeros(n, bool)
                has[columns.indices[columns.indptr[col] : columns.indptr[col + 1]]] = True
                mask &= has
            for word in filters.must_not_have:
                col = self._descriptor_column_of.get(str(word))
                if col is not None:
                    mask[columns.indices[columns.indptr[col] : columns.indptr[col + 1]]] = False
            touched = True
        if filters.exclude_retired and self.retired_ is not None:
            mask &= ~self.retired_
            touched = True
        if filters.exclude_restricted:
            if self.restricted_ is None:
                raise ValueError("filter exclude_restricted needs the property 'restricted', which was not given to fit()")
            mask &= ~self.restricted_
            touched = True
        for material_id in filters.exclude_ids:
            if self._contains(material_id):
                mask[self.row_of(material_id)] = False
                touched = True
        return mask if touched else None

    # ------------------------------------------------------------------ scores
    def _metric(self, name: str):
        metric = metric_registry.get(name)
        if not metric.indexed:
            raise ValueError(f"metric {name!r} is scored from stored records, not by the index; "
                             f"rank by one of {', '.join(indexed_metrics())}")
        missing = [f for f in metric_registry.features_of(metric) if f not in self.features_]
        if missing:
            raise ValueError(f"metric {name!r} needs the feature(s) {', '.join(missing)}, which were not given to fit()")
        return metric

    def query_block(self, *, query_id=None, **features) -> Block:
        """A query as a block: the catalogue row of ``query_id`` when no features are given, else
        the given features (``shape``, ``fingerprint``, ``structure`` or any registered feature),
        prepared like the catalogue's (fingerprints normalized, structures turned into bits)."""
        self._check_fitted()
        given = {name: value for name, value in features.items() if value is not None}
        if not given:
            if query_id is None or not self._contains(query_id):
                raise ValueError(
                    f"query_id {query_id!r} is not in the index; pass its shape, fingerprint and structure instead"
                    if query_id is not None
                    else "give a query_id from the index or the query's shape/fingerprint/structure")
            return self.block([self.row_of(query_id)])
        arrays: dict[str, np.ndarray] = {}
        for name, value in given.items():
            if name not in metric_registry.FEATURES:
                raise ValueError(f"unknown query feature {name!r}; known: {', '.join(metric_registry.FEATURES)}")
            prepared = metric_registry.prepare_feature(name, value, name)
            stored = self.features_.get(name)
            if prepared[name].shape[0] != 1:
                raise ValueError(f"{name} must be one material's values, got {prepared[name].shape[0]} rows")
            if stored is not None and prepared[name].shape[1:] != stored.shape[1:]:
                raise ValueError(f"{name} must be {stored.shape[1]} values like the catalogue, got "
                                 f"{prepared[name].shape[1]}")
            arrays.update(prepared)
        return Block(arrays, None)

    def scores(self, metric: str, query: Block, *, weight: float = metric_registry.DEFAULT_WEIGHT,
               approximate: bool = False) -> np.ndarray:
        """Similarities (0-1, float32) of one query block against every catalogue material under
        `metric`; `approximate` uses the metric's first stage when it has one."""
        chosen = self._metric(metric)
        weight = check_weight(weight)
        return self._full_scores(chosen, query, weight, approximate, {})

    def _full_scores(self, metric, query: Block, weight: float, approximate: bool, cache: dict) -> np.ndarray:
        key = (metric.name, approximate)
        if key in cache:
            return cache[key]

        def full(name: str) -> np.ndarray:
            return self._full_scores(metric_registry.get(name), query, weight, approximate, cache)

        values = metric.first_stage(self, query, weight=weight, full=full) if approximate else None
        cache[("first stage", metric.name)] = values is not None
        if values is None and metric.components:
            values = metric.combine({name: full(name) for name in metric.components}, weight=weight, index=self)
        if values is None:
            values = metric.similarity(query, self._catalogue, weight=weight)[0]
        cache[key] = values = np.asarray(values, np.float32)
        return values

    def pair_scores(self, rows_a, rows_b, *, weight: float = metric_registry.DEFAULT_WEIGHT) -> dict[str, np.ndarray]:
        """Exact similarities (0-1) of material pairs given as catalogue rows, every indexed metric."""
        self._check_fitted()
        rows_a = np.asarray(rows_a, np.int64)
        rows_b = np.asarray(rows_b, np.int64)
        if rows_a.shape != rows_b.shape or rows_a.ndim != 1:
            raise ValueError(f"rows_a and rows_b must be 1-D of equal length, got {rows_a.shape} and {rows_b.shape}")
        weight = check_weight(weight)
        out = {name: np.empty(rows_a.size, np.float32) for name in self.metrics()}
        block = 16_384
        for start in range(0, rows_a.size, block):
            a, b = self.block(rows_a[start : start + block]), self.block(rows_b[start : start + block])
            for name in out:
                out[name][start : start + block] = metric_registry.get(name).similarity(a, b, aligned=True,
                                                                                        weight=weight)
        return out

    def similarity_matrix(self, metric: str, rows, *, weight: float = metric_registry.DEFAULT_WEIGHT) -> np.ndarray:
        """Full (n, n) float64 similarity matrix of catalogue rows `rows` under `metric` (for scorecards:
        n of a few thousand at most)."""
        chosen = self._metric(metric)
        block = self._rows_for(chosen, np.asarray(rows, np.int64))
        values = chosen.similarity(block, block, weight=check_weight(weight)).astype(np.float64)
        return 0.5 * (values + values.T)  # exact symmetry despite float rounding in the kernels

    # ------------------------------------------------------------------ query
    def query(
        self,
        *,
        query_id=None,
        shape=None,
        fingerprint=None,
        structure=None,
        features: Mapping[str, object] | None = None,
        metric: str = "blend",
        weight: float = metric_registry.DEFAULT_WEIGHT,
        k: int = 10,
        filters: SearchFilter | None = None,
        exclude_query: bool = True,
        ranks: str = "estimated",
        exact: bool = False,
        rerank: OverlayScorer | None = None,
        rerank_depth: int = 50,
    ) -> list[Hit]:
        """The ``k`` materials most similar to a query under ``metric``, best first.

        The query is a catalogue material (``query_id``) or given by its features: ``shape``
        vector, vibrational ``fingerprint`` (same cm^-1 grid as the catalogue; it is normalized
        here), ``structure`` (SMILES or bits) and any other registered feature in ``features``;
        ``query_id`` then only labels it. ``weight`` is the shape weight of the blend (0-1).

        ``ranks``: "exact" ranks every hit under every metric among the filtered catalogue from
        full exact scans (reads all fingerprints); "estimated" (default) gives exact ranks for
        metrics without a first stage and counts the others against their first-stage scores
        (exact when no compression is fitted) - the rank under the searched metric is the
        position in the list; "none" only gives that position. ``exact=True`` skips the first
        stage.

        ``rerank``: a callback ``(query_id, candidate_ids) -> scores in 0-1`` (e.g. a
        Gaussian shape overlay) applied to the best ``rerank_depth`` candidates under
        ``metric``; hits are then ordered by its score, reported as ``"overlay"``. The
        callback may return NaN for candidates it chose not to re-score: they follow the
        re-scored ones in their first-stage order and carry no ``"overlay"`` score.
        """
        self._check_fitted()
        chosen = self._metric(metric)
        if ranks not in RANK_MODES:
            raise ValueError(f"ranks must be one of {RANK_MODES}, got {ranks!r}")
        weight = check_weight(weight)
        if int(k) < 1:
            raise ValueError(f"k must be a positive integer, got {k!r}")
        if rerank is not None:
            if int(rerank_depth) < 1:
                raise ValueError(f"rerank_depth must be a positive integer, got {rerank_depth!r}")
            if query_id is None:
                raise ValueError("rerank needs a query_id to pass to the callback")
        given = dict(features or {})
        given.update({name: value for name, value in (("shape", shape), ("fingerprint", fingerprint),
                                                      ("structure", structure)) if value is not None})
        query = self.query_block(query_id=query_id, **given)
        row = self.row_of(query_id) if query_id is not None and self._contains(query_id) else None
        available = [name for name in self.metrics()
                     if query.has(metric_registry.features_of(metric_registry.get(name)))]
        if metric not in available:
            raise ValueError(f"metric {metric!r} needs query data that was not given "
                             f"({', '.join(metric_registry.features_of(chosen))})")

        mask = self.filter_mask(filters)
        if exclude_query and row is not None:
            mask = np.ones(self.size, bool) if mask is None else mask.copy()
            mask[row] = False
        exact = exact or ranks == "exact" or self.compressed_ is None
        depth = max(int(k), int(rerank_depth) if rerank is not None else 0)
        cache: dict = {}  # full-catalogue scores per metric (first stage unless exact)

        def full(name: str) -> np.ndarray:
            return self._full_scores(metric_registry.get(name), query, weight, not exact, cache)

        def masked(values: np.ndarray) -> np.ndarray:
            return values if mask is None else np.where(mask, values, np.float32(-np.inf))

        first = masked(full(metric))
        if cache.get(("first stage", metric)):
            count = max(self.min_candidates, self.candidate_multiplier * depth)
            candidates = _ordered_top(first, count)
            rescored = chosen.similarity(query, self._rows_for(chosen, candidates), weight=weight)[0]
            rows = candidates[_ordered_top(rescored.astype(np.float32), depth)]
        else:
            rows = _ordered_top(first, depth)
        if rows.size == 0:
            return []

        hit_scores = {name: np.asarray(metric_registry.get(name).similarity(
            query, self._rows_for(metric_registry.get(name), rows), weight=weight)[0], np.float64)
            for name in available}
        if exact:
            # scores from the same full arrays the ranks are counted in, so both agree
            hit_scores = {name: full(name)[rows].astype(np.float64) for name in available}

        rank_table: dict[str, np.ndarray] = {}
        if ranks != "none":
            for name in available:
                values = masked(full(name))
                own = hit_scores[name].astype(values.dtype)
                greater = np.array([np.count_nonzero(values > value) for value in own], dtype=np.int64)
                # the hit's own full-catalogue entry (first stage or another summation order) may
                # exceed its exact score: it must not count as better than itself
                greater -= (values[rows] > own).astype(greater.dtype)
                rank_table[name] = 1 + greater
        position = np.arange(1, rows.size + 1)
        if ranks != "exact" or metric not in rank_table:
            rank_table[metric] = position

        overlay = None
        if rerank is not None:
            candidate_ids = self.ids_[rows].tolist()
            overlay = np.asarray(rerank(query_id, candidate_ids), dtype=np.float64)
            scored = ~np.isnan(overlay)
            if overlay.shape != (rows.size,) or np.isinf(overlay).any() or not scored.any():
                raise ValueError(
                    f"rerank callback must return {rows.size} scores, one per candidate (NaN for a candidate it "
                    f"does not re-score, at least one scored); got shape {overlay.shape}"
                )
            if (overlay[scored] < 0).any() or (overlay[scored] > 1).any():
                raise ValueError("rerank callback must return scores in 0-1")
            # re-scored candidates first, best first; the others keep their first-stage order
            order = np.lexsort((position, -np.where(scored, overlay, -1.0)))
            rows, overlay = rows[order], overlay[order]
            hit_scores = {name: values[order] for name, values in hit_scores.items()}
            rank_table = {name: values[order] for name, values in rank_table.items()}
            hit_scores["overlay"] = overlay
            rank_table["overlay"] = position.copy()

        ranked_by = "overlay" if overlay is not None else metric
        hits = []
        for i in range(min(int(k), rows.size)):
            hits.append(
                Hit(
                    id=self.ids_[rows[i]].item(),
                    row=int(rows[i]),
                    rank=i + 1,
                    score=float(hit_scores[ranked_by][i] if not np.isnan(hit_scores[ranked_by][i])
                                else hit_scores[metric][i]),
                    scores={name: float(values[i]) for name, values in hit_scores.items()
                            if not np.isnan(values[i])},
                    ranks={name: int(values[i]) for name, values in rank_table.items()
                           if name != "overlay" or not np.isnan(hit_scores["overlay"][i])},
                )
            )
        return hits

    # ------------------------------------------------------------------ neighbors
    def neighbors(
        self,
        metric: str = "shape",
        k: int = 10,
        *,
        weight: float = metric_registry.DEFAULT_WEIGHT,
        filters: SearchFilter | None = None,
        exact: bool | None = None,
        show_progress: bool = False,
    ) -> NeighborLists:
        """The ``k`` nearest other materials of every material under ``metric``.

        Computed in blocks; memory stays O(N * k) plus one block. ``exact=None`` scans all
        pairs when at most ``exact_below`` materials pass ``filters`` and otherwise uses the
        two-stage scan: candidates from k-means groups in each metric's candidate space (shape:
        Euclidean distance on the shape vectors; vibration: compressed fingerprints; a composite
        metric: the union of its components'; a metric without one, such as structure, is always
        scanned exactly, quadratic in N) and exact re-scoring of the candidates.
        """
        self._check_fitted()
        chosen = self._metric(metric)
        weight = check_weight(weight)
        if int(k) < 1:
            raise ValueError(f"k must be a positive integer, got {k!r}")
        mask = self.filter_mask(filters)
        rows = np.arange(self.size) if mask is None else np.flatnonzero(mask)
        k = min(int(k), max(rows.size - 1, 0))
        spaces = [chosen] if not chosen.components else [metric_registry.get(c) for c in chosen.components]
        scannable = all(s.candidate_space(self, rows[:1]) is not None for s in spaces)
        if exact is None:
            exact = rows.size <= self.exact_below or not scannable
        if k == 0:
            empty = np.empty((rows.size, 0))
            return NeighborLists(metric, rows, empty.astype(np.int64), empty.astype(np.float32), bool(exact))
        if exact:
            local, scores = self._exact_neighbors(chosen, rows, k, weight, show_progress)
        else:
            count = max(self.neighbor_candidates, k + 10)
            candidates = np.concatenate([self._candidates(space, rows, count, show_progress) for space in spaces],
                                        axis=1)
            if len(spaces) > 1:
                candidates = _dedupe_rows(candidates)
            local, scores = self._rescore(chosen, rows, candidates, k, weight)
        neighbor_rows = np.where(local >= 0, rows[np.maximum(local, 0)], -1)
        return NeighborLists(metric, rows, neighbor_rows, scores, bool(exact))

    def _exact_neighbors(self, metric, rows, k, weight, show_progress):
        local = np.full((rows.size, k), -1, np.int64)
        scores = np.full((rows.size, k), np.nan, np.float32)
        block = max(1, min(1024, (64 * 2**20) // (4 * rows.size)))
        everything = self._rows_for(metric, rows)
        for start in _progress(range(0, rows.size, block), show_progress, f"{metric.name} neighbors"):
            stop = min(start + block, rows.size)
            values = np.asarray(metric.similarity(everything.take(np.arange(start, stop)), everything, weight=weight),
                                np.float32)
            values[np.arange(stop - start), np.arange(start, stop)] = -np.inf
            top = _row_top(values, k)
            local[start:stop, : top.shape[1]] = top
            scores[start:stop, : top.shape[1]] = np.take_along_axis(values, top, axis=1)
        return local, scores

    def _grouping(self, metric, rows: np.ndarray, vectors: np.ndarray):
        key = (metric.name, rows.size, hash(rows[: 64].tobytes()), hash(rows[-64:].tobytes()))
        with self._coarse_lock:
            if key in self._coarse:
                return self._coarse[key]
            grouping = self._group(metric, vectors)
            self._coarse[key] = grouping
            return grouping

    def _group(self, metric, vectors: np.ndarray):
        from sklearn.cluster import KMeans

        n = vectors.shape[0]
        clusters = min(n, self.clusters or max(1, int(round(math.sqrt(n)))))
        # Vibrational fingerprints group less tightly than shape moments (measured at 100k: probing
        # clusters/12 groups found 0.67 of the true top 10, clusters/3 found 0.85), so they probe more.
        share = VIBRATION_PROBE_SHARE if isinstance(metric, metric_registry.VibrationMetric) else SHAPE_PROBE_SHARE
        probes = min(clusters, self.probes or max(1, int(math.ceil(clusters / share))))
        rng = np.random.default_rng(self.random_state)
        sample = rng.choice(n, size=min(n, 30 * clusters), replace=False)
        kmeans = KMeans(n_clusters=clusters, init="random", n_init=1, max_iter=15, random_state=self.random_state)
        kmeans.fit(vectors[sample])
        centers = kmeans.cluster_centers_.astype(np.float32)
        center_square = np.einsum("ij,ij->i", centers, centers)
        assignment = np.empty(n, np.int64)
        for start in range(0, n, 65_536):
            block = vectors[start : start + 65_536]
            assignment[start : start + 65_536] = np.argmax(block @ centers.T - 0.5 * center_square, axis=1)
        center_distance = center_square[:, None] + center_square[None, :] - 2 * centers @ centers.T
        nearest = np.argsort(center_distance, axis=1, kind="stable")[:, :probes]
        order = np.argsort(assignment, kind="stable")
        bounds = np.searchsorted(assignment[order], np.arange(clusters + 1))
        members = [order[bounds[c] : bounds[c + 1]] for c in range(clusters)]
        return members, nearest

    def _candidates(self, metric, rows: np.ndarray, count: int, show_progress: bool) -> np.ndarray:
        """(R, count) local candidate positions (-1 padded) from the grouped first stage."""
        from threadpoolctl import threadpool_limits

        vectors, bias = metric.candidate_space(self, rows)
        vectors = np.ascontiguousarray(vectors, np.float32)
        bias = np.asarray(bias, np.float32)
        members, nearest = self._grouping(metric, rows, vectors)
        out = np.full((rows.size, count), -1, np.int64)

        def work(cluster: int) -> None:
            queries = members[cluster]
            if queries.size == 0:
                return
            # the home group comes first, so query i of the group sits at pool position i
            pool = np.concatenate([members[cluster]] + [members[c] for c in nearest[cluster] if c != cluster])
            pool_vectors = vectors[pool]
            pool_bias = bias[pool]
            for start in range(0, queries.size, 512):
                chunk = queries[start : start + 512]
                values = vectors[chunk] @ pool_vectors.T
                values += pool_bias
                values[np.arange(chunk.size), start + np.arange(chunk.size)] = -np.inf
                top = _row_top(values, count)
                out[chunk, : top.shape[1]] = pool[top]

        tasks = range(len(members))
        with threadpool_limits(1 if self.n_jobs > 1 else None):
            with ThreadPoolExecutor(max_workers=self.n_jobs) as pool:
                list(_progress(pool.map(work, tasks), show_progress, f"{metric.name} candidates", total=len(members)))
        return out

    def _rescore(self, metric, rows, candidates, k, weight):
        """Exact re-scoring of (R, C) local candidates -> best k local positions and scores."""
        r = rows.size
        local = np.full((r, k), -1, np.int64)
        scores = np.full((r, k), np.nan, np.float32)
        width = sum(self.features_[name][0].nbytes for f in metric_registry.features_of(metric)
                    for name in self._arrays_of[f])
        block = max(1, (48 * 2**20) // (candidates.shape[1] * max(1, width)))
        for start in range(0, r, block):
            stop = min(start + block, r)
            cand = candidates[start:stop]
            valid = cand >= 0
            query = self._rows_for(metric, rows[start:stop]).expand(1)
            values = np.asarray(metric.similarity(query, self._rows_for(metric, rows[np.maximum(cand, 0)]),
                                                  aligned=True, weight=weight), np.float32)
            values = np.where(valid, values, -np.inf).astype(np.float32)
            top = _row_top(values, k)
            chosen = np.take_along_axis(values, top, axis=1)
            ok = np.isfinite(chosen)
            local[start:stop, : top.shape[1]] = np.where(ok, np.take_along_axis(cand, top, axis=1), -1)
            scores[start:stop, : top.shape[1]] = np.where(ok, chosen, np.nan)
        return local, scores

    # ------------------------------------------------------------------ cache
    def save(self, path: str | os.PathLike, revision: str, *, extra: Mapping[str, np.ndarray] | None = None) -> None:
        """Write the fitted index to ``path`` (numpy .npz, uncompressed) under a catalogue revision key.

        ``extra``: more named arrays to keep beside the index (read back with :meth:`load_extra`).
        """
        self._check_fitted()
        if not isinstance(revision, str) or not revision:
            raise ValueError(f"revision must be a non-empty string, got {revision!r}")
        config = {name: getattr(self, name) for name in CONFIG_KEYS}
        arrays = {
            "format_version": np.int64(FORMAT_VERSION),
            "revision": np.asarray(revision),
            "config": np.asarray(json.dumps(config)),
            "ids": self.ids_,
        }
        for name in metric_registry.FEATURES:
            if name in self.features_:
                arrays[f"feature:{name}"] = self.features_[name]
        optional = {
            "pca_mean": self.pca_mean_,
            "pca_basis": self.pca_basis_,
            "compressed": self.compressed_,
            "row_bias": self.row_bias_,
            "molecular_weight": self.molecular_weight_,
            "logp": self.logp_,
            "retired": self.retired_,
            "restricted": self.restricted_,
        }
        arrays.update({name: value for name, value in optional.items() if value is not None})
        if self.descriptor_vocabulary_ is not None:
            arrays["descriptor_vocabulary"] = self.descriptor_vocabulary_
            arrays["descriptor_indptr"] = self._descriptor_indptr
            arrays["descriptor_indices"] = self._descriptor_indices
        for name, value in (extra or {}).items():
            arrays[f"extra:{name}"] = np.asarray(value)
        path = Path(path)
        temporary = path.with_name(path.name + f".partial-{os.getpid()}-{threading.get_ident()}")
        with open(temporary, "wb") as handle:
            np.savez(handle, **arrays)
        os.replace(temporary, path)

    @classmethod
    def load(cls, path: str | os.PathLike, revision: str, *, strict: bool = False) -> "SimilarityIndex | None":
        """Read an index written by :meth:`save` if it was built for ``revision``.

        Returns None when the file is missing, unreadable or holds another revision, or raises
        (FileNotFoundError / :class:`RevisionMismatchError`) when ``strict``.
        """
        path = Path(path)
        if not path.exists():
            if strict:
                raise FileNotFoundError(f"no cached index at {path}")
            return None
        try:
            data = np.load(path, allow_pickle=False)
        except (OSError, ValueError) as error:
            if strict:
                raise RevisionMismatchError(f"cached index at {path} cannot be read: {error}") from None
            return None
        with data:
            version = int(data["format_version"]) if "format_version" in data.files else -1
            if version != FORMAT_VERSION:
                if strict:
                    raise RevisionMismatchError(f"cached index at {path} has format {version}")
                return None
            stored = str(data["revision"])
            if stored != revision:
                if strict:
                    raise RevisionMismatchError(
                        f"cached index at {path} was built for catalogue revision {stored!r}, not {revision!r}"
                    )
                return None
            index = cls(**json.loads(str(data["config"])))
            index.ids_ = data["ids"]
            index.features_ = {}
            for name in metric_registry.FEATURES:
                key = f"feature:{name}"
                if key in data.files:
                    values = data[key]
                    index.features_.update({name: values, **metric_registry.FEATURES[name].derived(values)})
            get = lambda name: data[name] if name in data.files else None  # noqa: E731
            index.pca_mean_, index.pca_basis_ = get("pca_mean"), get("pca_basis")
            index.compressed_, index.row_bias_ = get("compressed"), get("row_bias")
            index.mean_square_ = float(index.pca_mean_ @ index.pca_mean_) if index.pca_mean_ is not None else 0.0
            index.molecular_weight_, index.logp_ = get("molecular_weight"), get("logp")
            index.retired_, index.restricted_ = get("retired"), get("restricted")
            index.descriptor_vocabulary_ = None
            index._descriptor_columns = None
            if "descriptor_vocabulary" in data.files:
                index._set_descriptors(data["descriptor_vocabulary"], data["descriptor_indptr"], data["descriptor_indices"])
            index.extra_ = {name[len("extra:"):]: data[name] for name in data.files if name.startswith("extra:")}
            index._finish()
        return index

    def load_extra(self, name: str) -> np.ndarray | None:
        """An array saved with the index under `name` (see :meth:`save`), or None."""
        return getattr(self, "extra_", {}).get(name)


def _words(words) -> Iterable[str]:
    if isinstance(words, str):
        raise ValueError(f"descriptors must be a set of words per material, got the string {words!r}")
    return (str(w) for w in words)


def _dedupe_rows(candidates: np.ndarray) -> np.ndarray:
    """Replace repeated candidates within each row by -1."""
    order = np.argsort(candidates, axis=1, kind="stable")
    ordered = np.take_along_axis(candidates, order, axis=1)
    repeated = np.zeros_like(ordered, dtype=bool)
    repeated[:, 1:] = (ordered[:, 1:] == ordered[:, :-1]) & (ordered[:, 1:] >= 0)
    ordered[repeated] = -1
    out = np.empty_like(candidates)
    np.put_along_axis(out, order, ordered, axis=1)
    return out


def _progress(iterable, show: bool, description: str, total: int | None = None):
    if not show:
        return iterable
    from tqdm import tqdm

    return tqdm(iterable, desc=description, total=total, unit="block")
