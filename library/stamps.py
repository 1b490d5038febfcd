"""What a computed record must carry to count as current: its engine's name, version and settings.

A plan (which record kinds, which vibration engine, which ensemble settings) gives one
:class:`~library.catalogue.records.EngineStamp` per kind. Stamps depend only on olibra's code
and on the installed engine libraries, yet computing them loads every engine (NumPy, the
conformer, shape and vibration modules): about 0.2 s for a command that only reads the
catalogue, such as ``olibra show``. :func:`current_stamps` therefore keeps the default plans'
stamps in a small JSON file in the user cache folder, named by a hash of olibra's own source
files and of the installed RDKit and tblite; a change to either computes them afresh, and an
unreadable or unwritable file only costs the time.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import tempfile
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

from library.catalogue.records import EngineStamp

KINDS = ("shape", "vibration", "tunnelling")
# What a shape record holds besides the descriptors: the ensemble itself, so
# that overlays need no new embedding.
SHAPE_RECORD_LAYOUT = "descriptors+conformers+conformer moments and shape values+mirror flags/4"
CACHE_LAYOUT = 1  # bump when the file's layout changes


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
        from library.vibration import engines

        engines.get(self.vibration_engine)  # refuses an unknown engine, naming the choices


def stamps(plan: Plan) -> list[EngineStamp]:
    """The engine name, version and parameters each planned record must carry."""
    from library import shape

    out = []
    if "shape" in plan.kinds:
        parameters = dict(shape.parameters(**plan.ensemble_knobs), stored=SHAPE_RECORD_LAYOUT)
        out.append(EngineStamp("shape", shape.ENGINE_NAME, shape.ENGINE_VERSION, parameters))
    if "vibration" in plan.kinds or "tunnelling" in plan.kinds:
        from library.vibration import engines
        from library.vibration import spectrum as spectrum_module

        module = engines.engine_module(plan.vibration_engine)
        spectrum_parameters = spectrum_module.record_parameters(plan.vibration_engine, **plan.ensemble_knobs)
    if "vibration" in plan.kinds:
        out.append(EngineStamp("vibration", module.ENGINE_NAME, module.ENGINE_VERSION, spectrum_parameters))
    if "tunnelling" in plan.kinds:
        from library.vibration import tunnelling

        # same engine name as the vibration record it derives from; its own kind, version and settings
        out.append(EngineStamp("tunnelling", module.ENGINE_NAME,
                               f"{module.ENGINE_VERSION}+tunnelling-{tunnelling.ENGINE_VERSION}",
                               {"spectrum": spectrum_parameters, "tunnelling": tunnelling.parameters()}))
    return out


def computed_current_stamps() -> dict[tuple[str, str], EngineStamp]:
    """The stamp each (kind, engine name) record must carry under the default plans, computed now;
    engines not installed are left out."""
    from library.vibration import engines

    out: dict[tuple[str, str], EngineStamp] = {}
    plans = [Plan(kinds=("shape",))] + [Plan(kinds=("vibration", "tunnelling"), vibration_engine=e)
                                        for e in engines.keys()]
    for plan in plans:
        try:
            found = stamps(plan)
        except (ImportError, ValueError):
            continue  # that engine is not available in this installation
        for stamp in found:
            out[(stamp.kind, stamp.engine_name)] = stamp
    return out


@lru_cache(maxsize=1)
def current_stamps() -> dict[tuple[str, str], EngineStamp]:
    """:func:`computed_current_stamps`, read from the stamp cache when olibra and its engines are unchanged."""
    path = _cache_file()
    try:
        return _read(path)
    except (OSError, ValueError, KeyError, TypeError):
        pass  # absent, unreadable or from another layout: compute
    found = computed_current_stamps()
    _write(path, found)
    return found


def installation_key(root: Path | None = None) -> str:
    """Hash of olibra's source files (those under `root`, by default the installed package) and of
    the installed engine libraries (RDKit, tblite)."""
    import rdkit

    digest = hashlib.sha256(f"layout {CACHE_LAYOUT}|rdkit {rdkit.__version__}|".encode())
    root = root or Path(__file__).resolve().parent
    for source in sorted(root.rglob("*.py")):
        digest.update(source.relative_to(root).as_posix().encode() + b"\0" + source.read_bytes() + b"\0")
    tblite = importlib.util.find_spec("tblite")
    if tblite is None or tblite.origin is None:
        digest.update(b"tblite absent")
    else:  # a reinstall or upgrade rewrites the package
        digest.update(f"tblite {tblite.origin} {os.stat(tblite.origin).st_mtime_ns}".encode())
    return digest.hexdigest()


def _cache_file() -> Path:
    from library import user_cache

    return user_cache.folder() / f"stamps-{installation_key()[:24]}.json"


def _read(path: Path) -> dict[tuple[str, str], EngineStamp]:
    rows = json.loads(path.read_text(encoding="utf-8"))
    return {(row["kind"], row["engine_name"]): EngineStamp(row["kind"], row["engine_name"], row["engine_version"],
                                                          row["parameters"])
            for row in rows}


def _write(path: Path, found: dict[tuple[str, str], EngineStamp]) -> None:
    rows = [{"kind": s.kind, "engine_name": s.engine_name, "engine_version": s.engine_version,
             # the JSON form the parameter hash is taken of, so a read stamp hashes the same
             "parameters": json.loads(json.dumps(s.parameters, sort_keys=True, default=str))}
            for s in found.values()]
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".stamps-", suffix=".json")
        try:
            with os.fdopen(handle, "w", encoding="utf-8") as out:
                json.dump(rows, out)
            os.replace(temporary, path)
        finally:
            if os.path.exists(temporary):
                os.unlink(temporary)
    except OSError:
        pass  # a read-only or full cache folder: the stamps are computed again next time
