"""Computing records over a catalogue: resumable after Ctrl-C, no half-written rows, stale records found."""

import os
import subprocess
import sys

from sqlalchemy import func, select, update

from catalogue_helpers import draft, interrupt_compute
from library import computations
from library.catalogue import curation, jobs
from library.catalogue.database import initialize
from library.catalogue.models import ComputedArray, ComputedRecord
from library.catalogue.records import record_state

# Real aroma materials (from memory), enough work that an interruption lands mid-run.
SMILES = ["CC(C)=CCCC(C)(O)C=C", "CC(C)=CCCC(C)=CCO", "CC(C)=CCCC(C)CCO", "CC(C)=CCCC(C)CC=O",
          "COc1cc(C=O)ccc1O", "CCOc1cc(C=O)ccc1O", "O=c1ccc2ccccc2o1", "CC(C)C1CCC(C)CC1O",
          "CC1=CCC(CC1)C(C)=C", "CC(=O)OCc1ccccc1", "OCCc1ccccc1", "C/C=C/c1ccc(OC)cc1",
          "CCCCCCCC=O", "CCCCCCCCCC=O", "CC(=O)/C=C/C1=C(C)CCCC1(C)C", "C=CCc1ccc(O)c(OC)c1",
          "CC(=O)CCc1ccc(O)cc1", "COC(=O)c1ccccc1N", "CC1(C)C2CCC1(C)C(=O)C2", "CC12CCC(CC1)C(C)(C)O2"]


def make_catalogue(url):
    catalogue = initialize(url)
    with catalogue.transaction() as session:
        for number, smiles in enumerate(SMILES):
            curation.add_material(session, draft(smiles, f"material {number}"))
    return catalogue


def counts(catalogue):
    with catalogue.reading() as session:
        records = session.scalar(select(func.count()).select_from(ComputedRecord))
        arrays = session.scalar(select(func.count()).select_from(ComputedArray))
        per_record = session.execute(select(ComputedArray.record_id, func.count()).group_by(ComputedArray.record_id)).all()
    return records, arrays, {n for _, n in per_record}


def test_ctrl_c_keeps_finished_materials_and_a_rerun_resumes(tmp_path):
    url = f"sqlite:///{tmp_path / 'jobs.sqlite'}"
    catalogue = make_catalogue(url)
    interrupt_compute(url, [], lambda: counts(catalogue)[0], 4)
    environment = dict(os.environ, PYTHONUNBUFFERED="1")
    records, arrays, sizes = counts(catalogue)
    kinds = len(computations.KINDS)  # shape, vibration and tunnelling records per material
    assert 4 <= records < kinds * len(SMILES)
    assert len(sizes) <= kinds  # every stored record is whole: each kind has a fixed set of arrays

    done_before = records
    result = subprocess.run([sys.executable, "-m", "library.cli", "--db", url, "compute", "all", "--quiet"],
                            capture_output=True, text=True, env=environment, timeout=600)
    assert result.returncode == 0, result.stderr
    computed = int(result.stdout.split(" of ")[0].split()[-1])
    assert computed == len(SMILES) - done_before // kinds  # only the rest was computed
    assert counts(catalogue)[0] == kinds * len(SMILES)
    catalogue.dispose()


def test_stale_records_are_found_and_only_they_are_recomputed(tmp_path):
    catalogue = make_catalogue(f"sqlite:///{tmp_path / 'stale.sqlite'}")
    plan = computations.Plan(kinds=("shape",))
    stamps = computations.stamps(plan)
    first = jobs.run(catalogue, stamps, computations.worker(plan), jobs.select_materials(catalogue, stamps))
    assert first.done == len(SMILES) and not first.failures
    with catalogue.transaction() as session:
        session.execute(update(ComputedRecord).where(ComputedRecord.material_id == 3)
                        .values(engine_version="an older engine"))
        session.execute(update(ComputedRecord).where(ComputedRecord.material_id == 5)
                        .values(parameter_hash="0" * 64))
    with catalogue.reading() as session:
        state = record_state(session, stamps[0])
    assert {i for i, s in state.items() if s == "stale"} == {3, 5}
    again = jobs.select_materials(catalogue, stamps)
    assert [m[0] for m in again] == [3, 5]
    revision = catalogue.revision()
    report = jobs.run(catalogue, stamps, computations.worker(plan), again)
    assert report.done == 2
    # the records go in through bulk statements, not ORM objects: the revision still moves on, so a cached
    # search index built before is not reused
    assert catalogue.revision() > revision
    with catalogue.reading() as session:
        assert set(record_state(session, stamps[0]).values()) == {"current"}
    catalogue.dispose()


def test_a_material_that_cannot_be_computed_is_reported_and_nothing_is_stored(tmp_path):
    catalogue = initialize(f"sqlite:///{tmp_path / 'fail.sqlite'}")
    with catalogue.transaction() as session:
        curation.add_material(session, draft("CCO", "Ethanol"))
        # trimethylborane: MMFF94 has no boron parameters (the engine says so and names gfn2)
        curation.add_material(session, draft("CB(C)C", "Trimethylborane"))
    plan = computations.Plan(kinds=("vibration",))
    stamps = computations.stamps(plan)
    report = jobs.run(catalogue, stamps, computations.worker(plan), jobs.select_materials(catalogue, stamps))
    assert report.done == 1 and len(report.failures) == 1
    assert report.failures[0][1] == "Trimethylborane" and "gfn2" in report.failures[0][2]
    assert counts(catalogue)[0] == 1
    catalogue.dispose()
