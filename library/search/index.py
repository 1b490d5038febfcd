"""Similarity index over the catalogue: shape, vibration, blend and structure metrics.

All similarities are on a 0-1 scale, larger meaning more alike:

* shape: USR similarity ``S = 1 / (1 + sum(|a - b|) / n)`` over the shape vector of
  length ``n`` (J. Comput. Chem. 28, 1711 (2007)); the shape vector holds the USRCAT
  moments (J. Cheminform. 4, 27 (2012)) followed by the chirality-sensitive moments.
* vibration: cosine of the vibrational fingerprints (EVA descriptor on the
  0-4000 cm^-1 grid, J. Comput.-Aided Mol. Des. 11, 143 (1997)). Fingerprints are
  non-negative, so the cosine lies in 0-1.
* blend: ``weight * shape + (1 - weight) * vibration`` with ``weight`` in 0-1.
* structure: Tanimoto coefficient of Morgan radius-2, 2048-bit fingerprints.

Memory: the index keeps float32 matrices only. For N materials with an 801-value
fingerprint and a 72-value shape vector that is about ``N * (801 + 72) * 4`` bytes
(3.5 GB at one million materials) plus, when compression is on,
``N * pca_components * 4`` bytes for the compressed fingerprints and 256 bytes per
material for the structure bits. No N x N matrix is ever formed.

Speed: vibration and blend queries run in two stages when ``pca_components`` is set:
a first stage scores every material with the PCA-compressed fingerprints (exactly
``q . x = (q - m) . (x - m) + q . m + x . m - m . m`` with the centered part
projected), keeps the best few hundred, and a second stage re-scores those exactly.
Shape and structure scores are always exact.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

METRICS = ("shape", "vibration", "blend", "structure")
RANK_MODES = ("exact", "estimated", "none")
MORGAN_RADIUS = 2
MORGAN_BITS = 2048
FORMAT_VERSION = 1
SHAPE_PROBE_SHARE = 12  # neighbors(): groups probed = clusters / share, unless `probes` is given
VIBRATION_PROBE_SHARE = 3
PROPERTY_KEYS = ("molecular_weight", "logp", "descriptors", "status", "restricted")
STATUSES = ("active", "retired")

#: Callback that re-scores candidates, e.g. by Gaussian shape overlay:
#: ``(query_id, candidate_ids) -> scores in 0-1``, one per candidate, same order.
OverlayScorer = Callable[[object, Sequence[object]], Sequence[float]]


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


def morgan_bits(smiles: str) -> np.ndarray:
    """Packed Morgan radius-2, 2048-bit fingerprint (256 uint8, big-endian bit order) of a SMILES."""
    from rdkit import Chem
    from rdkit.Chem import rdFingerprintGenerator

    mol = Chem.MolFromSmiles(smiles) if isinstance(smiles, str) else None
    if mol is None:
        raise ValueError(f"structure could not be read as SMILES: {smiles!r}")
    generator = rdFingerprintGenerator.GetMorganGenerator(radius=MORGAN_RADIUS, fpSize=MORGAN_BITS)
    return np.packbits(generator.GetFingerprintAsNumPy(mol).astype(bool))


def _pack_structure(value, n: int | None, name: str) -> np.ndarray:
    """SMILES strings, 0/1 arrays of 2048 bits or packed 256-byte arrays -> (n, 256) uint8."""
    if isinstance(value, str):
        return morgan_bits(value)[None, :]
    if not isinstance(value, np.ndarray) and len(value) and isinstance(value[0], str):
        packed = np.empty((len(value), MORGAN_BITS // 8), np.uint8)
        for i, smiles in enumerate(value):
            try:
                packed[i] = morgan_bits(smiles)
            except ValueError as error:
                raise ValueError(f"{name}[{i}]: {error}") from None
        array = packed
    else:
        array = np.asarray(value)
        if array.ndim == 1:
            array = array[None, :]
        if array.ndim != 2:
            raise ValueError(f"{name} must be SMILES strings or a 2-D bit array, got shape {array.shape}")
        if array.shape[1] == MORGAN_BITS:
            if not np.isin(array, (0, 1)).all():
                raise ValueError(f"{name} has {MORGAN_BITS} columns, so it must hold only 0/1 bits")
            array = np.packbits(array.astype(bool), axis=1)
        elif array.shape[1] == MORGAN_BITS // 8 and array.dtype == np.uint8:
            array = array.copy()
        else:
            raise ValueError(
                f"{name} must have {MORGAN_BITS} 0/1 columns or {MORGAN_BITS // 8} packed uint8 columns, "
                f"got shape {array.shape} dtype {array.dtype}"
            )
    if n is not None and array.shape[0] != n:
        raise ValueError(f"{name} has {array.shape[0]} rows but there are {n} materials")
    return np.ascontiguousarray(array, dtype=np.uint8)


def _float_matrix(value, name: str, n: int | None = None) -> np.ndarray:
    array = np.asarray(value, dtype=np.float32)
    if array.ndim != 2:
        raise ValueError(f"{name} must be a 2-D array (materials x values), got shape {array.shape}")
    if n is not None and array.shape[0] != n:
        raise ValueError(f"{name} has {array.shape[0]} rows but there are {n} materials")
    if array.shape[1] == 0:
        raise ValueError(f"{name} has no columns")
    if not np.isfinite(array).all():
        raise ValueError(f"{name} contains NaN or infinite values")
    return np.ascontiguousarray(array)


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
    """Ranks catalogue materials by shape, vibration, blended or structure similarity.

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
        shape_vectors,
        fingerprints,
        structure_bits=None,
        properties: Mapping[str, Sequence] | None = None,
    ) -> "SimilarityIndex":
        """Build the index.

        ``ids``: one unique identifier per material. ``shape_vectors``: (N, n) shape
        moments (angstrom-based moments, as produced by the shape module).
        ``fingerprints``: (N, G) non-negative vibrational fingerprints on a fixed
        cm^-1 grid; they are L2-normalized once here. ``structure_bits``: SMILES
        strings, (N, 2048) 0/1 bits or (N, 256) packed uint8, optional.
        ``properties``: optional mapping with any of ``molecular_weight`` (g/mol),
        ``logp`` (dimensionless), ``descriptors`` (a set of odor descriptor words per
        material), ``status`` ("active"/"retired") and ``restricted`` (bool).
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
        shape = _float_matrix(shape_vectors, "shape_vectors", n)
        source = fingerprints
        fingerprints = _float_matrix(fingerprints, "fingerprints", n)
        if (fingerprints < 0).any():
            raise ValueError("fingerprints must be non-negative (Gaussian-smoothed spectra)")
        if isinstance(source, np.ndarray) and np.shares_memory(fingerprints, source):
            fingerprints = fingerprints.copy()  # normalized in place below; leave the caller's array alone
        norms = np.sqrt(np.einsum("ij,ij->i", fingerprints, fingerprints, dtype=np.float64))
        empty = np.flatnonzero(norms == 0)
        if empty.size:
            raise ValueError(f"fingerprints of ids {ids_array[empty[:5]].tolist()} are all zero; cosine is undefined")
        fingerprints /= norms.astype(np.float32)[:, None]

        self.ids_ = ids_array
        self._row_of = None
        self._shape_sums = None
        self.shape_ = shape
        self.fingerprints_ = fingerprints
        self.structure_ = None if structure_bits is None else _pack_structure(structure_bits, n, "structure_bits")
        self._set_structure_counts()
        self._set_properties(properties, n)
        self._fit_compression()
        self._coarse = {}
        return self

    def _set_structure_counts(self) -> None:
        if self.structure_ is None:
            self._structure_words = None
            self._structure_counts = None
            return
        self._structure_words = self.structure_.view(np.uint64)
        self._structure_counts = np.bitwise_count(self._structure_words).sum(axis=1, dtype=np.int32)

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
        from scipy import sparse

        self.descriptor_vocabulary_ = vocabulary
        self._descriptor_indptr = indptr
        self._descriptor_indices = indices
        n = indptr.size - 1
        matrix = sparse.csr_matrix(
            (np.ones(indices.size, np.int8), indices, indptr), shape=(n, max(1, vocabulary.size))
        )
        self._descriptor_columns = matrix.tocsc()
        self._descriptor_column_of = {str(word): i for i, word in enumerate(vocabulary)}

    def _fit_compression(self) -> None:
        n, width = self.fingerprints_.shape
        self.pca_mean_ = self.pca_basis_ = self.compressed_ = self.row_bias_ = None
        if self.pca_components is None or int(self.pca_components) >= min(n, width):
            return
        from sklearn.decomposition import PCA

        rng = np.random.default_rng(self.random_state)
        sample = np.sort(rng.choice(n, size=min(n, self.pca_sample_size), replace=False))
        pca = PCA(n_components=int(self.pca_components), svd_solver="auto", random_state=self.random_state)
        pca.fit(self.fingerprints_[sample])
        self.pca_mean_ = pca.mean_.astype(np.float32)
        self.pca_basis_ = np.ascontiguousarray(pca.components_.astype(np.float32))
        self.compressed_ = np.empty((n, self.pca_basis_.shape[0]), np.float32)
        self.row_bias_ = np.empty(n, np.float32)
        block = 65_536
        for start in range(0, n, block):
            chunk = self.fingerprints_[start : start + block]
            self.compressed_[start : start + block] = (chunk - self.pca_mean_) @ self.pca_basis_.T
            self.row_bias_[start : start + block] = chunk @ self.pca_mean_
        self._mean_square = float(self.pca_mean_ @ self.pca_mean_)

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
        """Bytes held by the index matrices (shape, fingerprints, compression, structure)."""
        self._check_fitted()
        arrays = (self.shape_, self.fingerprints_, self.compressed_, self.row_bias_, self.structure_)
        return int(sum(a.nbytes for a in arrays if a is not None))

    def row_of(self, material_id) -> int:
        """Catalogue row of ``material_id``; ValueError if it is not in the index."""
        self._check_fitted()
        if self._row_of is None:
            self._row_of = {value: i for i, value in enumerate(self.ids_.tolist())}
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
            for word in filters.must_have:
                col = self._descriptor_column_of.get(str(word))
                if col is None:
                    mask[:] = False
                    continue
                has = np.zeros(n, bool)
                has[self._descriptor_columns.indices[self._descriptor_columns.indptr[col] : self._descriptor_columns.indptr[col + 1]]] = True
                mask &= has
            for word in filters.must_not_have:
                col = self._descriptor_column_of.get(str(word))
                if col is not None:
                    mask[self._descriptor_columns.indices[self._descriptor_columns.indptr[col] : self._descriptor_columns.indptr[col + 1]]] = False
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

    # ------------------------------------------------------------------ full scores
    def shape_scores(self, query_shape: np.ndarray) -> np.ndarray:
        """Exact USR shape similarity (0-1) of one shape vector against every material."""
        query_shape = np.asarray(query_shape, np.float32)
        n, width = self.shape_.shape
        if self._shape_sums is None:
            self._shape_sums = self.shape_.sum(axis=1, dtype=np.float32)
        out = np.empty(n, np.float32)
        ones = np.ones(width, np.float32)
        block = 4096  # stays in cache
        buffer = np.empty((block, width), np.float32)
        with _single_threaded_blas():
            # |a - b| summed = sum(a) + sum(b) - 2 sum(min(a, b)): one elementwise pass instead of two
            for start in range(0, n, block):
                stop = min(start + block, n)
                part = buffer[: stop - start]
                np.minimum(self.shape_[start:stop], query_shape, out=part)
                np.dot(part, ones, out=out[start:stop])
        out *= np.float32(-2.0)
        out += self._shape_sums
        out += np.float32(query_shape.sum(dtype=np.float32))
        np.maximum(out, np.float32(0.0), out=out)
        out *= np.float32(1.0 / width)
        out += np.float32(1.0)
        return np.reciprocal(out, out=out)

    def vibration_scores(self, query_fingerprint: np.ndarray, *, approximate: bool = False) -> np.ndarray:
        """Cosine similarity (0-1) of one normalized fingerprint against every material.

        ``approximate=True`` uses the PCA-compressed fingerprints (if fitted).
        """
        with _single_threaded_blas():
            if approximate and self.compressed_ is not None:
                projected = (query_fingerprint - self.pca_mean_) @ self.pca_basis_.T
                out = self.compressed_ @ projected
                out += self.row_bias_
                out += np.float32(float(query_fingerprint @ self.pca_mean_) - self._mean_square)
                return out
            return self.fingerprints_ @ query_fingerprint

    def structure_scores(self, query_bits: np.ndarray) -> np.ndarray:
        """Tanimoto similarity (0-1) of packed Morgan bits against every material (0 when both are empty)."""
        words = np.ascontiguousarray(query_bits, np.uint8).view(np.uint64)
        query_count = int(np.bitwise_count(words).sum())
        n = self.size
        inter = np.empty(n, np.int32)
        block = 65_536
        for start in range(0, n, block):
            inter[start : start + block] = np.bitwise_count(self._structure_words[start : start + block] & words).sum(
                axis=1, dtype=np.int32
            )
        union = self._structure_counts + query_count - inter
        out = np.zeros(n, np.float32)
        np.divide(inter, union, out=out, where=union > 0, casting="unsafe")
        return out

    def pair_scores(self, rows_a, rows_b, *, weight: float = 0.5) -> dict[str, np.ndarray]:
        """Exact similarities (0-1) of material pairs given as catalogue rows, every metric."""
        self._check_fitted()
        rows_a = np.asarray(rows_a, np.int64)
        rows_b = np.asarray(rows_b, np.int64)
        if rows_a.shape != rows_b.shape or rows_a.ndim != 1:
            raise ValueError(f"rows_a and rows_b must be 1-D of equal length, got {rows_a.shape} and {rows_b.shape}")
        _check_weight(weight)
        out = {m: np.empty(rows_a.size, np.float32) for m in ("shape", "vibration")}
        block = 16_384
        width = self.shape_.shape[1]
        for start in range(0, rows_a.size, block):
            a, b = rows_a[start : start + block], rows_b[start : start + block]
            l1 = np.abs(self.shape_[a] - self.shape_[b]).sum(axis=1)
            out["shape"][start : start + block] = 1.0 / (1.0 + l1 / width)
            out["vibration"][start : start + block] = np.einsum("ij,ij->i", self.fingerprints_[a], self.fingerprints_[b])
        out["blend"] = (weight * out["shape"] + (1 - weight) * out["vibration"]).astype(np.float32)
        if self.structure_ is not None:
            inter = np.bitwise_count(self._structure_words[rows_a] & self._structure_words[rows_b]).sum(axis=1)
            union = self._structure_counts[rows_a] + self._structure_counts[rows_b] - inter
            structure = np.zeros(rows_a.size, np.float32)
            np.divide(inter, union, out=structure, where=union > 0, casting="unsafe")
            out["structure"] = structure
        return out

    # ------------------------------------------------------------------ query
    def _resolve_query(self, query_id, shape, fingerprint, structure):
        row = self.row_of(query_id) if query_id is not None and self._contains(query_id) else None
        if shape is None and fingerprint is None and structure is None:
            if row is None:
                raise ValueError(
                    f"query_id {query_id!r} is not in the index; pass its shape, fingerprint and structure instead"
                    if query_id is not None
                    else "give a query_id from the index or the query's shape/fingerprint/structure"
                )
            bits = None if self.structure_ is None else self.structure_[row]
            return row, self.shape_[row], self.fingerprints_[row], bits
        if shape is not None:
            shape = np.asarray(shape, np.float32)
            if shape.shape != (self.shape_.shape[1],) or not np.isfinite(shape).all():
                raise ValueError(
                    f"shape must be {self.shape_.shape[1]} finite values like the catalogue, got shape {shape.shape}"
                )
        if fingerprint is not None:
            fingerprint = np.asarray(fingerprint, np.float32)
            if fingerprint.shape != (self.fingerprints_.shape[1],) or not np.isfinite(fingerprint).all():
                raise ValueError(
                    f"fingerprint must be {self.fingerprints_.shape[1]} finite values, got shape {fingerprint.shape}"
                )
            if (fingerprint < 0).any() or not (fingerprint > 0).any():
                raise ValueError("fingerprint must be non-negative and not all zero")
            fingerprint = fingerprint / np.float32(np.linalg.norm(fingerprint.astype(np.float64)))
        bits = None if structure is None else _pack_structure(structure, 1, "structure")[0]
        return row, shape, fingerprint, bits

    def query(
        self,
        *,
        query_id=None,
        shape=None,
        fingerprint=None,
        structure=None,
        metric: str = "blend",
        weight: float = 0.5,
        k: int = 10,
        filters: SearchFilter | None = None,
        exclude_query: bool = True,
        ranks: str = "estimated",
        exact: bool = False,
        rerank: OverlayScorer | None = None,
        rerank_depth: int = 50,
    ) -> list[Hit]:
        """The ``k`` materials most similar to a query under ``metric``, best first.

        The query is a catalogue material (``query_id``) or given by its ``shape``
        vector, vibrational ``fingerprint`` (same cm^-1 grid as the catalogue; it is
        normalized here) and ``structure`` (SMILES or bits); ``query_id`` then only
        labels it. ``weight`` is the shape weight of the blend (0-1).

        ``ranks``: "exact" ranks every hit under every metric among the filtered
        catalogue from full exact scans (reads all fingerprints); "estimated" (default)
        gives exact shape and structure ranks and counts vibration and blend ranks
        against the compressed first-stage scores (exact when no compression is
        fitted) - the rank under the searched metric is the position in the list;
        "none" only gives that position. ``exact=True`` skips the compressed first
        stage.

        ``rerank``: a callback ``(query_id, candidate_ids) -> scores in 0-1`` (e.g. a
        Gaussian shape overlay) applied to the best ``rerank_depth`` candidates under
        ``metric``; hits are then ordered by its score, reported as ``"overlay"``. The
        callback may return NaN for candidates it chose not to re-score: they follow the
        re-scored ones in their first-stage order and carry no ``"overlay"`` score.
        """
        self._check_fitted()
        if metric not in METRICS:
            raise ValueError(f"metric must be one of {METRICS}, got {metric!r}")
        if ranks not in RANK_MODES:
            raise ValueError(f"ranks must be one of {RANK_MODES}, got {ranks!r}")
        _check_weight(weight)
        if int(k) < 1:
            raise ValueError(f"k must be a positive integer, got {k!r}")
        if rerank is not None:
            if int(rerank_depth) < 1:
                raise ValueError(f"rerank_depth must be a positive integer, got {rerank_depth!r}")
            if query_id is None:
                raise ValueError("rerank needs a query_id to pass to the callback")
        row, q_shape, q_fingerprint, q_bits = self._resolve_query(query_id, shape, fingerprint, structure)
        available = {
            "shape": q_shape is not None,
            "vibration": q_fingerprint is not None,
            "blend": q_shape is not None and q_fingerprint is not None,
            "structure": q_bits is not None and self.structure_ is not None,
        }
        if not available[metric]:
            raise ValueError(f"metric {metric!r} needs query data that was not given (shape/fingerprint/structure)")

        mask = self.filter_mask(filters)
        if exclude_query and row is not None:
            mask = np.ones(self.size, bool) if mask is None else mask.copy()
            mask[row] = False
        exact = exact or ranks == "exact" or self.compressed_ is None
        depth = max(int(k), int(rerank_depth) if rerank is not None else 0)

        full: dict[str, np.ndarray] = {}  # full-catalogue scores (first-stage for vibration unless exact)

        def get_full(name: str) -> np.ndarray:
            if name not in full:
                if name == "shape":
                    full[name] = self.shape_scores(q_shape)
                elif name == "vibration":
                    full[name] = self.vibration_scores(q_fingerprint, approximate=not exact)
                elif name == "structure":
                    full[name] = self.structure_scores(q_bits)
                else:
                    full[name] = weight * get_full("shape") + (1 - weight) * get_full("vibration")
            return full[name]

        def masked(values: np.ndarray) -> np.ndarray:
            return values if mask is None else np.where(mask, values, np.float32(-np.inf))

        first = masked(get_full(metric))
        if metric in ("vibration", "blend") and not exact:
            count = max(self.min_candidates, self.candidate_multiplier * depth)
            candidates = _ordered_top(first, count)
            exact_vibration = self.fingerprints_[candidates] @ q_fingerprint
            if metric == "blend":
                rescored = weight * full["shape"][candidates] + (1 - weight) * exact_vibration
            else:
                rescored = exact_vibration
            rows = candidates[_ordered_top(rescored.astype(np.float32), depth)]
        else:
            rows = _ordered_top(first, depth)
        if rows.size == 0:
            return []

        hit_scores = self._hit_scores(rows, q_shape, q_fingerprint, q_bits, weight, available)
        if exact:
            # scores from the same full arrays the ranks are counted in, so both agree
            for name in hit_scores:
                hit_scores[name] = get_full(name)[rows].astype(np.float64)

        rank_table: dict[str, np.ndarray] = {}
        if ranks != "none":
            for name in METRICS:
                if not available[name]:
                    continue
                values = masked(get_full(name))
                own = hit_scores[name].astype(values.dtype)
                greater = np.array([np.count_nonzero(values > value) for value in own], dtype=np.int64)
                if not exact and name in ("vibration", "blend"):
                    # the hit's own first-stage entry may exceed its exact score
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

    def _hit_scores(self, rows, q_shape, q_fingerprint, q_bits, weight, available) -> dict[str, np.ndarray]:
        scores: dict[str, np.ndarray] = {}
        if available["shape"]:
            l1 = np.abs(self.shape_[rows] - q_shape).sum(axis=1, dtype=np.float64)
            scores["shape"] = 1.0 / (1.0 + l1 / self.shape_.shape[1])
        if available["vibration"]:
            scores["vibration"] = (self.fingerprints_[rows] @ q_fingerprint).astype(np.float64)
        if available["blend"]:
            scores["blend"] = weight * scores["shape"] + (1 - weight) * scores["vibration"]
        if available["structure"]:
            words = q_bits.view(np.uint64)
            inter = np.bitwise_count(self._structure_words[rows] & words).sum(axis=1)
            union = self._structure_counts[rows] + int(np.bitwise_count(words).sum()) - inter
            scores["structure"] = np.where(union > 0, inter / np.maximum(union, 1), 0.0)
        return scores

    # ------------------------------------------------------------------ neighbors
    def neighbors(
        self,
        metric: str = "shape",
        k: int = 10,
        *,
        weight: float = 0.5,
        filters: SearchFilter | None = None,
        exact: bool | None = None,
        show_progress: bool = False,
    ) -> NeighborLists:
        """The ``k`` nearest other materials of every material under ``metric``.

        Computed in blocks; memory stays O(N * k) plus one block. ``exact=None``
        scans all pairs when at most ``exact_below`` materials pass ``filters`` and
        otherwise uses the two-stage scan: candidates from k-means groups (shape:
        Euclidean distance on the shape vectors; vibration: compressed fingerprints;
        blend: the union of both; structure is always scanned exactly through sparse
        bit products, quadratic in N) and exact re-scoring of the candidates.
        """
        self._check_fitted()
        if metric not in METRICS:
            raise ValueError(f"metric must be one of {METRICS}, got {metric!r}")
        if metric == "structure" and self.structure_ is None:
            raise ValueError("metric 'structure' needs structure_bits, which were not given to fit()")
        _check_weight(weight)
        if int(k) < 1:
            raise ValueError(f"k must be a positive integer, got {k!r}")
        mask = self.filter_mask(filters)
        rows = np.arange(self.size) if mask is None else np.flatnonzero(mask)
        k = min(int(k), max(rows.size - 1, 0))
        if exact is None:
            exact = rows.size <= self.exact_below or metric == "structure"
        if k == 0:
            empty = np.empty((rows.size, 0))
            return NeighborLists(metric, rows, empty.astype(np.int64), empty.astype(np.float32), bool(exact))
        if exact:
            local, scores = self._exact_neighbors(metric, rows, k, weight, show_progress)
        else:
            count = max(self.neighbor_candidates, k + 10)
            if metric == "shape":
                candidates = self._candidates("shape", rows, count, show_progress)
            elif metric == "vibration":
                candidates = self._candidates("vibration", rows, count, show_progress)
            else:
                candidates = np.concatenate(
                    [
                        self._candidates("shape", rows, count, show_progress),
                        self._candidates("vibration", rows, count, show_progress),
                    ],
                    axis=1,
                )
            local, scores = self._rescore(metric, rows, candidates, k, weight)
        neighbor_rows = np.where(local >= 0, rows[np.maximum(local, 0)], -1)
        return NeighborLists(metric, rows, neighbor_rows, scores, bool(exact))

    def _block_scores(self, metric: str, block_rows: np.ndarray, rows: np.ndarray, weight: float) -> np.ndarray:
        """Exact similarities of ``block_rows`` (B) against ``rows`` (R) -> (B, R) float32."""
        from scipy.spatial.distance import cdist

        if metric == "structure":
            inter = self._sparse_bits(block_rows) @ self._sparse_bits(rows).T
            inter = np.asarray(inter.todense(), np.float32)
            union = self._structure_counts[block_rows][:, None] + self._structure_counts[rows][None, :] - inter
            out = np.zeros_like(inter)
            np.divide(inter, union, out=out, where=union > 0)
            return out
        parts = {}
        if metric in ("shape", "blend"):
            l1 = cdist(self.shape_[block_rows], self.shape_[rows], "cityblock")
            parts["shape"] = (1.0 / (1.0 + l1 / self.shape_.shape[1])).astype(np.float32)
        if metric in ("vibration", "blend"):
            parts["vibration"] = self.fingerprints_[block_rows] @ self.fingerprints_[rows].T
        if metric == "blend":
            return weight * parts["shape"] + (1 - weight) * parts["vibration"]
        return parts[metric]

    def _sparse_bits(self, rows: np.ndarray):
        from scipy import sparse

        bits = np.unpackbits(self.structure_[rows], axis=1)
        return sparse.csr_matrix(bits.astype(np.float32))

    def _exact_neighbors(self, metric, rows, k, weight, show_progress):
        local = np.full((rows.size, k), -1, np.int64)
        scores = np.full((rows.size, k), np.nan, np.float32)
        block = max(1, min(1024, (64 * 2**20) // (4 * rows.size)))
        for start in _progress(range(0, rows.size, block), show_progress, f"{metric} neighbors"):
            stop = min(start + block, rows.size)
            values = self._block_scores(metric, rows[start:stop], rows, weight)
            values[np.arange(stop - start), np.arange(start, stop)] = -np.inf
            top = _row_top(values, k)
            local[start:stop, : top.shape[1]] = top
            scores[start:stop, : top.shape[1]] = np.take_along_axis(values, top, axis=1)
        return local, scores

    def _first_stage(self, kind: str, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Vectors Y and column bias b such that larger ``y_q . y_c + b_c`` means more alike."""
        if kind == "shape":
            vectors = self.shape_[rows]
            # Euclidean proxy for the L1 shape distance: -|q - c|^2 / 2 up to a per-query constant
            bias = -0.5 * np.einsum("ij,ij->i", vectors, vectors)
        elif self.compressed_ is not None:
            vectors = self.compressed_[rows]
            bias = self.row_bias_[rows]
        else:
            vectors = self.fingerprints_[rows]
            bias = np.zeros(rows.size, np.float32)
        return np.ascontiguousarray(vectors, np.float32), bias.astype(np.float32)

    def _grouping(self, kind: str, rows: np.ndarray, vectors: np.ndarray):
        key = (kind, rows.size, hash(rows[: 64].tobytes()), hash(rows[-64:].tobytes()))
        if key in self._coarse:
            return self._coarse[key]
        from sklearn.cluster import KMeans

        n = rows.size
        clusters = min(n, self.clusters or max(1, int(round(math.sqrt(n)))))
        # Vibrational fingerprints group less tightly than shape moments (measured at 100k: probing
        # clusters/12 groups found 0.67 of the true top 10, clusters/3 found 0.85), so they probe more.
        share = VIBRATION_PROBE_SHARE if kind == "vibration" else SHAPE_PROBE_SHARE
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
        grouping = (members, nearest)
        self._coarse[key] = grouping
        return grouping

    def _candidates(self, kind: str, rows: np.ndarray, count: int, show_progress: bool) -> np.ndarray:
        """(R, count) local candidate positions (-1 padded) from the grouped first stage."""
        from threadpoolctl import threadpool_limits

        vectors, bias = self._first_stage(kind, rows)
        members, nearest = self._grouping(kind, rows, vectors)
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
                list(_progress(pool.map(work, tasks), show_progress, f"{kind} candidates", total=len(members)))
        return out

    def _rescore(self, metric, rows, candidates, k, weight):
        """Exact re-scoring of (R, C) local candidates -> best k local positions and scores."""
        r = rows.size
        local = np.full((r, k), -1, np.int64)
        scores = np.full((r, k), np.nan, np.float32)
        width = self.shape_.shape[1]
        block = max(1, (48 * 2**20) // (4 * candidates.shape[1] * self.fingerprints_.shape[1]))
        for start in range(0, r, block):
            stop = min(start + block, r)
            cand = candidates[start:stop]
            if metric == "blend":
                cand = _dedupe_rows(cand)
            valid = cand >= 0
            query_rows = rows[start:stop]
            cand_rows = rows[np.maximum(cand, 0)]
            parts = {}
            if metric in ("shape", "blend"):
                l1 = np.abs(self.shape_[cand_rows] - self.shape_[query_rows][:, None, :]).sum(axis=2)
                parts["shape"] = 1.0 / (1.0 + l1 / width)
            if metric in ("vibration", "blend"):
                parts["vibration"] = np.einsum(
                    "bcd,bd->bc", self.fingerprints_[cand_rows], self.fingerprints_[query_rows]
                )
            values = weight * parts["shape"] + (1 - weight) * parts["vibration"] if metric == "blend" else parts[metric]
            values = np.where(valid, values, -np.inf).astype(np.float32)
            top = _row_top(values, k)
            chosen = np.take_along_axis(values, top, axis=1)
            ok = np.isfinite(chosen)
            local[start:stop, : top.shape[1]] = np.where(ok, np.take_along_axis(cand, top, axis=1), -1)
            scores[start:stop, : top.shape[1]] = np.where(ok, chosen, np.nan)
        return local, scores

    # ------------------------------------------------------------------ cache
    def save(self, path: str | os.PathLike, revision: str) -> None:
        """Write the fitted index to ``path`` (numpy .npz, uncompressed) under a catalogue revision key."""
        self._check_fitted()
        if not isinstance(revision, str) or not revision:
            raise ValueError(f"revision must be a non-empty string, got {revision!r}")
        config = {
            name: getattr(self, name)
            for name in (
                "pca_components", "pca_sample_size", "candidate_multiplier", "min_candidates",
                "neighbor_candidates", "exact_below", "clusters", "probes", "n_jobs", "random_state",
            )
        }
        arrays = {
            "format_version": np.int64(FORMAT_VERSION),
            "revision": np.asarray(revision),
            "config": np.asarray(json.dumps(config)),
            "ids": self.ids_,
            "shape": self.shape_,
            "fingerprints": self.fingerprints_,
        }
        optional = {
            "structure": self.structure_,
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
        path = Path(path)
        temporary = path.with_name(path.name + ".partial")
        with open(temporary, "wb") as handle:
            np.savez(handle, **arrays)
        os.replace(temporary, path)

    @classmethod
    def load(cls, path: str | os.PathLike, revision: str, *, strict: bool = False) -> "SimilarityIndex | None":
        """Read an index written by :meth:`save` if it was built for ``revision``.

        Returns None when the file is missing or holds another revision, or raises
        (FileNotFoundError / :class:`RevisionMismatchError`) when ``strict``.
        """
        path = Path(path)
        if not path.exists():
            if strict:
                raise FileNotFoundError(f"no cached index at {path}")
            return None
        with np.load(path, allow_pickle=False) as data:
            if int(data["format_version"]) != FORMAT_VERSION:
                if strict:
                    raise RevisionMismatchError(f"cached index at {path} has format {int(data['format_version'])}")
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
            index._row_of = None
            index._shape_sums = None
            index.shape_ = data["shape"]
            index.fingerprints_ = data["fingerprints"]
            get = lambda name: data[name] if name in data.files else None  # noqa: E731
            index.structure_ = get("structure")
            index._set_structure_counts()
            index.pca_mean_, index.pca_basis_ = get("pca_mean"), get("pca_basis")
            index.compressed_, index.row_bias_ = get("compressed"), get("row_bias")
            if index.pca_mean_ is not None:
                index._mean_square = float(index.pca_mean_ @ index.pca_mean_)
            index.molecular_weight_, index.logp_ = get("molecular_weight"), get("logp")
            index.retired_, index.restricted_ = get("retired"), get("restricted")
            index.descriptor_vocabulary_ = None
            index._descriptor_columns = None
            if "descriptor_vocabulary" in data.files:
                index._set_descriptors(data["descriptor_vocabulary"], data["descriptor_indptr"], data["descriptor_indices"])
            index._coarse = {}
        return index


def _words(words) -> Iterable[str]:
    if isinstance(words, str):
        raise ValueError(f"descriptors must be a set of words per material, got the string {words!r}")
    return (str(w) for w in words)


def _check_weight(weight: float) -> None:
    if not 0.0 <= float(weight) <= 1.0:
        raise ValueError(f"weight (shape share of the blend) must be in 0-1, got {weight!r}")


def _dedupe_rows(candidates: np.ndarray) -> np.ndarray:
    """Replace repeated candidates within each row by -1."""
    order = np.argsort(candidates, axis=1, kind="stable")
    ordered = np.take_along_axis(candidates, order, axis=1)
    repeated = np.zeros_like(ordered, dtype=bool)
    repeated[:, 1:] = ordered[:, 1:] == ordered[:, :-1]
    ordered[repeated] = -1
    out = np.empty_like(candidates)
    np.put_along_axis(out, order, ordered, axis=1)
    return out


_blas_controller = None


def _single_threaded_blas():
    """Context limiting BLAS to one thread: matrix-vector products are faster so here."""
    global _blas_controller
    if _blas_controller is None:
        from threadpoolctl import ThreadpoolController

        _blas_controller = ThreadpoolController()
    return _blas_controller.limit(limits=1, user_api="blas")


def _progress(iterable, show: bool, description: str, total: int | None = None):
    if not show:
        return iterable
    from tqdm import tqdm

    return tqdm(iterable, desc=description, total=total, unit="block")
