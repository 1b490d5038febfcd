"""A material's stored spectrum, for drawing and listing: the record read back, a drawable profile,
and the fingerprint curve the index already holds."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from library.errors import Remedy
from library.search.catalogue_index import CatalogueIndex, record_stamps
from library.search.errors import SearchError
from library.search.queries import QueryMaterial
from library.vibration.engines import DEFAULT_ENGINE


def material_spectrum(catalogue, key: str, *, vibration_engine: str = DEFAULT_ENGINE):
    """(material name, VibrationSpectrum) from the material's stored vibration record."""
    from library.catalogue import curation, records
    from library.vibration.spectrum import VibrationSpectrum

    stamp = record_stamps(vibration_engine)["vibration"]
    with catalogue.reading() as session:
        material = curation.find_material(session, key)
        loaded = records.load_records(session, "vibration", stamp.engine_name, material_ids=[material.id])
        name = material.preferred_name
    if material.id not in loaded:
        raise SearchError(f"#{material.id} {name} has no {stamp.engine_name} vibration record yet; compute it first",
                          remedy=Remedy.COMPUTE_RECORDS)
    record = loaded[material.id]
    return name, VibrationSpectrum.from_arrays(record.arrays, record.summary)


@dataclass(frozen=True)
class SpectrumProfile:
    """A material's smoothed harmonic spectrum for drawing: curve on a fixed grid plus its main bands.

    grid_cm1: wavenumbers (cm^-1), 0-4000 in 5 cm^-1 steps; curve: band density scaled to a largest
    value of 1 (sigma 10 cm^-1, population-weighted), each mode weighted by its infrared intensity
    when the engine gives intensities (as an IR spectrum is drawn), else counted once (the EVA
    curve); weighting: which of the two ("IR intensity" or "mode count"), for the axis label;
    bands: main bands (position in cm^-1, height relative to the tallest, diagnostic group), tallest
    first, found on the same weighting as the curve.
    """

    material_id: int
    name: str
    engine: str
    grid_cm1: np.ndarray
    curve: np.ndarray
    bands: tuple
    weighting: str = "mode count"


def spectrum_profile(catalogue, key: str, *, vibration_engine: str = DEFAULT_ENGINE,
                     bands: int = 12) -> SpectrumProfile:
    """The drawable spectrum of a stored material (SearchError when it has no vibration record)."""
    from library.catalogue import curation
    from library.vibration import spectrum as spectrum_module

    stamp = record_stamps(vibration_engine)["vibration"]
    with catalogue.reading() as session:
        material_id = curation.find_material(session, key).id
    name, spectrum = material_spectrum(catalogue, str(material_id), vibration_engine=vibration_engine)
    grid = spectrum_module.grid_cm1()
    weighting = "ir" if spectrum.has_ir else "none"
    curve = spectrum_module.fingerprint(spectrum, normalization="max", intensity_weighting=weighting)
    return SpectrumProfile(material_id, name, stamp.engine_name, grid, curve,
                           spectrum_module.main_bands(spectrum, bands, intensity_weighting=weighting),
                           "IR intensity" if weighting == "ir" else "mode count")


def fingerprint_curve(cat_index: CatalogueIndex, material_id: int | None = None,
                      query: QueryMaterial | None = None) -> tuple[np.ndarray, np.ndarray] | None:
    """(grid in cm^-1, curve scaled to a maximum of 1) of an indexed material's fingerprint, or of a
    query computed on the fly; None when neither is available. Cheap: read from the index in memory."""
    from library.vibration import spectrum as spectrum_module

    if query is not None and query.material_id is None:
        values = query.features.get("fingerprint")
    elif (material_id if query is None else query.material_id) in cat_index.materials:
        row = cat_index.index.row_of(material_id if query is None else query.material_id)
        values = cat_index.index.fingerprints_[row]
    else:
        return None
    if values is None:
        return None
    values = np.asarray(values, dtype=np.float64)
    grid = spectrum_module.grid_cm1()
    if values.shape != grid.shape or values.max(initial=0.0) <= 0:
        return None
    return grid, values / values.max()
