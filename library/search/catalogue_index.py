"""The similarity index of a catalogue: built from one consistent snapshot, cached on disk.

The index is built from one read transaction (repeatable-read on PostgreSQL) over every material
with current records of every kind the registered metrics need, and cached on disk keyed by an
:class:`IndexRevision` (the catalogue revision and the engine stamps), together with what the
catalogue says about each material (names, odors, status, computed logP). A later call with the
same revision reads the file and asks the database only for the revision number; any change to
the catalogue moves the revision and invalidates the file.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from library.errors import Remedy
from library.search import metrics as metric_registry
from library.search.errors import SearchError, needs_records
from library.search.index import SimilarityIndex
from library.vibration.engines import DEFAULT_ENGINE

PCA_ABOVE = 5000  # materials above which the fingerprints get a compressed first stage


@dataclass(frozen=True)
class MaterialInfo:
    """What searches show about a catalogue material (molecular weight in g/mol, computed Crippen logP)."""

    id: int
    name: str
    smiles: str
    cas_rn: str | None
    odors: tuple[str, ...]
    status: str
    restricted: bool
    molecular_weight: float
    logp: float
    demo: bool = False  # every odor descriptor of the material is demo data (an invented entry)
    skeleton: str | None = None  # first InChIKey block: connectivity without stereo or isotopes
    components: tuple[int, ...] = ()  # ids of its recorded components, when it is a recorded mixture


@dataclass(frozen=True)
class IndexRevision:
    """What an index was built from: the catalogue revision and the stamps of the records it read."""

    catalogue_revision: int
    shape_stamp: str
    vibration_version: str
    vibration_stamp: str
    tunnelling_stamp: str = "-"  # version and settings of the tunnelling records (an optional kind)

    @property
    def key(self) -> str:
        """One string for cache files: r<revision>-<shape hash>-<vibration version>-<vibration hash>-<tunnelling>."""
        return (f"r{self.catalogue_revision}-{self.shape_stamp}-{self.vibration_version}-{self.vibration_stamp}"
                f"-{self.tunnelling_stamp}")

    def __str__(self) -> str:
        return self.key


@dataclass
class CatalogueIndex:
    """The fitted index plus what the catalogue says about each indexed material."""

    index: SimilarityIndex
    materials: dict[int, MaterialInfo]
    unindexed: list[MaterialInfo]  # materials lacking a current record of a needed kind
    revision: IndexRevision
    vibration_engine: str
    from_cache: bool = False


def logp(smiles: str) -> float:
    """Crippen logP (J. Chem. Inf. Comput. Sci. 39, 868 (1999)) of a SMILES, dimensionless."""
    from rdkit.Chem import Crippen

    from library.structures import mol_from_smiles

    return float(Crippen.MolLogP(mol_from_smiles(smiles)))


def record_stamps(vibration_engine: str = DEFAULT_ENGINE) -> dict:
    """{kind: EngineStamp} the index's records must carry, for the given vibration engine."""
    from library import computations

    return {s.kind: s for s in computations.stamps(computations.Plan(vibration_engine=vibration_engine))}


def _stamp_digest(stamp) -> str:
    """12 hex digits naming a stamp's engine version and settings together ('-' when there is none)."""
    if stamp is None:
        return "-"
    return hashlib.sha256(f"{stamp.engine_version}|{stamp.parameter_hash}".encode()).hexdigest()[:12]


def _cache_path(catalogue, engine: str, cache_dir: Path | None) -> Path:
    from library import user_cache

    folder = cache_dir or user_cache.folder()
    folder.mkdir(parents=True, exist_ok=True)
    key = hashlib.sha256(str(catalogue.engine.url).encode()).hexdigest()[:16]
    return folder / f"index-{key}-{engine}.npz"


def _snapshot(catalogue):
    """A session reading one consistent snapshot of the catalogue (repeatable read on PostgreSQL)."""
    session = catalogue.sessions()
    if catalogue.engine.dialect.name == "postgresql":
        session.connection(execution_options={"isolation_level": "REPEATABLE READ"})
    return session


def load_index(catalogue, *, vibration_engine: str = DEFAULT_ENGINE, cache_dir: Path | None = None,
               use_cache: bool = True) -> CatalogueIndex:
    """The similarity index over every material with current records of every needed kind."""
    from sqlalchemy import select

    from library.catalogue.models import CatalogueState

    from library.search.calibration import register_stored

    register_stored(catalogue)  # calibrated blends stored in this catalogue become metrics
    stamps = record_stamps(vibration_engine)
    with _snapshot(catalogue) as session, session.begin():
        number = session.scalar(select(CatalogueState.revision).where(CatalogueState.id == 1))
        revision = IndexRevision(int(number or 0), stamps["shape"].parameter_hash[:12],
                                 stamps["vibration"].engine_version, stamps["vibration"].parameter_hash[:12],
                                 _stamp_digest(stamps.get("tunnelling")))
        path = _cache_path(catalogue, vibration_engine, cache_dir) if use_cache else None
        cached = SimilarityIndex.load(path, revision.key) if path is not None else None
        if cached is not None and cached.load_extra("materials") is not None:
            return _from_cache(cached, revision, vibration_engine)
        infos, ready, kinds = _catalogue_state(session, stamps)
        if not ready:
            raise SearchError("no material has current shape and vibration records yet; compute them first",
                              remedy=Remedy.COMPUTE_RECORDS)
        loaded = _load_features(session, stamps, ready, infos, kinds)
    index = SimilarityIndex(pca_components=64 if len(ready) > PCA_ABOVE else None).fit(
        np.array(ready, dtype=np.int64), features=loaded,
        properties={"molecular_weight": [infos[i].molecular_weight for i in ready],
                    "logp": [infos[i].logp for i in ready],
                    "descriptors": [set(infos[i].odors) for i in ready],
                    "status": [infos[i].status for i in ready],
                    "restricted": [infos[i].restricted for i in ready]})
    ready_set = set(ready)
    unindexed = [info for i, info in infos.items() if i not in ready_set]
    if path is not None:
        index.save(path, revision.key, extra={
            "materials": np.asarray(json.dumps([asdict(infos[i]) for i in ready])),
            "unindexed": np.asarray(json.dumps([asdict(info) for info in unindexed]))})
    return CatalogueIndex(index, {i: infos[i] for i in ready}, unindexed, revision, vibration_engine)


def _from_cache(index: SimilarityIndex, revision: IndexRevision, engine: str) -> CatalogueIndex:
    def infos(name: str) -> list[MaterialInfo]:
        rows = json.loads(str(index.load_extra(name)))
        return [MaterialInfo(**{**row, "odors": tuple(row["odors"]), "components": tuple(row.get("components", ()))})
                for row in rows]

    materials = {info.id: info for info in infos("materials")}
    return CatalogueIndex(index, materials, infos("unindexed"), revision, engine, from_cache=True)


# Record kinds an index can do without: until every indexable material has a current record of such
# a kind (e.g. after an upgrade, before `olibra compute tunnelling`), the metrics reading it are left
# out of the index instead of the materials.
OPTIONAL_KINDS = ("tunnelling",)


def _catalogue_state(session, stamps) -> tuple[dict[int, MaterialInfo], list[int], tuple[str, ...]]:
    """Every material's MaterialInfo, the ids of those with current records of every required kind,
    and the record kinds to read (the required ones and each optional one all of those materials have)."""
    from sqlalchemy import select

    from library.catalogue import mixtures, records
    from library.catalogue.models import Material, MaterialOdor, OdorDescriptor

    # plain rows, not ORM objects: a large catalogue's materials cost only their MaterialInfo
    odors: dict[int, list[tuple[str, str]]] = {}
    for material_id, term, source_kind in session.execute(
            select(MaterialOdor.material_id, OdorDescriptor.term, MaterialOdor.source_kind)
            .join(OdorDescriptor, OdorDescriptor.id == MaterialOdor.descriptor_id)):
        odors.setdefault(material_id, []).append((term, source_kind))
    components = mixtures.component_links(session)
    infos = {}
    for m in session.execute(select(Material.id, Material.preferred_name, Material.smiles, Material.cas_rn,
                                    Material.status, Material.restricted, Material.average_mass_g_per_mol,
                                    Material.inchikey).order_by(Material.id)):
        own = odors.get(m.id, [])
        infos[m.id] = MaterialInfo(m.id, m.preferred_name, m.smiles, m.cas_rn, tuple(sorted(t for t, _ in own)),
                                   m.status, m.restricted, m.average_mass_g_per_mol, logp(m.smiles),
                                   bool(own) and all(kind == "demo" for _, kind in own),
                                   (m.inchikey or "").split("-")[0] or None, components.get(m.id, ()))
    kinds = needed_kinds()
    state = {kind: records.record_state(session, stamps[kind], include_retired=True) for kind in kinds}
    required = [kind for kind in kinds if kind not in OPTIONAL_KINDS]
    ready = [i for i in infos if all(state[kind].get(i) == "current" for kind in required)]
    complete = tuple(kind for kind in kinds if kind in required
                     or (ready and all(state[kind].get(i) == "current" for i in ready)))
    return infos, ready, complete


def needed_kinds() -> tuple[str, ...]:
    """Record kinds some indexed metric's features come from."""
    kinds = []
    for feature in metric_registry.FEATURES.values():
        if feature.record_kind and feature.record_kind not in kinds:
            kinds.append(feature.record_kind)
    return tuple(kinds)


def _load_features(session, stamps, ready: list[int], infos: dict[int, MaterialInfo],
                   kinds: tuple[str, ...] | None = None) -> dict[str, np.ndarray]:
    """Feature matrices (rows in the order of `ready`) read from the records.

    Streams the records a chunk of materials at a time (records.iter_arrays) into matrices allocated
    once, so building the index from the database needs about the memory of the index itself."""
    from library.catalogue import records

    every_kind = needed_kinds()
    kinds = every_kind if kinds is None else kinds
    features = metric_registry.FEATURES
    out: dict[str, np.ndarray | list] = {name: [] for name, f in features.items() if f.record_kind is None}
    complete = {name: True for name, f in features.items() if f.record_kind is not None}
    for start in range(0, len(ready), records.READ_CHUNK):
        part = ready[start:start + records.READ_CHUNK]
        by_kind = {kind: dict(records.iter_arrays(session, kind, stamps[kind].engine_name, part,
                                                  metric_registry.record_arrays(kind)))
                   for kind in kinds}
        for offset, material_id in enumerate(part):
            arrays = {kind: by_kind[kind].get(material_id, {}) if kind in by_kind else {} for kind in every_kind}
            for name, feature in features.items():
                if feature.record_kind is None:
                    out[name].append(metric_registry.feature_row(name, arrays, infos[material_id].smiles))
                    continue
                if not complete[name] or not all(p in arrays[feature.record_kind] for p in feature.arrays):
                    complete[name] = False  # some record predates this feature: its metrics are left out
                    continue
                # in its stored form already (unit rows for the fingerprints), so fit keeps these matrices
                # instead of copying them
                raw = np.asarray(metric_registry.feature_row(name, arrays, infos[material_id].smiles), np.float32)
                row = feature.prepare(raw[None, :], f"{name} of material #{material_id}")[0]
                if name not in out:
                    out[name] = np.empty((len(ready),) + row.shape, row.dtype)
                out[name][start + offset] = row
    return {name: values for name, values in out.items() if complete.get(name, True)}


def indexed_info(cat_index: CatalogueIndex, material_id: int, label: str | None = None) -> MaterialInfo:
    """The MaterialInfo of an indexed material, or the error saying it lacks records."""
    info = cat_index.materials.get(material_id)
    if info is None:
        raise needs_records(label or f"material #{material_id}")
    return info
