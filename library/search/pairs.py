"""Two materials side by side: every metric's similarity, and why they score as they do (overlay
Tanimoto and Tversky, volume ratio, matched and unmatched vibrational bands)."""

from __future__ import annotations

from dataclasses import dataclass, field

from library.errors import Remedy
from library.search import metrics as metric_registry
from library.search.catalogue_index import CatalogueIndex, MaterialInfo, load_index, record_stamps
from library.search.errors import SearchError
from library.search.queries import QueryMaterial, resolve_query
from library.search import uncertainty
from library.search.substitutes import overlay_ensemble


def explain_pair(catalogue, query: QueryMaterial, other: MaterialInfo, cat_index: CatalogueIndex) -> dict:
    """Why two materials score as they do: overlay scores, volume ratio, matched and unmatched bands."""
    from library import shape
    from library.catalogue import records
    from library.vibration import spectrum as spectrum_module

    stamps = record_stamps(cat_index.vibration_engine)
    ids = [other.id] + ([] if query.material_id is None else [query.material_id])
    with catalogue.reading() as session:
        shape_loaded = records.load_records(session, "shape", stamps["shape"].engine_name, material_ids=ids)
        vibration_loaded = records.load_records(session, "vibration", stamps["vibration"].engine_name,
                                                material_ids=ids)
    if query.material_id is None:
        query_shape, query_vibration = query.records["shape"][0], query.records["vibration"]
    else:
        query_shape = shape_loaded[query.material_id].arrays
        loaded = vibration_loaded[query.material_id]
        query_vibration = (loaded.arrays, loaded.summary)
    ensembles = (overlay_ensemble(query.smiles, query_shape), overlay_ensemble(other.smiles, shape_loaded[other.id].arrays))
    overlay = shape.overlay_similarity(*ensembles, mode="tversky")
    handedness = metric_registry.get("handedness").pair_similarity(*ensembles)
    other_vibration = vibration_loaded[other.id]
    bands = spectrum_module.match_bands(
        spectrum_module.VibrationSpectrum.from_arrays(*query_vibration),
        spectrum_module.VibrationSpectrum.from_arrays(other_vibration.arrays, other_vibration.summary), n=None)
    return {"overlay_tanimoto": overlay.shape_tanimoto, "overlay_tversky": overlay.tversky,
            "volume_ratio": overlay.volume_ratio, "handedness": handedness, "bands": bands}


@dataclass
class Comparison:
    a: MaterialInfo
    b: MaterialInfo
    scores: dict[str, float]  # every metric, in registry order
    explanation: dict
    weight: float
    # {metric: standard deviation over conformer resamples}; see library.search.uncertainty
    spreads: dict[str, float] = field(default_factory=dict)
    resamples: int = 0

    @property
    def not_resampled(self) -> list[str]:
        """The scored metrics without a spread (scored on demand, 2D, or not resampled), in registry order."""
        return [m for m in self.scores if m not in self.spreads]


def compare(catalogue, key_a: str, key_b: str, *, weight: float = metric_registry.DEFAULT_WEIGHT,
            vibration_engine: str | None = None, cat_index: CatalogueIndex | None = None,
            resamples: int = uncertainty.RESAMPLES) -> Comparison:
    """Every metric's similarity of two catalogue materials, with the overlay and band explanation and
    each indexed score's spread over `resamples` conformer resamples (0: no spreads)."""
    if cat_index is None:
        cat_index = load_index(catalogue, **({"vibration_engine": vibration_engine} if vibration_engine else {}))
    query_a = resolve_query(catalogue, key_a, cat_index)
    query_b = resolve_query(catalogue, key_b, cat_index)
    if query_a.material_id is None or query_b.material_id is None:
        raise SearchError("compare takes two catalogue materials; add the new structure to the catalogue first",
                          remedy=Remedy.ADD_MATERIAL)
    if query_a.material_id == query_b.material_id:
        raise SearchError(f"both keys name the same material, #{query_a.material_id} {query_a.label}")
    index = cat_index.index
    try:
        pair = index.pair_scores([index.row_of(query_a.material_id)], [index.row_of(query_b.material_id)],
                                 weight=weight)
    except ValueError as exc:
        raise SearchError(str(exc)) from None
    b_info = cat_index.materials[query_b.material_id]
    explanation = explain_pair(catalogue, query_a, b_info, cat_index)
    measured = {name: float(values[0]) for name, values in pair.items()}
    measured["overlay"] = explanation["overlay_tanimoto"]
    measured["handedness"] = explanation["handedness"]
    scores = {name: measured[name] for name in metric_registry.names() if name in measured}
    resampled = uncertainty.load_resampled(catalogue, [query_a.material_id, query_b.material_id],
                                           cat_index.vibration_engine, resamples=resamples)
    spreads = ({} if len(resampled) < 2 else
               uncertainty.pair_spreads(resampled[query_a.material_id], resampled[query_b.material_id],
                                        weight=weight))
    return Comparison(cat_index.materials[query_a.material_id], b_info, scores, explanation, weight,
                      spreads=spreads, resamples=resamples if spreads else 0)
