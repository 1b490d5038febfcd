"""What a search is asked about: a catalogue material, or a new structure computed on the fly."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from library.search import metrics as metric_registry
from library.search.catalogue_index import CatalogueIndex, indexed_info
from library.search.errors import SearchError, needs_records


@dataclass
class QueryMaterial:
    """A query: a catalogue material (`material_id`), or a new structure with its records computed now.

    For a new structure, `features` holds its index features (see library.search.metrics.FEATURES)
    and `records` its computed records, {kind: (arrays, summary)}.
    """

    label: str
    smiles: str
    material_id: int | None
    features: dict[str, object] = field(default_factory=dict)
    records: dict[str, tuple[dict, dict]] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def in_catalogue(self) -> bool:
        return self.material_id is not None


def resolve_query(catalogue, text: str, cat_index: CatalogueIndex) -> QueryMaterial:
    """A material key (id, name, synonym, CAS RN, InChIKey) or a structure (SMILES, InChI, molfile)."""
    from library.catalogue import curation
    from library.structures import StructureError, standardize

    text = (text or "").strip()
    if not text:
        raise SearchError("give a material (name, id, CAS RN, InChIKey) or a structure (SMILES, molfile)")
    with catalogue.reading() as session:
        try:
            material = curation.find_material(session, text)
        except curation.CurationError as lookup_error:
            try:
                structure = standardize(text)
            except StructureError as exc:
                raise SearchError(f"{lookup_error}; and as a structure: {exc}", remedy=lookup_error.remedy) from None
            material = curation.find_by_inchikey(session, structure.inchikey)
            if material is None:
                return compute_query(structure.smiles, cat_index.vibration_engine,
                                     label=f"new structure {structure.smiles}")
        if material.id not in cat_index.materials:
            raise needs_records(f"#{material.id} {material.preferred_name}")
        return QueryMaterial(material.preferred_name, material.smiles, material.id)


def compute_query(smiles: str, engine: str, *, label: str) -> QueryMaterial:
    """A query for a structure not in the catalogue: its records computed now (not stored)."""
    from library import computations

    plan = computations.Plan(vibration_engine=engine)
    try:
        result = computations.compute_material(plan, smiles)
    except ValueError as exc:
        raise SearchError(f"cannot compute the query structure: {exc}") from None
    records = {kind: ({name: np.asarray(v, np.float32) for name, v in arrays.items()}, summary)
               for kind, (arrays, summary) in result.items()}
    arrays = {kind: values for kind, (values, _) in records.items()}
    features = {name: metric_registry.feature_row(name, arrays, smiles) for name in metric_registry.FEATURES}
    return QueryMaterial(label, smiles, None, features, records,
                         notes=["the query structure is not in the catalogue: computed on the fly, not stored"])


def indexed_query(cat_index: CatalogueIndex, material_id: int) -> QueryMaterial:
    """The query for an indexed catalogue material, without reading the catalogue."""
    info = indexed_info(cat_index, material_id)
    return QueryMaterial(info.name, info.smiles, info.id)


def material_keys(catalogue) -> dict[str, frozenset[int]]:
    """Every key `curation.find_material` accepts, mapped to the material ids it names, read in two queries:
    lower-cased names and synonyms, CAS RNs as written, InChIKeys upper-cased, ids as '12' and '#12'.
    For answering many look-ups fast (a web server's type-ahead and queries); rebuild it after a change."""
    from sqlalchemy import select

    from library.catalogue.models import Material, Synonym

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


def resolve_known_key(text: str, keys: dict[str, frozenset[int]], cat_index: CatalogueIndex) -> QueryMaterial | None:
    """The indexed query a key names when it names exactly one indexed material in `keys`, else None."""
    key = text.strip()
    ids = keys.get(key.lower()) or keys.get(key) or keys.get(key.upper())
    if ids and len(ids) == 1:
        (material_id,) = ids
        if material_id in cat_index.materials:
            return indexed_query(cat_index, material_id)
    return None

