"""Export -> import -> export is lossless in every format, for every curated field, with hostile text.

Reproductions first (restricted lost through CSV, per-term odor sources flattened, SDF notes cut at a
blank line or split at '$$$$' / '> <cas>', formula-looking cells written raw by the CLI), then a
property-based test over generated catalogues. The hostile strings are the spreadsheet formula
injection examples of the OWASP "CSV Injection" page and the SDF record and data-header syntax of the
CTfile formats specification (BIOVIA, CTfile Formats, 2020: '$$$$' ends a record, '> <name>' starts
a data item, a blank line ends its value).
"""

from __future__ import annotations

import json

import pytest
from catalogue_helpers import TEST_VOCABULARY
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from sqlalchemy import delete

from library.catalogue import curation, restrictions, transfer
from library.catalogue.models import RESTRICTION_KINDS
from library.catalogue.database import initialize
from library.catalogue.models import AuditEntry, Material
from library.cli import main

# Real aroma materials (seed_catalog/materials.csv), distinct InChIKeys.
STRUCTURES = ["CC(C)=CCCC(C)(O)C=C", "COc1cc(C=O)ccc1O", "O=c1ccc2ccccc2o1", "CCCCCCCC=O",
              "C=C(C)[C@@H]1CC=C(C)CC1", "C=C(C)[C@H]1CC=C(C)CC1", "CC(C)=CCC/C(C)=C/C=O",
              "COc1ccc(CC=C)cc1O", "CC(C)[C@@H]1CC[C@@H](C)C[C@H]1O", "O=Cc1ccccc1"]
FORMULA_CELLS = ["=cmd|' /C calc'!A0", "+SUM(1+1)", "-2+3", "@SUM(A1)", "'=already quoted", "''+two"]
HOSTILE_LINES = ["$$$$", "> <cas>", ">  <name>", "M  END", "", "  indented", 'a "quoted", comma', "ünïcödé ☃",
                 "\u2028line separator", "tab\there", "'", *FORMULA_CELLS]


def _new_catalogue(url):
    opened = initialize(url)
    with opened.transaction() as session:
        for term, family in TEST_VOCABULARY.items():
            curation.add_descriptor(session, term, family=family, actor="test")
    return opened


def _reimport(text: str, fmt: str, target) -> transfer.ImportReport:
    rows = transfer.read_rows(f"export.{fmt}", data=text.encode())
    report = transfer.import_into(target, rows)
    assert report.committed and not report.rejected, [r.message for r in report.rejected]
    return report


def _export(catalogue, fmt: str) -> str:
    with catalogue.reading() as session:
        return "".join(transfer.export_materials(session, fmt))


def test_restricted_status_and_per_term_odor_sources_survive_every_format(tmp_path):
    source = _new_catalogue(f"sqlite:///{tmp_path / 'a.sqlite'}")
    with source.transaction() as session:
        draft = curation.draft_material(
            "CC(C)=CCCC(C)(O)C=C", name="Linalool", odors="floral:0.8|citrus:0.3|woody",
            sources={"structure": "from memory", "preferred_name": "from memory", "odor": "from memory"},
            odor_sources={"floral": "measured: panel 2026-03, 12 assessors"})
        material = curation.add_material(session, draft).material
        curation.set_restricted(session, material, True, actor="test")
        curation.set_status(session, material, "retired", actor="test")
    for fmt in ("csv", "sdf", "json"):
        target = _new_catalogue(f"sqlite:///{tmp_path / f'b-{fmt}.sqlite'}")
        _reimport(_export(source, fmt), fmt, target)
        with target.reading() as session:
            copy = curation.find_material(session, "Linalool")
            assert copy.restricted is True and copy.status == "retired", fmt
            sources = {o.descriptor.term: (o.source_kind, o.source_reference) for o in copy.odors}
            assert sources == {"floral": ("measured", "panel 2026-03, 12 assessors"),
                               "citrus": ("from memory", None), "woody": ("from memory", None)}, fmt
            assert {o.descriptor.term: o.strength for o in copy.odors} == {"floral": 0.8, "citrus": 0.3,
                                                                          "woody": None}
        target.dispose()
    source.dispose()


def test_sdf_notes_with_blank_lines_and_record_syntax_come_back_whole(tmp_path):
    notes = "First paragraph.\n\nSecond paragraph.\n$$$$\n> <cas>\n50-00-0\n>  <name>\nInjected"
    source = _new_catalogue(f"sqlite:///{tmp_path / 'a.sqlite'}")
    with source.transaction() as session:
        curation.add_material(session, curation.draft_material(
            "COc1cc(C=O)ccc1O", name="Vanillin", notes=notes,
            sources={"structure": "from memory", "preferred_name": "from memory"}))
    text = _export(source, "sdf")
    assert text.count("\n$$$$\n") == 1 and text.endswith("$$$$\n")  # one record, not split
    target = _new_catalogue(f"sqlite:///{tmp_path / 'b.sqlite'}")
    report = _reimport(text, "sdf", target)
    assert report.count("added") == 1
    with target.reading() as session:
        copy = curation.find_material(session, "Vanillin")
        assert copy.notes == notes and copy.cas_rn is None
    source.dispose()
    target.dispose()


def test_cli_csv_export_neutralizes_formula_cells_and_import_restores_them(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'cli.sqlite'}"
    assert main(["--db", url, "init"]) == 0
    for index, cell in enumerate(FORMULA_CELLS):
        code = main(["--db", url, "add", STRUCTURES[index], "--name", f"Material {index}", f"--notes={cell}"])
        assert code == 0, capsys.readouterr().err
    out = tmp_path / "out.csv"
    assert main(["--db", url, "export", "--format", "csv", "--out", str(out)]) == 0
    import csv

    with out.open(newline="", encoding="utf-8") as handle:
        cells = [row["notes"] for row in csv.DictReader(handle)]
    assert cells == ["'" + c for c in FORMULA_CELLS]
    assert all(not c.startswith(("=", "+", "-", "@")) for c in cells)
    copy = f"sqlite:///{tmp_path / 'copy.sqlite'}"
    assert main(["--db", copy, "init"]) == 0
    assert main(["--db", copy, "import", str(out)]) == 0
    capsys.readouterr()
    assert main(["--db", copy, "export", "--format", "csv"]) == 0
    assert capsys.readouterr().out == out.read_text(encoding="utf-8")


def test_web_download_and_cli_export_share_one_neutralizing_function():
    from webui import explore

    assert explore.spreadsheet_safe is transfer.spreadsheet_safe
    for value in [*FORMULA_CELLS, "plain", "'tis", "", "'", "\t=tab"]:
        assert transfer.from_spreadsheet_safe(transfer.spreadsheet_safe(value)) == value


# ---------------------------------------------------------------- property-based round trip

_PLAIN = st.text(st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=12)
_HOSTILE = st.sampled_from([line for line in HOSTILE_LINES if line and "\t" not in line])
_NAME_PART = st.one_of(_PLAIN, _HOSTILE)
_NOTE_LINE = st.one_of(_PLAIN, st.sampled_from(HOSTILE_LINES), st.just("\r\n"))
_REFERENCE = st.one_of(st.none(), _NAME_PART)


@st.composite
def catalogues(draw):
    count = draw(st.integers(min_value=1, max_value=4))
    indices = draw(st.permutations(range(len(STRUCTURES))))[:count]
    materials = []
    terms = sorted(TEST_VOCABULARY)
    for number, index in enumerate(indices):
        chosen = draw(st.lists(st.sampled_from(terms), unique=True, max_size=3))
        odors = [(t, draw(st.one_of(st.none(), st.floats(0, 1))),
                  draw(st.sampled_from(["from memory", "measured", "literature", "demo"])), draw(_REFERENCE))
                 for t in chosen]
        materials.append({
            "smiles": STRUCTURES[index],
            "name": f"{draw(_NAME_PART).strip() or 'x'} n{number}",
            "synonyms": [f"{draw(_NAME_PART).replace('|', '/').strip() or 'y'} s{number}.{j}"
                         for j in range(draw(st.integers(0, 2)))],
            "cas": draw(st.sampled_from(["", "106-22-9", "78-70-6", "121-33-5"])) if number == 0 else "",
            "family": draw(st.one_of(st.just(""), _PLAIN.map(lambda t: t[:40]))),
            "notes": "\n".join(draw(st.lists(_NOTE_LINE, max_size=5))),
            "odors": odors,
            "status": draw(st.sampled_from(["active", "retired"])),
            "restricted": draw(st.booleans()),
            "restrictions": [(draw(st.sampled_from(RESTRICTION_KINDS)), f"{draw(_NAME_PART).strip() or 'a'} authority",
                              draw(st.one_of(st.none(), st.floats(0, 100))), draw(_REFERENCE))
                             for _ in range(draw(st.integers(0, 2)))],
            "name_source": draw(st.one_of(st.just("from memory"), _NAME_PART.map(lambda t: f"measured: {t}"))),
        })
    return materials


def _store(catalogue, materials) -> None:
    with catalogue.transaction() as session:
        for m in materials:
            odor_sources = {}
            for term, _, kind, reference in m["odors"]:
                text = f"{kind}: {reference}" if reference and reference.strip() else kind
                if kind == "literature":  # a literature source must read as a reference; hostile text after it
                    text = f"literature: J. Agric. Food Chem. 50, 1 (2002) {reference or ''}".rstrip()
                odor_sources[term] = text
            draft = curation.draft_material(
                m["smiles"], name=m["name"], synonyms=m["synonyms"], cas=m["cas"], family=m["family"],
                notes=m["notes"],
                odors=[curation.OdorAssignment(t, s) for t, s, _, _ in m["odors"]],
                sources={"structure": "from memory", "preferred_name": m["name_source"],
                         "cas_rn": "literature: CRC Handbook 97, 3-1 (2016)" if m["cas"] else None},
                odor_sources=odor_sources)
            draft.restrictions = [
                restrictions.check_entry(kind=kind, authority=authority, reference=reference,
                                         max_percent=level if kind in ("restricted", "allergen") else None,
                                         category=reference, date="2024-02-29")
                for kind, authority, level, reference in m.get("restrictions", [])]
            draft.status, draft.restricted = m["status"], m["restricted"]
            curation.add_material(session, draft, actor="test")


def _wipe(catalogue) -> None:
    with catalogue.transaction() as session:
        session.execute(delete(Material))
        session.execute(delete(AuditEntry))


EXAMPLES = 100


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    folder = tmp_path_factory.mktemp("round-trip")
    source = _new_catalogue(f"sqlite:///{folder / 'source.sqlite'}")
    target = _new_catalogue(f"sqlite:///{folder / 'target.sqlite'}")
    yield source, target
    source.dispose()
    target.dispose()


@pytest.mark.parametrize("fmt", ["csv", "sdf", "json"])
def test_export_import_export_is_identical_for_hostile_catalogues(pair, fmt):
    source, target = pair
    seen = []

    @settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=list(HealthCheck))
    @given(catalogues())
    # Found by this test: an SDF whose first title line starts with "{" was read as JSON.
    @example([{"smiles": "CC(C)=CCCC(C)(O)C=C", "name": "{ n0", "synonyms": [], "cas": "", "family": "",
               "notes": "", "odors": [], "status": "active", "restricted": False, "name_source": "from memory"}])
    def round_trip(materials):
        _wipe(source)
        _wipe(target)
        try:
            _store(source, materials)
        except curation.CurationError:
            return  # a generated value intake refuses (e.g. a name clash); not a round-trip case
        first = _export(source, fmt)
        _reimport(first, fmt, target)
        second = _export(target, fmt)
        assert second == first
        if fmt == "json":
            assert len(json.loads(second)["materials"]) == len(materials)
        seen.append(len(materials))

    round_trip()
    print(f"\nround trip {fmt}: {len(seen)} generated catalogues ({sum(seen)} materials) exported, "
          "re-imported and exported again identically")
    assert len(seen) >= EXAMPLES // 2
