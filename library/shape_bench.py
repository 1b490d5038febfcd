"""Benchmark of the shape engine: prints materials per second and overlay time.

Run: .venv/bin/python -m library.shape_bench [processes]
"""

from __future__ import annotations

import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor

from library.conformers import ensemble
from library.shape import _align_pair, describe

# Typical odorants (at most 25 heavy atoms), written from memory; stereocentres
# left unassigned where the material is usually sold as a racemate or mixture.
ODORANT_SMILES: tuple[str, ...] = (
    "CC(C)=CCCC(C)(O)C=C",  # linalool
    "CC(C)=CCCC(C)=CC=O",  # citral
    "COc1cc(C=O)ccc1O",  # vanillin
    "CCOc1cc(C=O)ccc1O",  # ethyl vanillin
    "O=c1ccc2ccccc2o1",  # coumarin
    "CC(C)C1CCC(C)CC1O",  # menthol
    "CC(C)C1CCC(C)CC1=O",  # menthone
    "CC1=CCC(CC1)C(C)=C",  # limonene
    "CC1=CC[C@@H](CC1=O)C(C)=C",  # (R)-carvone
    "CC1=CC[C@H](CC1=O)C(C)=C",  # (S)-carvone
    "CC1(C)C2CCC1(C)C(=O)C2",  # camphor
    "CC12CCC(CC1)C(C)(C)O2",  # 1,8-cineole
    "CC(C)=CCCC(C)=CCO",  # geraniol
    "CC(C)=CCCC(C)CCO",  # citronellol
    "CC(C)=CCCC(C)CC=O",  # citronellal
    "OCCc1ccccc1",  # 2-phenylethanol
    "O=Cc1ccccc1",  # benzaldehyde
    "O=C/C=C/c1ccccc1",  # cinnamaldehyde
    "OC/C=C/c1ccccc1",  # cinnamyl alcohol
    "COC(=O)c1ccccc1N",  # methyl anthranilate
    "COC(=O)c1ccccc1O",  # methyl salicylate
    "CC(=O)OCc1ccccc1",  # benzyl acetate
    "O=C(OCc1ccccc1)c1ccccc1",  # benzyl benzoate
    "C=CCc1ccc(O)c(OC)c1",  # eugenol
    "C/C=C/c1ccc(O)c(OC)c1",  # isoeugenol
    "C=CCc1ccc2OCOc2c1",  # safrole
    "C/C=C/c1ccc(OC)cc1",  # anethole
    "COc1ccc(C=O)cc1",  # anisaldehyde
    "O=CC1=CC=CO1",  # furfural
    "CC1=C(O)C(=O)C=CO1",  # maltol
    "CCC1=C(O)C(=O)C=CO1",  # ethyl maltol
    "CC1OC(C)=C(O)C1=O",  # furaneol
    "CC(=O)CCc1ccc(O)cc1",  # raspberry ketone
    "C/C=C/C(=O)C1=C(C)CCCC1(C)C",  # beta-damascone
    "CC(=O)/C=C/C1=C(C)CCCC1(C)C",  # beta-ionone
    "CC(=O)/C=C/C1C(C)=CCCC1(C)C",  # alpha-ionone
    "CC/C=C\\CCO",  # cis-3-hexenol
    "CCC/C=C/C=O",  # trans-2-hexenal
    "CCCCCC=O",  # hexanal
    "CCCCCCCC=O",  # octanal
    "CCCCCCCCCC=O",  # decanal
    "CCCCCCCCCCC=O",  # undecanal
    "CCCCCCCCCCCC=O",  # dodecanal
    "CCCCCCCCCO",  # nonanol
    "CC(=O)OCC=C(C)CCC=C(C)C",  # geranyl acetate
    "CC(=O)OC(C)(CCC=C(C)C)C=C",  # linalyl acetate
    "CCOC(=O)CC(=O)C",  # ethyl acetoacetate
    "CCCCOC(=O)C",  # butyl acetate
    "CC(C)CCOC(C)=O",  # isoamyl acetate
    "CCOC(=O)CCC",  # ethyl butyrate
    "CCCCCOC(=O)C",  # amyl acetate
    "CCCCCCOC(=O)C",  # hexyl acetate
    "CCOC(=O)C(C)CC",  # ethyl 2-methylbutyrate
    "CC(=O)C(C)=O",  # diacetyl
    "CC(O)C(C)=O",  # acetoin
    "CC(C)c1ccc(C)cc1O",  # thymol
    "CC(C)c1ccc(C)c(O)c1",  # carvacrol
    "CC1=CCC(=CC1)C(C)C",  # gamma-terpinene
    "CC1=CCC(CC1)C(C)(C)O",  # alpha-terpineol
    "CC(=O)OC1CC2CCC1(C)C2(C)C",  # isobornyl acetate
    "CC1(C)C2CC=C(C)C1C2",  # alpha-pinene
    "CC1(C)C2CCC(=C)C1C2",  # beta-pinene
    "CC(C)=CCC/C(C)=C\\CO",  # nerol
    "CC(=CCCC(=CCCC(C)(O)C=C)C)C",  # nerolidol
    "CC(=CCCC(=CCCC(=CCO)C)C)C",  # farnesol
    "CCCCCC1CCC(=O)O1",  # gamma-nonalactone
    "CCCCCCCC1CCC(=O)O1",  # gamma-undecalactone
    "CCCCCC1CCCC(=O)O1",  # delta-decalactone
    "CCCCC/C=C\\CC1CCCC(=O)O1",  # jasmine lactone
    "CC/C=C\\CC1=C(C)CCC1=O",  # cis-jasmone
    "CCCCCC1C(CC(=O)OC)CCC1=O",  # methyl dihydrojasmonate
    "O=C1CCCCCCCCCCCCCCC1",  # cyclohexadecanone
    "O=C1CCCCCCCCCCCCCCO1",  # pentadecanolide
    "CC1CCCCCCCCCCCCC(=O)C1",  # muscone
    "CC(C)(C)c1ccc(CC(C)C=O)cc1",  # lilial
    "CC(Cc1ccc(C(C)C)cc1)C=O",  # cyclamen aldehyde
    "CCCCCC(=Cc1ccccc1)C=O",  # amyl cinnamaldehyde
    "CCCCCCC(=Cc1ccccc1)C=O",  # hexyl cinnamaldehyde
    "OC(=O)/C=C/c1ccccc1",  # cinnamic acid
    "CCOC(=O)/C=C/c1ccccc1",  # ethyl cinnamate
    "COC(=O)/C=C/c1ccccc1",  # methyl cinnamate
    "Cc1ccc(C)cc1",  # p-xylene
    "CSC",  # dimethyl sulfide
    "CC(=O)c1nccs1",  # 2-acetylthiazole
    "COc1nccnc1C(C)C",  # 2-isopropyl-3-methoxypyrazine
    "COc1nccnc1CC(C)C",  # 2-isobutyl-3-methoxypyrazine
    "CC(=O)C1=NCCC1",  # 2-acetyl-1-pyrroline
    "Cc1ccc2[nH]ccc2c1",  # 5-methylindole
    "Cc1c[nH]c2ccccc12",  # skatole
    "c1ccc2[nH]ccc2c1",  # indole
    "O=C1OCc2ccccc12",  # phthalide
    "COc1ccc2ccccc2c1",  # nerolin (2-methoxynaphthalene)
    "CC(=O)c1ccc2ccccc2c1",  # methyl naphthyl ketone
    "Oc1ccccc1",  # phenol
    "CC(C)(C)C1CCC(OC(C)=O)CC1",  # 4-tert-butylcyclohexyl acetate
    "CC1(C)CCCC2(C)C1CCC1(C)OCCC12",  # ambroxide (stereo unassigned)
    "CC(C)C1=CC=C(C=C1)C=O",  # cuminaldehyde
    "CC1CCC(=C(C)C)C(=O)C1",  # pulegone
)


def _describe_one(smiles: str) -> tuple[str, int, str, float]:
    start = time.process_time()
    try:
        ens = ensemble(smiles)
        describe(ens)
        return smiles, len(ens.members), "", time.process_time() - start
    except ValueError as exc:
        return smiles, 0, str(exc), time.process_time() - start


def _single_conformers(smiles_list, count: int):
    mols = []
    for smiles in smiles_list:
        if len(mols) >= count:
            break
        try:
            mols.append(ensemble(smiles, max_conformers=1).members[0].mol)
        except ValueError:
            continue
    return mols


def run(smiles_list: list[str], *, processes: int | None = None, out=sys.stdout,
        overlay_pairs: int = 300) -> dict:
    """Time ensembles + descriptors over all cores and single-conformer overlays.

    Prints and returns materials_per_second (wall clock), cpu_ms_per_material
    (unaffected by other load on the machine), seconds (wall), failures, and
    overlay_ms (mean time per single-conformer Gaussian overlay, ms).
    """
    smiles_list = list(smiles_list)
    if not smiles_list:
        raise ValueError("run() needs at least one SMILES")
    processes = processes or os.cpu_count() or 1
    start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=processes) as pool:
        results = list(pool.map(_describe_one, smiles_list, chunksize=1))
    wall_s = time.perf_counter() - start
    failures = [(smi, err) for smi, _, err, _ in results if err]
    conformers = sum(row[1] for row in results)
    cpu_ms = 1000.0 * sum(row[3] for row in results) / len(results)
    rate = len(smiles_list) / wall_s

    mols = _single_conformers(smiles_list, 40)
    pairs = [(mols[i % len(mols)], mols[(i * 7 + 3) % len(mols)]) for i in range(overlay_pairs)]
    start = time.perf_counter()
    for mol_a, mol_b in pairs:
        _align_pair(mol_a, mol_b, False)
    overlay_ms = (time.perf_counter() - start) / len(pairs) * 1000.0

    print(f"materials: {len(smiles_list)} on {processes} processes in {wall_s:.2f} s "
          f"-> {rate:.1f} materials/s ({conformers} conformers, {len(failures)} failures)",
          file=out)
    print(f"CPU time per material (ensemble + descriptors): {cpu_ms:.0f} ms "
          f"-> {processes * 1000.0 / cpu_ms:.1f} materials/s on {processes} idle cores",
          file=out)
    print(f"single-conformer overlay: {overlay_ms:.3f} ms per pair over {len(pairs)} pairs",
          file=out)
    for smi, err in failures:
        print(f"  failed {smi}: {err}", file=out)
    return {
        "materials": len(smiles_list),
        "processes": processes,
        "seconds": wall_s,
        "materials_per_second": rate,
        "cpu_ms_per_material": cpu_ms,
        "conformers": conformers,
        "failures": failures,
        "overlay_ms": overlay_ms,
        "overlay_pairs": len(pairs),
    }


if __name__ == "__main__":
    run(list(ODORANT_SMILES), processes=int(sys.argv[1]) if len(sys.argv) > 1 else None)
