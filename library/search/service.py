"""Search over the catalogue: the similarity index built from stored records, and the questions
perfumers and chemists ask of it (substitutes, comparisons, disagreements, scorecards).

The index is built from one consistent snapshot of the catalogue (a single read
transaction, repeatable-read on PostgreSQL) and cached on disk keyed by the
catalogue revision and the engine stamps, so a restart reuses it and any change
to the catalogue invalidates it.

Similarities (all 0-1, larger = more alike):
  shape      USR similarity 1/(1 + mean |a - b|) over USRCAT (60) + chiral (12) moments
  overlay    Gaussian shape Tanimoto of the best rotation-only superposition (re-ranks shape)
  vibration  cosine of EVA fingerprints of the conformer-averaged harmonic spectra
  blend      w * shape + (1 - w) * vibration
  structure  Tanimoto of Morgan radius-2 2048-bit fingerprints (the 2D baseline)
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import platformdirs
from rdkit import Chem
from rdkit.Chem import Crippen
from sqlalchemy import select
from sqlalchemy.orm import selectinload

from library import computations
from library.catalogue import curation, observations, records
from library.catalogue.database import Catalogue
from library.catalogue.models import CatalogueState, Material, MaterialOdor, OdorDescriptor
from library.errors import OlibraError
from library.search import disagreements, scorecard
from library.search.index import METRICS, SearchFilter, SimilarityIndex
from library.structures import StructureError, standardize

CAUTION = ("Candidates are hypotheses about smell, not safety or regulatory findings: check each against "
           "the applicable restrictions (e.g. IFRA Standards, local cosmetic and chemical regulations), its "
           "safety data sheet and allergen labelling rules, with qualified people, before any use.")
DEFAULT_RERANK_DEPTH = 80
NEAR_TIE = 0.01  # overlay Tanimoto gap counted as a tie in the benchmark's second recall figure
OVERLAY_CONFORMERS = 3  # conformers per material taken into an overlay (the most weighted)
# Shape re-rank: the top RERANK_POOL * depth by averaged moments, narrowed to `depth` by the best
# conformer-pair moments, then ordered by Gaussian overlay.
RERANK_POOL = 3


class SearchError(OlibraError, ValueError):
    """A search that cannot be answered as asked."""


@dataclass(frozen=True)
class MaterialInfo:
    id: int
    name: str
    smiles: str
    cas_rn: str | None
    odors: tuple[str, ...]
    status: str
    restricted: bool
    molecular_weight: float
    logp: float


@dataclass
class CatalogueIndex:
    """The fitted index plus what the catalogue says about each indexed material."""

    index: SimilarityIndex
    materials: dict[int, MaterialInfo]
    unindexed: list[MaterialInfo]  # materials lacking a current shape or vibration record
    revision: str
    vibration_engine: str
    from_cache: bool = False


def _logp(smiles: str) -> float:
    return float(Crippen.MolLogP(Chem.MolFromSmiles(smiles)))


def _cache_path(catalogue: Catalogue, engine: str, cache_dir: Path | None) -> Path:
    folder = cache_dir or Path(os.environ.get("OLIBRA_CACHE") or platformdirs.user_cache_dir("olibra", appauthor=False))
    folder.mkdir(parents=True, exist_ok=True)
    key = hashlib.sha256(str(catalogue.engine.url).encode()).hexdigest()[:16]
    return folder / f"index-{key}-{engine}.npz"


def _stamps(engine: str) -> dict[str, records.EngineStamp]:
    return {s.kind: s for s in computations.stamps(computations.Plan(vibration_engine=engine))}


def load_index(catalogue: Catalogue, *, vibration_engine: str = "mmff", cache_dir: Path | None = None,
               use_cache: bool = True) -> CatalogueIndex:
    """The similarity index over every material with current shape and vibration records."""
    stamps = _stamps(vibration_engine)
    with catalogue.sessions() as session:
        if catalogue.engine.dialect.name == "postgresql":
            session.connection(execution_options={"isolation_level": "REPEATABLE READ"})
        with session.begin():
            revision_number = session.scalar(select(CatalogueState.revision).where(CatalogueState.id == 1))
            revision = (f"r{revision_number or 0}-{stamps['shape'].parameter_hash[:12]}-"
                        f"{stamps['vibration'].engine_version}-{stamps['vibration'].parameter_hash[:12]}")
            materials = list(session.scalars(select(Material).options(
                selectinload(Material.odors).selectinload(MaterialOdor.descriptor)).order_by(Material.id)))
            state = {kind: records.record_state(session, stamp, include_retired=True)
                     for kind, stamp in stamps.items()}
            infos = {m.id: MaterialInfo(m.id, m.preferred_name, m.smiles, m.cas_rn,
                                        tuple(sorted(o.descriptor.term for o in m.odors)), m.status,
                                        m.restricted, m.average_mass_g_per_mol, _logp(m.smiles))
                     for m in materials}
            ready = [i for i in infos if state["shape"].get(i) == "current" and state["vibration"].get(i) == "current"]
            unindexed = [infos[i] for i in infos if i not in set(ready)]
            if not ready:
                raise SearchError("no material has current shape and vibration records yet; "
                                  "run `olibra compute all` first")
            path = _cache_path(catalogue, vibration_engine, cache_dir)
            cached = SimilarityIndex.load(path, revision) if use_cache else None
            if cached is not None:
                return CatalogueIndex(cached, {i: infos[i] for i in cached.ids_.tolist()}, unindexed,
                                      revision, vibration_engine, from_cache=True)
            shape_records = records.load_records(session, "shape", stamps["shape"].engine_name,
                                                 material_ids=ready, names=("usrcat", "chiral"))
            vibration_records = records.load_records(session, "vibration", stamps["vibration"].engine_name,
                                                     material_ids=ready, names=("fingerprint",))
    shape_vectors = np.stack([np.concatenate([shape_records[i].arrays["usrcat"], shape_records[i].arrays["chiral"]])
                              for i in ready])
    fingerprints = np.stack([vibration_records[i].arrays["fingerprint"] for i in ready])
    index = SimilarityIndex(pca_components=64 if len(ready) > 5000 else None).fit(
        np.array(ready, dtype=np.int64), shape_vectors, fingerprints,
        structure_bits=[infos[i].smiles for i in ready],
        properties={"molecular_weight": [infos[i].molecular_weight for i in ready],
                    "logp": [infos[i].logp for i in ready],
                    "descriptors": [set(infos[i].odors) for i in ready],
                    "status": [infos[i].status for i in ready],
                    "restricted": [infos[i].restricted for i in ready]})
    if use_cache:
        index.save(path, revision)
    return CatalogueIndex(index, {i: infos[i] for i in ready}, unindexed, revision, vibration_engine)


# ---------------------------------------------------------------- queries


@dataclass
class QueryMaterial:
    """What a query is: a catalogue material, or a new structure computed on the fly."""

    label: str
    smiles: str
    material_id: int | None
    shape_vector: np.ndarray | None = None
    fingerprint: np.ndarray | None = None
    shape_arrays: dict | None = None
    vibration_arrays: dict | None = None
    vibration_summary: dict | None = None
    notes: list[str] = field(default_factory=list)


def resolve_query(catalogue: Catalogue, text: str, cat_index: CatalogueIndex) -> QueryMaterial:
    """A material key (id, name, synonym, CAS RN, InChIKey) or a structure (SMILES, InChI, molfile)."""
    text = (text or "").strip()
    if not text:
        raise SearchError("give a material (name, id, CAS RN, InChIKey) or a structure (SMILES, molfile)")
    with catalogue.reading() as session:
        try:
            material = curation.find_material(session, text)
        except curation.CurationError as lookup_error:
            material = None
            try:
                structure = standardize(text)
            except StructureError as exc:
                raise SearchError(f"{lookup_error}; and as a structure: {exc}") from None
            material = curation.find_by_inchikey(session, structure.inchikey)
            if material is None:
                return _compute_query(structure.smiles, cat_index.vibration_engine,
                                      label=f"new structure {structure.smiles}")
        if material.id not in cat_index.materials:
            raise SearchError(f"#{material.id} {material.preferred_name} has no current shape and vibration "
                              "records; run `olibra compute all` first")
        return QueryMaterial(material.preferred_name, material.smiles, material.id)


def _compute_query(smiles: str, engine: str, *, label: str) -> QueryMaterial:
    plan = computations.Plan(vibration_engine=engine)
    try:
        result = computations.compute_material(plan, smiles)
    except ValueError as exc:
        raise SearchError(f"cannot compute the query structure: {exc}") from None
    shape_arrays, _ = result["shape"]
    vibration_arrays, vibration_summary = result["vibration"]
    vector = np.concatenate([shape_arrays["usrcat"], shape_arrays["chiral"]]).astype(np.float32)
    return QueryMaterial(label, smiles, None, vector, np.asarray(vibration_arrays["fingerprint"], np.float32),
                         {k: np.asarray(v, np.float32) for k, v in shape_arrays.items()},
                         {k: np.asarray(v, np.float32) for k, v in vibration_arrays.items()}, vibration_summary,
                         notes=["the query structure is not in the catalogue: computed on the fly, not stored"])


def _shape_arrays(catalogue: Catalogue, material_ids, engine_name: str) -> dict[int, dict]:
    with catalogue.reading() as session:
        loaded = records.load_records(session, "shape", engine_name, material_ids=material_ids)
    return {i: r.arrays for i, r in loaded.items()}


def overlay_scorer(catalogue: Catalogue, cat_index: CatalogueIndex, query: QueryMaterial, *,
                   depth: int = DEFAULT_RERANK_DEPTH):
    """A re-rank callback for a pool of moment-ranked candidates: the `depth` candidates whose best
    conformer pair is most alike by moments get the Gaussian-overlay shape Tanimoto (0-1), the rest NaN."""
    from library import shape

    engine_name = _stamps(cat_index.vibration_engine)["shape"].engine_name

    def score(_query_id, candidate_ids):
        ids = list(candidate_ids) + ([] if query.material_id is None else [query.material_id])
        arrays = _shape_arrays(catalogue, ids, engine_name)
        query_arrays = query.shape_arrays if query.material_id is None else arrays[query.material_id]
        query_moments = computations.top_conformer_moments(query_arrays, OVERLAY_CONFORMERS)
        closeness = [shape.best_conformer_similarity(
            query_moments, computations.top_conformer_moments(arrays[c], OVERLAY_CONFORMERS))
            for c in candidate_ids]
        chosen = set(np.argsort(-np.asarray(closeness), kind="stable")[:depth].tolist())
        query_ensemble = computations.ensemble_from_arrays(query.smiles, query_arrays,
                                                           max_members=OVERLAY_CONFORMERS)
        out = []
        for position, candidate in enumerate(candidate_ids):
            if position not in chosen:
                out.append(float("nan"))
                continue
            ensemble = computations.ensemble_from_arrays(cat_index.materials[candidate].smiles, arrays[candidate],
                                                         max_members=OVERLAY_CONFORMERS)
            out.append(shape.overlay_similarity(query_ensemble, ensemble).shape_tanimoto)
        return out

    return score


@dataclass(frozen=True)
class Candidate:
    material: MaterialInfo
    rank: int
    score: float
    scores: dict[str, float]
    ranks: dict[str, int]
    explanation: dict | None = None


@dataclass
class SearchOutcome:
    query: QueryMaterial
    metric: str
    weight: float
    candidates: list[Candidate]
    notes: list[str]
    caution: str = CAUTION


def build_filter(*, mw_range=None, logp_range=None, must_have=(), must_not_have=(), include_retired=False,
                 include_restricted=False, exclude_ids=()) -> SearchFilter:
    try:
        return SearchFilter(molecular_weight_range=mw_range, logp_range=logp_range,
                            must_have=frozenset(t.lower() for t in must_have),
                            must_not_have=frozenset(t.lower() for t in must_not_have),
                            exclude_retired=not include_retired, exclude_restricted=not include_restricted,
                            exclude_ids=frozenset(exclude_ids))
    except ValueError as exc:
        raise SearchError(str(exc)) from None


def _check_search(metric: str, weight: float, k: int) -> None:
    if metric not in METRICS:
        raise SearchError(f"metric {metric!r} is not one of {', '.join(METRICS)}")
    if not 0.0 <= weight <= 1.0:
        raise SearchError(f"blend weight {weight} is outside 0-1")
    if k < 1:
        raise SearchError("k must be at least 1")


def find_substitutes(catalogue: Catalogue, query_text: str, *, metric: str = "blend", weight: float = 0.5,
                     k: int = 10, filters: SearchFilter | None = None, rerank_depth: int = DEFAULT_RERANK_DEPTH,
                     explain: bool = False, vibration_engine: str = "mmff",
                     cat_index: CatalogueIndex | None = None) -> SearchOutcome:
    """The k catalogue materials most similar to the query under `metric` (shape re-ranked by overlay)."""
    _check_search(metric, weight, k)
    cat_index = cat_index or load_index(catalogue, vibration_engine=vibration_engine)
    query = resolve_query(catalogue, query_text, cat_index)
    return substitutes_for(catalogue, query, metric=metric, weight=weight, k=k, filters=filters,
                           rerank_depth=rerank_depth, explain=explain, cat_index=cat_index)


# ---------------------------------------------------------------- pairs


def _vibration_spectrum(arrays: dict, summary: dict):
    from library.vibration import spectrum as spectrum_module

    return spectrum_module.VibrationSpectrum.from_arrays(arrays, summary)


def explain_pair(catalogue: Catalogue, query: QueryMaterial, other: MaterialInfo,
                 cat_index: CatalogueIndex) -> dict:
    """Why two materials score as they do: overlay scores, volume ratio, matched and unmatched bands."""
    from library import shape
    from library.vibration import spectrum as spectrum_module

    stamps = _stamps(cat_index.vibration_engine)
    ids = [other.id] + ([] if query.material_id is None else [query.material_id])
    with catalogue.reading() as session:
        shape_loaded = records.load_records(session, "shape", stamps["shape"].engine_name, material_ids=ids)
        vibration_loaded = records.load_records(session, "vibration", stamps["vibration"].engine_name,
                                                material_ids=ids)
    if query.material_id is None:
        query_shape, query_vibration = query.shape_arrays, (query.vibration_arrays, query.vibration_summary)
    else:
        query_shape = shape_loaded[query.material_id].arrays
        loaded = vibration_loaded[query.material_id]
        query_vibration = (loaded.arrays, loaded.summary)
    overlay = shape.overlay_similarity(
        computations.ensemble_from_arrays(query.smiles, query_shape, max_members=OVERLAY_CONFORMERS),
        computations.ensemble_from_arrays(other.smiles, shape_loaded[other.id].arrays,
                                          max_members=OVERLAY_CONFORMERS),
        mode="tversky")
    bands = spectrum_module.match_bands(
        _vibration_spectrum(*query_vibration),
        _vibration_spectrum(vibration_loaded[other.id].arrays, vibration_loaded[other.id].summary))
    return {"overlay_tanimoto": overlay.shape_tanimoto, "overlay_tversky": overlay.tversky,
            "volume_ratio": overlay.volume_ratio, "bands": bands}


@dataclass
class Comparison:
    a: MaterialInfo
    b: MaterialInfo
    scores: dict[str, float]
    explanation: dict
    weight: float


def compare(catalogue: Catalogue, key_a: str, key_b: str, *, weight: float = 0.5,
            vibration_engine: str = "mmff", cat_index: CatalogueIndex | None = None) -> Comparison:
    """Every metric's similarity of two catalogue materials, with the overlay and band explanation."""
    cat_index = cat_index or load_index(catalogue, vibration_engine=vibration_engine)
    query_a = resolve_query(catalogue, key_a, cat_index)
    query_b = resolve_query(catalogue, key_b, cat_index)
    if query_a.material_id is None or query_b.material_id is None:
        raise SearchError("compare takes two catalogue materials; add a new structure first with `olibra add`")
    if query_a.material_id == query_b.material_id:
        raise SearchError(f"both keys name the same material, #{query_a.material_id} {query_a.label}")
    index = cat_index.index
    rows_a, rows_b = [index.row_of(query_a.material_id)], [index.row_of(query_b.material_id)]
    scores = {name: float(values[0]) for name, values in index.pair_scores(rows_a, rows_b, weight=weight).items()}
    b_info = cat_index.materials[query_b.material_id]
    explanation = explain_pair(catalogue, query_a, b_info, cat_index)
    scores["overlay"] = explanation["overlay_tanimoto"]
    return Comparison(cat_index.materials[query_a.material_id], b_info, scores, explanation, weight)


# ---------------------------------------------------------------- disagreements and scorecard


def observed_similarity(catalogue: Catalogue, source: str | None):
    """A callable (id_a, id_b) -> observed similarity or None, and a label saying what it is.

    source 'descriptors': Jaccard index of the two odor descriptor sets (None when either has none);
    otherwise the name of an observation data set: Pearson correlation of the two profiles over
    the variables both were measured on (None with fewer than 3 shared variables).
    """
    if source is None:
        return None, None
    if source == "descriptors":
        with catalogue.reading() as session:
            sets: dict[int, set[str]] = {}
            for material_id, term in session.execute(
                    select(MaterialOdor.material_id, OdorDescriptor.term).join(OdorDescriptor)):
                sets.setdefault(material_id, set()).add(term)

        def jaccard(a, b):
            if a not in sets or b not in sets:
                return None
            return len(sets[a] & sets[b]) / len(sets[a] | sets[b])

        return jaccard, "odor descriptor Jaccard"
    with catalogue.reading() as session:
        try:
            ids, variables, matrix = observations.observation_profiles(session, source)
        except curation.CurationError as exc:
            raise SearchError(str(exc)) from None
    row_of = {m: i for i, m in enumerate(ids)}

    def correlation(a, b):
        if a not in row_of or b not in row_of:
            return None
        x, y = matrix[row_of[a]], matrix[row_of[b]]
        both = ~np.isnan(x) & ~np.isnan(y)
        if both.sum() < 3 or np.std(x[both]) == 0 or np.std(y[both]) == 0:
            return None
        return float(np.corrcoef(x[both], y[both])[0, 1])

    return correlation, f"profile correlation in data set {source!r} ({len(variables)} variables)"


@dataclass
class DisagreementRow:
    pair: disagreements.Disagreement
    a: MaterialInfo
    b: MaterialInfo
    flags: list[str]
    basis: str  # 'indistinguishable by shape' | 'indistinguishable by vibration' | 'thresholds'


INDISTINGUISHABLE = 0.999  # a similarity this high means the metric cannot tell the two apart
RESOLVED = 0.995           # ... while the other metric, at or below this, does


def _telling_pairs(index: SimilarityIndex, lists, observed, *, observed_alike: float,
                   observed_unalike: float) -> list[tuple[disagreements.Disagreement, str]]:
    """Pairs one metric cannot tell apart while the other can: isotopologues (same shape, other
    vibrations) and mirror-image pairs (same vibrations, other chiral shape)."""
    candidates = set()
    for found in lists:
        for row, neighbors in zip(found.rows.tolist(), found.neighbor_rows.tolist()):
            candidates |= {(min(row, o), max(row, o)) for o in neighbors if o >= 0}
    candidates = sorted(candidates)
    if not candidates:
        return []
    scores = index.pair_scores([a for a, _ in candidates], [b for _, b in candidates])
    out = []
    for i, (row_a, row_b) in enumerate(candidates):
        shape, vibration = float(scores["shape"][i]), float(scores["vibration"][i])
        if shape >= INDISTINGUISHABLE and vibration <= RESOLVED:
            direction, basis = disagreements.SHAPE_NOT_VIBRATION, "indistinguishable by shape"
        elif vibration >= INDISTINGUISHABLE and shape <= RESOLVED:
            direction, basis = disagreements.VIBRATION_NOT_SHAPE, "indistinguishable by vibration"
        else:
            continue
        id_a, id_b = int(index.ids_[row_a]), int(index.ids_[row_b])
        value = observed(id_a, id_b) if observed else None
        alike = None if value is None else (True if value >= observed_alike else
                                             False if value <= observed_unalike else None)
        blind, seeing = ("shape", "vibration") if direction == disagreements.SHAPE_NOT_VIBRATION \
            else ("vibration", "shape")
        sides = None if alike is None else (blind if alike else seeing)
        structure = float(scores["structure"][i]) if "structure" in scores else None
        out.append((disagreements.Disagreement(
            id_a=id_a, id_b=id_b, direction=direction, score=abs(shape - vibration), shape=shape,
            vibration=vibration, structure=structure, shape_rank=None, vibration_rank=None, observed=value,
            observed_alike=alike, sides_with=sides), basis))
    return out


def find_disagreement_rows(catalogue: Catalogue, *, k: int = 20, min_shape: float = 0.9,
                           max_vibration: float = 0.6, min_vibration: float = 0.9, max_shape: float = 0.6,
                           direction: str = "both", observation: str | None = "descriptors",
                           observed_alike: float = 0.5, observed_unalike: float = 0.2,
                           include_retired: bool = False, vibration_engine: str = "mmff",
                           cat_index: CatalogueIndex | None = None) -> tuple[list[DisagreementRow], str | None]:
    """Catalogue-wide pairs where shape and vibration disagree, with pair flags.

    First the telling pairs, which one metric cannot tell apart (similarity >= 0.999) while
    the other can (<= 0.995), by gap; then the pairs past the user's thresholds, by gap.
    """
    cat_index = cat_index or load_index(catalogue, vibration_engine=vibration_engine)
    index = cat_index.index
    observed, label = observed_similarity(catalogue, observation)
    filters = build_filter(include_retired=include_retired, include_restricted=True)
    try:
        lists = {metric: index.neighbors(metric, k, filters=filters) for metric in ("shape", "vibration")}
        found = disagreements.find_disagreements(
            index, k=k, min_shape=min_shape, max_vibration=max_vibration, min_vibration=min_vibration,
            max_shape=max_shape, direction=direction, observed=observed, observed_alike=observed_alike,
            observed_unalike=observed_unalike, filters=filters, shape_neighbors=lists["shape"],
            vibration_neighbors=lists["vibration"])
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    telling = _telling_pairs(index, lists.values(), observed, observed_alike=observed_alike,
                             observed_unalike=observed_unalike)
    telling = [(p, basis) for p, basis in telling if direction in ("both", p.direction)]
    telling_ids = {(min(p.id_a, p.id_b), max(p.id_a, p.id_b)) for p, _ in telling}
    ordered = sorted(telling, key=lambda item: -item[0].score)
    ordered += [(p, "thresholds") for p in found if (min(p.id_a, p.id_b), max(p.id_a, p.id_b)) not in telling_ids]
    with catalogue.reading() as session:
        flags: dict[tuple[int, int], list[str]] = {}
        for flag in observations.list_flags(session):
            flags.setdefault((flag.material_a_id, flag.material_b_id), []).append(flag.kind)
    rows = [DisagreementRow(pair, cat_index.materials[pair.id_a], cat_index.materials[pair.id_b],
                            flags.get((min(pair.id_a, pair.id_b), max(pair.id_a, pair.id_b)), []), basis)
            for pair, basis in ordered]
    return rows, label


SCORECARD_MAX_MATERIALS = 3000


def metric_matrices(index: SimilarityIndex, rows: np.ndarray, *, weight: float = 0.5) -> dict[str, np.ndarray]:
    """Full similarity matrices (0-1) of the given index rows under shape, vibration, blend and structure."""
    from scipy.spatial.distance import cdist

    shape = index.shape_[rows].astype(np.float64)
    shape_similarity = 1.0 / (1.0 + cdist(shape, shape, "cityblock") / shape.shape[1])
    fingerprints = index.fingerprints_[rows].astype(np.float64)
    vibration = np.clip(fingerprints @ fingerprints.T, 0.0, 1.0)
    out = {"shape": shape_similarity, "vibration": vibration,
           "blend": weight * shape_similarity + (1 - weight) * vibration}
    if index.structure_ is not None:
        bits = np.unpackbits(index.structure_[rows], axis=1).astype(np.float64)
        inter = bits @ bits.T
        counts = bits.sum(axis=1)
        union = counts[:, None] + counts[None, :] - inter
        out["structure"] = np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)
    return out


def run_scorecard(catalogue: Catalogue, *, observation: str = "descriptors", k: int = 5,
                  permutations: int = 999, resamples: int = 1000, weight: float = 0.5, seed: int = 0,
                  vibration_engine: str = "mmff", cat_index: CatalogueIndex | None = None):
    """How well each metric predicts observed similarity, side by side (list of MetricScore) and notes."""
    cat_index = cat_index or load_index(catalogue, vibration_engine=vibration_engine)
    index = cat_index.index
    notes = []
    descriptor_sets = observed = None
    if observation == "descriptors":
        ids = [i for i in index.ids_.tolist() if cat_index.materials[i].odors]
    else:
        with catalogue.reading() as session:
            try:
                observed_ids, variables, matrix = observations.observation_profiles(session, observation)
            except curation.CurationError as exc:
                raise SearchError(str(exc)) from None
        indexed = set(index.ids_.tolist())
        ids = [i for i in observed_ids if i in indexed]
        if len(ids) < len(observed_ids):
            notes.append(f"{len(observed_ids) - len(ids)} observed material(s) lack computed records")
    if len(ids) > SCORECARD_MAX_MATERIALS:
        rng = np.random.default_rng(seed)
        ids = sorted(rng.choice(ids, SCORECARD_MAX_MATERIALS, replace=False).tolist())
        notes.append(f"a seeded sample of {SCORECARD_MAX_MATERIALS} materials was scored")
    if len(ids) < 4:
        raise SearchError(f"only {len(ids)} material(s) have both observations and computed records; "
                          "the scorecard needs at least 4")
    rows = np.array([index.row_of(i) for i in ids])
    matrices = metric_matrices(index, rows, weight=weight)
    if observation == "descriptors":
        descriptor_sets = [set(cat_index.materials[i].odors) for i in ids]
        label = "odor descriptor Jaccard"
    else:
        correlate, label = observed_similarity(catalogue, observation)
        observed = np.eye(len(ids))
        for x in range(len(ids)):
            for y in range(x + 1, len(ids)):
                value = correlate(ids[x], ids[y])
                observed[x, y] = observed[y, x] = 0.0 if value is None else value
    try:
        scores = scorecard.score_metrics(matrices, observed=observed, descriptor_sets=descriptor_sets,
                                         permutations=permutations, resamples=resamples, k=k, seed=seed)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    return scores, label, notes


def material_spectrum(catalogue: Catalogue, key: str, *, vibration_engine: str = "mmff"):
    """(material name, VibrationSpectrum) from the material's stored vibration record."""
    stamp = _stamps(vibration_engine)["vibration"]
    with catalogue.reading() as session:
        material = curation.find_material(session, key)
        loaded = records.load_records(session, "vibration", stamp.engine_name, material_ids=[material.id])
        name = material.preferred_name
    if material.id not in loaded:
        raise SearchError(f"#{material.id} {name} has no {stamp.engine_name} vibration record; "
                          f"run `olibra compute vibration {material.id} --engine {vibration_engine}`")
    record = loaded[material.id]
    return name, _vibration_spectrum(record.arrays, record.summary)


def overlay_recall_benchmark(catalogue: Catalogue, *, queries: int = 20, k: int = 10,
                             depths: tuple[int, ...] = (20, 40, DEFAULT_RERANK_DEPTH), seed: int = 0,
                             vibration_engine: str = "mmff", say=print) -> dict:
    """Recall at k of the shape search as olibra runs it (moments, conformer-level moments, then
    overlay of `depth` candidates) against the exhaustive overlay ranking of the whole catalogue
    (kept in memory, so the speed-up is a lower bound), and the speed-up, per re-rank depth."""
    import time

    from library import shape

    cat_index = load_index(catalogue, vibration_engine=vibration_engine, use_cache=False)
    ids = cat_index.index.ids_.tolist()
    if len(ids) < k + 1:
        raise SearchError(f"the catalogue has {len(ids)} indexed materials; the benchmark needs more than {k}")
    engine_name = _stamps(vibration_engine)["shape"].engine_name
    arrays = _shape_arrays(catalogue, ids, engine_name)
    ensembles = {i: computations.ensemble_from_arrays(cat_index.materials[i].smiles, arrays[i],
                                                      max_members=OVERLAY_CONFORMERS) for i in ids}
    rng = np.random.default_rng(seed)
    chosen = sorted(rng.choice(ids, size=min(queries, len(ids)), replace=False).tolist())

    def overlay(query_id, candidate_ids):
        return [shape.overlay_similarity(ensembles[query_id], ensembles[c]).shape_tanimoto for c in candidate_ids]

    everything = build_filter(include_retired=True, include_restricted=True)
    exhaustive_s = 0.0
    per_depth = {d: {"recall": [], "near": [], "seconds": 0.0} for d in depths}
    for query_id in chosen:
        started = time.perf_counter()
        others = [i for i in ids if i != query_id]
        scores = overlay(query_id, others)
        exhaustive_s += time.perf_counter() - started
        order = np.argsort(-np.asarray(scores), kind="stable")
        exhaustive = {others[j] for j in order[:k]}
        kth_best = scores[order[k - 1]]
        score_of = dict(zip(others, scores))
        for depth, found in per_depth.items():
            started = time.perf_counter()
            outcome = substitutes_for(catalogue, indexed_query(cat_index, query_id), metric="shape", k=k,
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


# ---------------------------------------------------------------- for the web pages (charts and forms)


@dataclass(frozen=True)
class SpectrumProfile:
    """A material's smoothed harmonic spectrum for drawing: curve on a fixed grid plus its main bands.

    grid_cm1: wavenumbers (cm^-1), 0-4000 in 5 cm^-1 steps; curve: band density scaled to a largest
    value of 1 (sigma 10 cm^-1, population-weighted, the same curve the EVA fingerprint uses);
    bands: main bands (position in cm^-1, height relative to the tallest), tallest first.
    """

    material_id: int
    name: str
    engine: str
    grid_cm1: np.ndarray
    curve: np.ndarray
    bands: tuple


def spectrum_profile(catalogue: Catalogue, key: str, *, vibration_engine: str = "mmff",
                     bands: int = 12) -> SpectrumProfile:
    """The drawable spectrum of a stored material (SearchError when it has no vibration record)."""
    from library.vibration import spectrum as spectrum_module

    stamp = _stamps(vibration_engine)["vibration"]
    with catalogue.reading() as session:
        material = curation.find_material(session, key)
        material_id, name = material.id, material.preferred_name
    name, spectrum = material_spectrum(catalogue, str(material_id), vibration_engine=vibration_engine)
    grid = spectrum_module.grid_cm1()
    curve = spectrum_module.fingerprint(spectrum, normalization="max")
    return SpectrumProfile(material_id, name, stamp.engine_name, grid, curve,
                           spectrum_module.main_bands(spectrum, bands))


def fingerprint_curve(cat_index: CatalogueIndex, material_id: int | None = None,
                      query: QueryMaterial | None = None) -> tuple[np.ndarray, np.ndarray] | None:
    """(grid in cm^-1, curve scaled to a maximum of 1) of an indexed material's fingerprint, or of a
    query computed on the fly; None when neither is available. Cheap: read from the index in memory."""
    from library.vibration import spectrum as spectrum_module

    if query is not None and query.material_id is None:
        values = query.fingerprint
    elif (material_id if query is None else query.material_id) in cat_index.materials:
        row = cat_index.index.row_of(material_id if query is None else query.material_id)
        values = cat_index.index.fingerprints_[row]
    else:
        return None
    values = np.asarray(values, dtype=np.float64)
    grid = spectrum_module.grid_cm1()
    if values.shape != grid.shape or values.max(initial=0.0) <= 0:
        return None
    return grid, values / values.max()


def observation_set_names(catalogue: Catalogue) -> list[str]:
    """Names of the stored observation data sets, alphabetically."""
    from library.catalogue.models import ObservationSet

    with catalogue.reading() as session:
        return list(session.scalars(select(ObservationSet.name).order_by(ObservationSet.name)))


def material_keys(catalogue: Catalogue) -> dict[str, frozenset[int]]:
    """Every key `curation.find_material` accepts, mapped to the material ids it names, read in two queries:
    lower-cased names and synonyms, CAS RNs as written, InChIKeys upper-cased, ids as '12' and '#12'.
    For answering many look-ups fast (a web server's type-ahead and queries); rebuild it after a change."""
    from library.catalogue.models import Synonym

    keys: dict[str, set[int]] = {}
    with catalogue.reading() as session:
        for material_id, name, cas_rn, inchikey in session.execute(
                select(Material.id, Material.preferred_name, Material.cas_rn, Material.inchikey)):
            for key in (name.lower(), cas_rn, inchikey.upper(), str(material_id), f"#{material_id}"):
                if key:
                    keys.setdefault(key, set()).add(material_id)
        for material_id, name in session.execute(select(Synonym.material_id, Synonym.name)):
            keys.setdefault(name.lower(), set()).add(material_id)
    return {key: frozenset(ids) for key, ids in keys.items()}


def indexed_query(cat_index: CatalogueIndex, material_id: int) -> QueryMaterial:
    """The query for an indexed catalogue material, without reading the catalogue."""
    info = cat_index.materials.get(material_id)
    if info is None:
        raise SearchError(f"material #{material_id} has no current shape and vibration records; "
                          "run `olibra compute all` first")
    return QueryMaterial(info.name, info.smiles, info.id)


def substitutes_for(catalogue: Catalogue, query: QueryMaterial, *, metric: str = "blend", weight: float = 0.5,
                    k: int = 10, filters: SearchFilter | None = None, rerank_depth: int = DEFAULT_RERANK_DEPTH,
                    explain: bool = False, cat_index: CatalogueIndex) -> SearchOutcome:
    """`find_substitutes` for a query already resolved (`resolve_query` or `indexed_query`)."""
    _check_search(metric, weight, k)
    filters = filters or build_filter()
    rerank = (overlay_scorer(catalogue, cat_index, query, depth=rerank_depth)
              if metric == "shape" and rerank_depth > 0 else None)
    try:
        hits = cat_index.index.query(
            query_id=query.material_id if query.material_id is not None else -1,
            shape=query.shape_vector, fingerprint=query.fingerprint,
            structure=None if query.material_id is not None else query.smiles,
            metric=metric, weight=weight, k=k, filters=filters, rerank=rerank,
            rerank_depth=RERANK_POOL * rerank_depth)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    notes = list(query.notes)
    if cat_index.unindexed:
        notes.append(f"{len(cat_index.unindexed)} material(s) without current records are not searched; "
                     "run `olibra compute all`")
    candidates = []
    for hit in hits:
        info = cat_index.materials[hit.id]
        explanation = explain_pair(catalogue, query, info, cat_index) if explain else None
        candidates.append(Candidate(info, hit.rank, hit.score, dict(hit.scores), dict(hit.ranks), explanation))
    return SearchOutcome(query, metric, weight, candidates, notes)
