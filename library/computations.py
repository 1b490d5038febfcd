"""What olibra computes and stores for each material, from its standardized SMILES.

One conformer ensemble serves both descriptions: the shape record (moments,
principal-moment ratios, volume...) and the vibration record (conformer-averaged
harmonic spectrum and its fingerprint). The functions here run inside worker
processes, so they take and return only plain, picklable values.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial

from library.catalogue.records import EngineStamp

KINDS = ("shape", "vibration")
VIBRATION_ENGINES = ("mmff", "gfn2")


@dataclass(frozen=True)
class Plan:
    """Which records to compute, with which engine and ensemble settings."""

    kinds: tuple[str, ...] = KINDS
    vibration_engine: str = "mmff"
    ensemble_knobs: dict = field(default_factory=dict)

    def __post_init__(self):
        unknown = [k for k in self.kinds if k not in KINDS]
        if unknown or not self.kinds:
            raise ValueError(f"unknown record kind(s) {unknown}; choose from {', '.join(KINDS)}")
        if self.vibration_engine not in VIBRATION_ENGINES:
            raise ValueError(f"unknown vibration engine {self.vibration_engine!r}; "
                             f"choose from {', '.join(VIBRATION_ENGINES)}")


def _vibration_module(engine: str):
    from library.vibration import spectrum as spectrum_module

    return spectrum_module.engine_module(engine)


def stamps(plan: Plan) -> list[EngineStamp]:
    """The engine name, version and parameters each planned record must carry."""
    from library import shape

    out = []
    if "shape" in plan.kinds:
        out.append(EngineStamp("shape", shape.ENGINE_NAME, shape.ENGINE_VERSION,
                               shape.parameters(**plan.ensemble_knobs)))
    if "vibration" in plan.kinds:
        from library.vibration import spectrum as spectrum_module

        module = _vibration_module(plan.vibration_engine)
        out.append(EngineStamp("vibration", module.ENGINE_NAME, module.ENGINE_VERSION,
                               spectrum_module.record_parameters(plan.vibration_engine,
                                                                 **plan.ensemble_knobs)))
    return out


def compute_material(plan: Plan, smiles: str) -> dict[str, tuple[dict, dict]]:
    """Compute every planned record of one material: {kind: (float32 arrays, summary)}."""
    from library import conformers

    ens = conformers.ensemble(smiles, **plan.ensemble_knobs)
    out: dict[str, tuple[dict, dict]] = {}
    if "shape" in plan.kinds:
        from library import shape

        description = shape.describe(ens)
        out["shape"] = (description.to_arrays(), description.summary())
    if "vibration" in plan.kinds:
        from library.vibration import spectrum as spectrum_module

        result = spectrum_module.spectrum(ens, engine=plan.vibration_engine)
        arrays = result.to_arrays()
        arrays["fingerprint"] = spectrum_module.fingerprint(result)
        out["vibration"] = (arrays, result.summary())
    return out


def worker(plan: Plan):
    """A picklable one-argument function (SMILES -> records) for the job runner."""
    return partial(compute_material, plan)
