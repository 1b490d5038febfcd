"""Substitutes: the catalogue materials most similar to a query, with the Gaussian-overlay re-rank of
shape searches and, on request, an explanation of each candidate."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from library.search import metrics as metric_registry
from library.search.catalogue_index import CatalogueIndex, MaterialInfo, load_index, record_stamps
from library.search.errors import SearchError
from library.search.index import SearchFilter
from library.search.queries import QueryMaterial, resolve_query

CAUTION = ("Candidates are hypotheses about smell, not safety or regulatory findings: check each against "
           "the applicable restrictions (e.g. IFRA Standards, local cosmetic and chemical regulations), its "
           "safety data sheet and allergen labelling rules, with qualified people, before any use.")
DEFAULT_RERANK_DEPTH = 80
OVERLAY_CONFORMERS = 3  # conformers per material taken into an overlay (the most weighted)
# Shape re-rank: the top RERANK_POOL * depth by averaged moments, narrowed to `depth` by the best
# conformer-pair moments, then ordered by Gaussian overlay.
RERANK_POOL = 3


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

    @property
    def ordered_by(self) -> str:
        """The metric whose score ordered the list (overlay for a re-ranked shape search)."""
        return "overlay" if any("overlay" in c.scores for c in self.candidates) else self.metric


def build_filter(*, mw_range=None, logp_range=None, must_have=(), must_not_have=(), include_retired=False,
                 include_restricted=False, exclude_ids=()) -> SearchFilter:
    """A SearchFilter from the options a user gives (ranges in g/mol and logP; odor terms)."""
    try:
        return SearchFilter(molecular_weight_range=mw_range, logp_range=logp_range,
                            must_have=frozenset(t.lower() for t in must_have),
                            must_not_have=frozenset(t.lower() for t in must_not_have),
                            exclude_retired=not include_retired, exclude_restricted=not include_restricted,
                            exclude_ids=frozenset(exclude_ids))
    except ValueError as exc:
        raise SearchError(str(exc)) from None


def skeleton(smiles: str) -> str | None:
    """The first InChIKey block (connectivity without stereo or isotopes) of a structure, or None."""
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
        key = Chem.MolToInchiKey(mol) if mol is not None else ""
    return key.split("-")[0] or None


def own_family_ids(query: QueryMaterial, cat_index: CatalogueIndex) -> set[int]:
    """Catalogue materials of the query's own family: its stereoisomers and isotopologues (same first
    InChIKey block; a mixture drawn with unassigned stereo shares it with its isomer components), and
    for a catalogue material its recorded components and the recorded mixtures it is part of."""
    block = skeleton(query.smiles)
    # the stored InChIKey's first block (an index cached before it was kept falls back to the SMILES)
    family = set() if block is None else {
        i for i, info in cat_index.materials.items() if (info.skeleton or skeleton(info.smiles)) == block}
    if query.material_id is not None:
        own = cat_index.materials.get(query.material_id)
        family |= set(own.components if own else ())
        family |= {i for i, info in cat_index.materials.items() if query.material_id in info.components}
    family.discard(query.material_id)
    return family & set(cat_index.materials)


def group_excluded_ids(cat_index: CatalogueIndex, *, with_groups=(), without_groups=()) -> set[int]:
    """Materials failing the functional-group filters (names, SMARTS or GroupPattern objects)."""
    from library import functional_groups

    try:
        have = [functional_groups.pattern(g) for g in with_groups]
        avoid = [functional_groups.pattern(g) for g in without_groups]
    except functional_groups.GroupError as exc:
        raise SearchError(str(exc)) from None
    if not have and not avoid:
        return set()
    return {i for i, info in cat_index.materials.items()
            if not functional_groups.passes(info.smiles, must_have=have, must_not_have=avoid)}


def check_search(metric: str, weight: float, k: int) -> None:
    """Refuse a metric the index cannot rank by, a blend weight outside 0-1 or a k below 1."""
    try:
        chosen = metric_registry.get(metric)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    if not chosen.indexed:
        raise SearchError(f"{metric} is scored on demand and cannot order a search; order by one of "
                          f"{', '.join(metric_registry.names(indexed=True))} (shape searches are re-ranked by "
                          "overlay)")
    if not 0.0 <= weight <= 1.0:
        raise SearchError(f"blend weight {weight} is outside 0-1")
    if k < 1:
        raise SearchError("k must be at least 1")


def shape_arrays(catalogue, material_ids, engine_name: str) -> dict[int, dict]:
    """The stored shape-record arrays (conformers included) of some materials."""
    from library.catalogue import records

    with catalogue.reading() as session:
        loaded = records.load_records(session, "shape", engine_name, material_ids=material_ids)
    return {i: r.arrays for i, r in loaded.items()}


def overlay_ensemble(smiles: str, arrays: dict):
    """A material's stored conformers as the on-demand overlay metrics (overlay, handedness) score
    them: its OVERLAY_CONFORMERS most populated."""
    from library import computations

    return computations.ensemble_from_arrays(smiles, arrays, max_members=OVERLAY_CONFORMERS)


def stored_ensembles(catalogue, cat_index: CatalogueIndex, material_ids) -> dict:
    """{material id: :func:`overlay_ensemble`} of the materials that have a current shape record."""
    engine_name = record_stamps(cat_index.vibration_engine)["shape"].engine_name
    return {i: overlay_ensemble(cat_index.materials[i].smiles, a)
            for i, a in shape_arrays(catalogue, material_ids, engine_name).items()}


def overlay_scorer(catalogue, cat_index: CatalogueIndex, query: QueryMaterial, *,
                   depth: int = DEFAULT_RERANK_DEPTH):
    """A re-rank callback for a pool of moment-ranked candidates: the `depth` candidates whose best
    conformer pair is most alike by moments get the Gaussian-overlay shape Tanimoto (0-1), the rest NaN."""
    from library import computations, shape

    overlay = metric_registry.get("overlay")
    engine_name = record_stamps(cat_index.vibration_engine)["shape"].engine_name

    def score(_query_id, candidate_ids):
        ids = list(candidate_ids) + ([] if query.material_id is None else [query.material_id])
        arrays = shape_arrays(catalogue, ids, engine_name)
        query_arrays = query.records["shape"][0] if query.material_id is None else arrays[query.material_id]
        query_moments = computations.top_conformer_moments(query_arrays, OVERLAY_CONFORMERS)
        closeness = [shape.best_conformer_similarity(
            query_moments, computations.top_conformer_moments(arrays[c], OVERLAY_CONFORMERS))
            for c in candidate_ids]
        chosen = set(np.argsort(-np.asarray(closeness), kind="stable")[:depth].tolist())
        query_ensemble = overlay_ensemble(query.smiles, query_arrays)
        out = []
        for position, candidate in enumerate(candidate_ids):
            if position not in chosen:
                out.append(float("nan"))
                continue
            ensemble = overlay_ensemble(cat_index.materials[candidate].smiles, arrays[candidate])
            out.append(overlay.pair_similarity(query_ensemble, ensemble))
        return out

    return score


def find_substitutes(catalogue, query: str | QueryMaterial, *, metric: str = "blend",
                     weight: float = metric_registry.DEFAULT_WEIGHT, k: int = 10,
                     filters: SearchFilter | None = None, rerank_depth: int = DEFAULT_RERANK_DEPTH,
                     explain: bool = False, vibration_engine: str | None = None,
                     cat_index: CatalogueIndex | None = None, include_demo: bool = False,
                     with_groups=(), without_groups=(), include_own_family: bool = False) -> SearchOutcome:
    """The k catalogue materials most similar to the query under `metric` (shape re-ranked by overlay).

    `query` is a key or structure text (resolved here) or an already resolved QueryMaterial.
    Demo entries (invented odor notes) are left out unless `include_demo`; the query's own family
    (stereoisomers, isotopologues, the isomers of a mixture) unless `include_own_family`.
    `with_groups` / `without_groups`: functional groups (vocabulary names or SMARTS) candidates must /
    must not have.
    """
    from library.search.calibration import register_stored
    from library.search.pairs import explain_pair

    if metric not in metric_registry.names():
        register_stored(catalogue)  # a calibrated metric stored in this catalogue
    check_search(metric, weight, k)
    if cat_index is None:
        cat_index = load_index(catalogue, **({"vibration_engine": vibration_engine} if vibration_engine else {}))
    if not isinstance(query, QueryMaterial):
        query = resolve_query(catalogue, query, cat_index)
    filters = filters or build_filter()
    demo_ids = {i for i, info in cat_index.materials.items() if info.demo}
    if demo_ids and not include_demo:
        filters = replace(filters, exclude_ids=filters.exclude_ids | demo_ids)
    family = set() if include_own_family else own_family_ids(query, cat_index)
    by_groups = group_excluded_ids(cat_index, with_groups=with_groups, without_groups=without_groups)
    if family or by_groups:
        filters = replace(filters, exclude_ids=filters.exclude_ids | family | by_groups)
    rerank = (overlay_scorer(catalogue, cat_index, query, depth=rerank_depth)
              if metric == "shape" and rerank_depth > 0 else None)
    try:
        hits = cat_index.index.query(
            query_id=query.material_id if query.material_id is not None else -1,
            features=None if query.in_catalogue else query.features,
            metric=metric, weight=weight, k=k, filters=filters, rerank=rerank,
            rerank_depth=RERANK_POOL * rerank_depth)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    notes = list(query.notes)
    if demo_ids and not include_demo:
        notes.append(f"{len(demo_ids)} demo entr{'y' if len(demo_ids) == 1 else 'ies'} with invented odor notes "
                     "left out (include them with the demo switch)")
    if getattr(metric_registry.get(metric), "stale", False):
        notes.append(f"metric {metric} is stale: the observations it was calibrated on changed since; "
                     "calibrate it again")
    if "tunnelling" in (metric, *metric_registry.get(metric).components):
        from library.vibration.tunnelling import CAUTION as MODEL_CAUTION

        notes.append(f"the list is ordered through the tunnelling receptor model: {MODEL_CAUTION}")
    if family:
        names = ", ".join(sorted(cat_index.materials[i].name for i in family))
        notes.append(f"the query's own family left out (stereoisomers, isotopologues, mixture isomers and recorded components): {names}; "
                     "bring them back with the own-family switch")
    if cat_index.unindexed:
        notes.append(f"{len(cat_index.unindexed)} material(s) without current records are not searched; "
                     "compute their records to include them")
    candidates = []
    for hit in hits:
        info = cat_index.materials[hit.id]
        explanation = explain_pair(catalogue, query, info, cat_index) if explain else None
        candidates.append(Candidate(info, hit.rank, hit.score, dict(hit.scores), dict(hit.ranks), explanation))
    return SearchOutcome(query, metric, weight, candidates, notes)
