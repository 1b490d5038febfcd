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
    Provenance,
    Synonym,
)
from library.structures import StructureError, standardize

GOOD_MOLFILE = standardize("CCO").molfile

BAD_SMILES = [
    ("C1CC", "could not parse SMILES"),                    # unclosed ring
    ("C(C", "could not parse SMILES"),                     # unbalanced parenthesis
    ("CC)C", "could not parse SMILES"),
    ("Xx", "could not parse SMILES"),                      # not an element
    ("C[Zz]C", "could not parse SMILES"),
    ("c1cccc1", "cannot be kekulized"),                    # five-membered aromatic ring without [nH]
    ("C(C)(C)(C)(C)C", "valence"),                         # pentavalent carbon
    ("O(C)(C)C", "valence"),
    ("[CH3]", "radical"),
    ("C[CH2]", "radical"),
    ("", "empty"),
    ("   ", "empty"),
    ("CC O", "single token"),                              # name glued to the SMILES
    ("CCO ethanol", "single token"),
    ("[Fe]", "metal"),
    ("CC[Hg]C", "organometallic"),
    ("[U]", "metal"),
    ("CCCCO.c1ccccc1CCCCCC", "mixture"),                     # two organic components
    ("CCCCCCO.CCCCCCCCN", "mixture"),
    ("C" * 61, "more than the limit"),                     # too many heavy atoms
    ("C" * 250_000, "characters long"),                    # huge field
    ("C\x00C", "NUL"),
    ("InChI=1S/garbage", "could not parse InChI"),
    ("InChI=", "could not parse InChI"),
    ("[C@@H", "could not parse SMILES"),
    ("C=1CC", "could not parse SMILES"),
    ("C%1CC", "could not parse SMILES"),
    ("[2H+2]]", "could not parse SMILES"),
]

BAD_MOLFILES = [
    (GOOD_MOLFILE.replace("M  END", ""), "truncated"),                          # truncated record
    ("\n\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nM  END\n", "could not parse the molfile"),
    (GOOD_MOLFILE.replace(" C ", " Q ", 1), "not supported"),                  # query atom, no element
    ("\n  RDKit\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n", "no atoms"),
    ("\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n    0.0 0.0 0.0 C\nM  END\n",
     "could not parse the molfile"),
]

BAD_CSV = [
    (b"", "is empty"),
    (b"\n\n", "is empty"),
    (b"name,smiles\n", "no data rows"),
    (b"title,structure\nEthanol,CCO\n", "unknown column"),
    (b"name,price\nEthanol,3\n", "unknown column"),
    (b"smiles\nCCO\n", "needs a 'name' column"),
    (b"name\nEthanol\n", "needs a 'name' column"),
    (b"name,smiles,smiles\nEthanol,CCO,CCO\n", "more than once"),
    (b"name,smiles\nEthanol,\"CCO\n", "malformed"),                               # unterminated quote
    (b"name,smiles\n\xff\xfeE\x00t\x00h\x00", "NUL"),                            # UTF-16 text
    (b"name,smiles\nCaf\xe9,CCO\n", "not UTF-8"),                                 # Latin-1 accent
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "binary"),
]

BAD_CSV_ROWS = [
    (b"name,smiles\nEthanol,CCO,extra\n", "fields but the header has"),
    (b"name,smiles\n,CCO\n", "name is empty"),
    (b"name,smiles\nEthanol,C1CC\n", "could not parse SMILES"),
    (b"name,smiles,cas,cas_source\nEthanol,CCO,64-17-6,from memory\n", "check digit"),
    (b"name,smiles,cas\nEthanol,CCO,64-17-5\n", "needs a source"),
    (b"name,smiles,odor\nEthanol,CCO,citrus\n", "need a source"),
    (b"name,smiles,structure_source\nEthanol,CCO,rumour\n", "does not start with one of"),
    (b"name,smiles,structure_source\nEthanol,CCO,literature\n", "needs a reference"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus:1.5,from memory\n", "outside 0-1"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus:strong,from memory\n", "not a number"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus|citrus,from memory\n", "given twice"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,boozy,from memory\n", "not in the vocabulary"),
    (b"name,smiles,formula\nEthanol,CCO,C2H5O\n", "does not match the structure"),
    (b"name,smiles,inchikey\nEthanol,CCO,XLYOFNOQVPJJNP-UHFFFAOYSA-N\n", "does not match the structure"),
    (b"name,smiles,status\nEthanol,CCO,lost\n", "not one of"),
    (b"name,smiles\nEthanol," + b"C" * 100_001 + b"\n", "longer than"),
    (b"name,smiles\n" + b"E" * 300 + b",CCO\n", "characters long"),
    (b"name,smiles\nLinalool,CCO\n", "already used"),                          # name of another material
    (b"name,smiles,cas,cas_source\nEthanol,CCO,78-70-6,from memory\n", "already used"),
]

BAD_SDF = [
    (GOOD_MOLFILE.replace("M  END", "") + "$$$$\n", "truncated"),
    ("$$$$\n$$$$\n", "no SDF records"),
    (GOOD_MOLFILE + ">  <price>\n3\n\n$$$$\n", "unknown data item"),
    ("\n\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n", "could not parse the molfile"),
    (GOOD_MOLFILE + ">  <name>\nEthanol\n\n>  <cas>\n64-17-5\n\n$$$$\n", "needs a source"),  # CAS RN, no provenance
    (GOOD_MOLFILE + "$$$$\n", "name is empty"),                                # blank title, no name item
]


def snapshot(catalogue) -> str:
    """A digest of every row a failed import could have touched."""
    digest = hashlib.sha256()
    with catalogue.reading() as session:
        for model in (Material, Synonym, Provenance, MaterialOdor, AuditEntry):
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
    assert report.count("added") == 1 and not report.committed
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
