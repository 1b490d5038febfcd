"""Benchmark of the vibration engines; prints figures, asserts nothing.

Figures: materials per second per engine over a list (default conformer
ensembles, all cores, ensembles included), and seconds per single-conformer
GFN2-xTB Hessian of a 19-heavy-atom musk (HHCB, C18H26O), ours against
ASE's ase.vibrations.Vibrations driving tblite's ASE calculator with the same
settings (its every point at the reference SCC accuracy; ours restart
displaced points from the converged reference at `displaced_accuracy`),
timed in the same run. The load average is printed beside the timings,
since another process on the machine changes them.

Run: olibra bench vibration  (uses the fixed benchmark set, benchmarks.materials)
"""

from __future__ import annotations

import os
import sys
import tempfile
import time

import numpy as np

from benchmarks.materials import benchmark_materials, runner_throughput

HESSIAN_MATERIAL = ("HHCB (hexahydro-hexamethyl-cyclopenta[g]benzopyran musk)",
                    "CC1COCc2cc3c(cc21)C(C)(C)C(C)C3(C)C")


def _hessian_timings(say) -> dict:
    from library.conformers import ensemble
    from library.vibration import gfn2
    from library.vibration.normal_modes import analyze, atomic_masses_amu

    name, smiles = HESSIAN_MATERIAL
    mol = ensemble(smiles, max_conformers=1).members[0].mol
    model = gfn2.TightBindingModel.from_mol(mol)
    start = time.perf_counter()
    positions, _, gradient = gfn2.optimize(model, mol.GetConformer().GetPositions(), mol=mol)
    optimize_s = time.perf_counter() - start
    masses = atomic_masses_amu(mol)
    say(f"[gfn2] {name}: {mol.GetNumHeavyAtoms()} heavy atoms, {mol.GetNumAtoms()} atoms; "
        f"tight optimization {optimize_s:.2f} s (gradient norm {np.linalg.norm(gradient):.1e} kcal/mol/A)")

    figures = {"optimize_s": optimize_s}
    ours = {}
    for processes in (1, os.cpu_count() or 1):
        start = time.perf_counter()
        hessian, _ = gfn2.hessian_and_dipole_derivatives(model, positions, processes=processes)
        elapsed = time.perf_counter() - start
        ours[processes] = analyze(hessian, positions, masses).frequencies_cm1
        figures[f"olibra_hessian_s_{processes}proc"] = elapsed
        say(f"[gfn2] olibra Hessian + dipole derivatives ({6 * mol.GetNumAtoms()} single points, "
            f"{processes} process(es), SCC accuracy {model.accuracy} reference / {model.displaced_accuracy} "
            f"displaced): {elapsed:.2f} s (load average {os.getloadavg()[0]:.2f})")

    try:
        from ase import Atoms
        from ase.vibrations import Vibrations
        from tblite.ase import TBLite
    except ImportError as error:  # pragma: no cover
        say(f"[gfn2] ASE route skipped: {error}")
        return figures
    atoms = Atoms(numbers=[a.GetAtomicNum() for a in mol.GetAtoms()], positions=positions)
    atoms.set_masses(masses)
    atoms.calc = TBLite(method="GFN2-xTB", accuracy=model.accuracy,
                        electronic_temperature=model.electronic_temperature_k, verbosity=0)
    gfn2.set_openmp_threads(os.cpu_count() or 1)  # let the serial ASE route use every core
    try:
        with tempfile.TemporaryDirectory() as scratch:
            start = time.perf_counter()
            vibrations = Vibrations(atoms, delta=5.0e-3, nfree=2, name=os.path.join(scratch, "vib"))
            vibrations.run()
            reference = vibrations.get_vibrations().get_frequencies()
            ase_s = time.perf_counter() - start
    finally:
        gfn2.set_openmp_threads(1)
    real = np.sort(reference.real[np.abs(reference.imag) < 1e-9])[-len(ours[1]):]
    figures["ase_hessian_s"] = ase_s
    best = min(v for k, v in figures.items() if k.startswith("olibra_hessian_s"))
    figures["speedup_vs_ase"] = ase_s / best
    figures["max_frequency_difference_vs_ase_cm1"] = float(np.abs(np.sort(ours[1]) - real).max())
    say(f"[gfn2] ASE Vibrations with tblite's ASE calculator (same delta 0.005 A, central, "
        f"{os.cpu_count()} OpenMP threads, SCC accuracy {model.accuracy}): {ase_s:.2f} s "
        f"(load average {os.getloadavg()[0]:.2f}); olibra is {figures['speedup_vs_ase']:.2f}x faster; "
        f"largest frequency difference above the 6 rigid-body modes "
        f"{figures['max_frequency_difference_vs_ase_cm1']:.2f} cm^-1")
    return figures


def run(*, engines=None, processes: int | None = None, out=sys.stdout, gfn2_materials: int = 4) -> dict:
    """Print and return materials per second per engine through the real job runner, and the GFN2
    single-conformer Hessian timing against ASE.

    mmff runs over the whole benchmark set; gfn2 (tens of seconds per material) over its first
    `gfn2_materials` entries only. `processes` defaults to all cores. Engines not installed are
    reported and skipped.
    """
    from library import computations
    from library.vibration import engines as engine_registry

    def say(text: str) -> None:
        print(text, file=out, flush=True)

    names = [name for name, _ in benchmark_materials()]
    engines = tuple(engines or engine_registry.keys())
    figures: dict = {"processes": processes or os.cpu_count() or 1}
    say(f"== vibration benchmark: {len(names)} materials ==")
    for engine in engines:
        if not engine_registry.get(engine).available():
            say(f"[{engine}] not installed; skipped")
            continue
        subset = names if engine == "mmff" else names[:gfn2_materials]
        figures[engine] = runner_throughput(computations.Plan(kinds=("vibration",), vibration_engine=engine), subset,
                                            processes=processes, say=say, label=f"[{engine}] ")
    if "gfn2" in figures:
        figures["gfn2_hessian"] = _hessian_timings(say)
    figures["tunnelling_ms_per_material"] = _tunnelling_cost(names[:8], say)
    return figures


def _tunnelling_cost(names, say) -> float:
    """Milliseconds per material to turn a computed MMFF94 spectrum into its tunnelling record."""
    from library import conformers
    from library.computations import tunnelling_record
    from library.vibration.spectrum import spectrum

    smiles = dict(benchmark_materials())
    spectra = [spectrum(conformers.ensemble(smiles[name])) for name in names]
    start = time.perf_counter()
    for result in spectra:
        tunnelling_record(result)
    cost_ms = (time.perf_counter() - start) / len(spectra) * 1e3
    say(f"[tunnelling] {cost_ms:.1f} ms per material beyond its vibration spectrum ({len(spectra)} materials, "
        f"load average {os.getloadavg()[0]:.2f})")
    return cost_ms
