"""Malformed input of every kind gets a clear error and leaves the catalogue exactly as it was."""

import hashlib

import pytest
from catalogue_helpers import draft
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import select

from library.catalogue import curation, transfer
from library.catalogue.models import (
    AuditEntry,
    Material,
    MaterialOdor,
    Restriction,
    Provenance,
    Synonym,
)
from library.structures import StructureError, standardize

from bad_inputs import BAD_CSV, BAD_CSV_ROWS, BAD_MOLFILES, BAD_SDF, BAD_SMILES

def snapshot(catalogue) -> str:
    """A digest of every row a failed import could have touched."""
    digest = hashlib.sha256()
    with catalogue.reading() as session:
        for model in (Material, Synonym, Provenance, MaterialOdor, AuditEntry, Restriction):
            for row in session.scalars(select(model)):
                digest.update(repr(sorted((k, str(v)) for k, v in vars(row).items()
                                          if not k.startswith("_"))).encode())
    return digest.hexdigest()


@pytest.fixture
def stocked(catalogue):
    with catalogue.transaction() as session:
        curation.add_material(session, draft("CC(C)=CCCC(C)(O)C=C", "Linalool", cas="78-70-6"))
    return catalogue


def test_there_are_at_least_fifty_malformed_inputs():
    assert len(BAD_SMILES) + len(BAD_MOLFILES) + len(BAD_CSV) + len(BAD_CSV_ROWS) + len(BAD_SDF) >= 50


@pytest.mark.parametrize("text,message", BAD_SMILES + BAD_MOLFILES)
def test_bad_structures_are_refused_with_reason(text, message):
    with pytest.raises(StructureError, match=message):
        standardize(text)


def _import(catalogue, data: bytes, name: str, keep_good=False):
    return transfer.import_into(catalogue, transfer.read_rows(name, data=data), keep_good=keep_good,
                                default_structure_source="from memory")


@pytest.mark.parametrize("data,message", BAD_CSV)
def test_unreadable_csv_files_are_refused_and_nothing_changes(stocked, data, message):
    before = snapshot(stocked)
    with pytest.raises(transfer.ImportFileError, match=message):
        _import(stocked, data, "bad.csv")
    assert snapshot(stocked) == before


@pytest.mark.parametrize("data,message", BAD_CSV_ROWS)
def test_bad_csv_rows_are_reported_and_nothing_changes(stocked, data, message):
    before = snapshot(stocked)
    good_row = b"Vanillin,COc1cc(C=O)ccc1O\n"
    header, _, rest = data.partition(b"\n")
    padding = b"," * header.count(b",")
    body = header + b"\n" + rest + good_row.rstrip(b"\n") + padding[1:] + b"\n"
    report = _import(stocked, body, "bad.csv")
    rejected = report.rejected
    assert len(rejected) == 1 and rejected[0].row == 1, report.rows
    assert message in rejected[0].message
    # nothing was stored, so the good row is reported as what it would have been, without an id
    assert report.count("would be added") == 1 and report.count("added") == 0 and not report.committed
    assert snapshot(stocked) == before


@pytest.mark.parametrize("text,message", BAD_SDF)
def test_bad_sdf_records_are_reported_and_nothing_changes(stocked, text, message):
    before = snapshot(stocked)
    try:
        report = _import(stocked, text.encode(), "bad.sdf")
    except transfer.ImportFileError as exc:
        assert message in str(exc)
    else:
        assert report.rejected and message in report.rejected[0].message, report.rows
    assert snapshot(stocked) == before


SMILES_ALPHABET = "CNOSPFIBrcnos()[]=#@+-123456789%H.\\/"


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(alphabet=SMILES_ALPHABET, min_size=1, max_size=40))
def test_random_smiles_like_text_is_accepted_or_refused_cleanly(text):
    try:
        result = standardize(text)
    except StructureError as exc:
        assert str(exc)  # a message, never an empty error
    else:
        assert result.inchikey and len(result.inchikey) == 27
