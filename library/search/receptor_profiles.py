"""A material's activation profile over a receptor panel, read from its stored tunnelling record
(and, for receptors with their own reorganization energy, its vibration record)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from library.errors import Remedy
from library.search.catalogue_index import record_stamps
from library.search.errors import SearchError
from library.vibration.engines import DEFAULT_ENGINE


@dataclass(frozen=True)
class ActivationProfile:
    """rows: one per receptor (gap_ev, lambda_ev, mode_cm1, rate_s, relative), see
    library.vibration.receptors.profile; grid_ev and rate_s: the whole stored tunnelling spectrum."""

    material_id: int
    name: str
    engine: str
    panel: object  # library.vibration.receptors.ReceptorPanel
    rows: list
    grid_ev: np.ndarray
    rate_s: np.ndarray


def activation_profile(catalogue, key: str, *, panel: str | None = None,
                       vibration_engine: str = DEFAULT_ENGINE) -> ActivationProfile:
    """The profile of material `key` over the panel named `panel` (the built-in one when None).

    SearchError when the material has no current tunnelling record; OlibraError for an unknown panel.
    """
    from library.catalogue import curation, receptor_panel_store, records
    from library.vibration import receptors, tunnelling

    stamps = record_stamps(vibration_engine)
    stamp = stamps["tunnelling"]
    with catalogue.reading() as session:
        material = curation.find_material(session, key)
        chosen = receptor_panel_store.find_panel(session, panel)
        found = records.load_records(session, "tunnelling", stamp.engine_name, material_ids=[material.id])
        record = found.get(material.id)
        if record is None or record.parameter_hash != stamp.parameter_hash:
            raise SearchError(f"#{material.id} {material.preferred_name} has no current {stamp.engine_name} "
                              "tunnelling record yet; compute it first", remedy=Remedy.COMPUTE_RECORDS)
        vibration = None
        if any(r.lambda_ev is not None for r in chosen.receptors):
            loaded = records.load_records(session, "vibration", stamps["vibration"].engine_name,
                                          material_ids=[material.id])
            if material.id in loaded and loaded[material.id].parameter_hash == stamps["vibration"].parameter_hash:
                vibration = loaded[material.id].arrays
        name = material.preferred_name
    try:
        rows = receptors.profile(record.arrays, chosen, settings=record.summary, vibration_arrays=vibration)
    except receptors.PanelError as exc:
        raise SearchError(f"#{material.id} {name}: {exc}", remedy=Remedy.COMPUTE_RECORDS) from None
    grid = tunnelling.settings_grid_ev(tunnelling.recorded_settings(record.summary))
    return ActivationProfile(material.id, name, stamp.engine_name, chosen, rows, grid,
                             np.asarray(record.arrays["tunnelling_spectrum"], float))
