"""Intake refuses what is not an odorant olibra can hold, and says what standardization removed.

Each case reproduces a defect found by adversarial testing: structures with no heavy atom, metal
complexes and organometallics, inorganic salts that stripping would turn into another compound,
CAS RNs in non-ASCII digits, a synonym that is another material's name, NUL bytes past the first
4 KB of a file, and a directory given as a molfile path.
"""

import pytest
from catalogue_helpers import draft

from library.catalogue import curation, transfer
from library.catalogue.edits import MaterialChanges, apply_changes
from library.catalogue.database import Catalogue
from library.catalogue.models import Material
from library.cli import main
from library.structures import StructureError, check_cas, standardize

from bad_inputs import REFUSED



@pytest.mark.parametrize("smiles,message", REFUSED)
def test_non_odorant_structures_are_refused(smiles, message):
    with pytest.raises(StructureError, match=message):
        standardize(smiles)


# Small inorganic odorants stay valid materials (ammonia and hydrogen sulfide are odorants by any
# handbook; common practice, no source).
@pytest.mark.parametrize("smiles,formula", [("N", "H3N"), ("S", "H2S"), ("O=S=O", "O2S")])
def test_small_inorganic_odorants_are_accepted(smiles, formula):
    assert standardize(smiles).formula == formula


def test_salt_of_an_organic_acid_reports_exactly_what_was_removed():
    # Monosodium L-glutamate (a flavor material; common practice, no source): the sodium ion is stripped
    # and the carboxylate neutralized, and the notes say both, naming the removed fragment.
    result = standardize("[Na+].N[C@@H](CCC(=O)O)C(=O)[O-]")
    assert result.smiles == "N[C@@H](CCC(=O)O)C(=O)O"
    assert "removed 1 counterion or solvent fragment(s): [Na+]" in result.notes
    assert any(n.startswith("neutralized charges (N[C@@H](CCC(=O)O)C(=O)[O-] became") for n in result.notes)
    # A solvent of crystallization is named too.
    assert standardize("CCCCCCCC=O.O").notes == ("removed 1 counterion or solvent fragment(s): O",)


@pytest.mark.parametrize("text", [
    "１０６-２２-９",          # full-width digits of 106-22-9 (citronellol, check digit valid)
    "١٠٦-٢٢-٩",                # Arabic-Indic digits
    "106-22-\u0669",          # one Arabic-Indic nine
    "106\u201122-9",           # non-breaking hyphen
])
def test_cas_numbers_must_be_ascii(text):
    with pytest.raises(StructureError, match="ASCII"):
        check_cas(text)
    assert check_cas("106-22-9") == "106-22-9"  # CAS RN of citronellol (from memory); check digit rule


def test_a_cas_number_in_other_digits_cannot_land_on_a_second_material(catalogue):
    with catalogue.transaction() as session:
        curation.add_material(session, draft("CC(C)=CCCC(C)CCO", "Citronellol", cas="106-22-9"))
    with pytest.raises(StructureError, match="ASCII"):
        draft("CC(C)=CCC[C@@H](C)CCO", "(S)-Citronellol", cas="１０６-２２-９")


@pytest.fixture
def two_materials(catalogue):
    with catalogue.transaction() as session:
        curation.add_material(session, draft("CC(C)=CCCC(C)(O)C=C", "Linalool", synonyms=["Linalol"]))
        curation.add_material(session, draft("COc1cc(C=O)ccc1O", "Vanillin"))
    return catalogue


@pytest.mark.parametrize("synonym", ["Linalool", "linalool", "LINALOL"])
def test_a_synonym_may_not_be_another_materials_name_or_synonym(two_materials, synonym):
    with two_materials.transaction() as session:
        with pytest.raises(curation.CurationError, match="must point to one material"):
            curation.add_material(session, draft("O=c1ccc2ccccc2o1", "Coumarin", synonyms=[synonym]))
    with two_materials.transaction() as session:
        vanillin = curation.find_material(session, "Vanillin")
        changes = MaterialChanges(name="Vanillin", synonyms=[synonym], cas="", family="", notes="", odors="",
                                  odor_source="", source="", status="active", restricted=False)
        with pytest.raises(curation.CurationError, match="must point to one material"):
            apply_changes(session, vanillin, changes, actor="test")
    with two_materials.reading() as session:
        assert curation.find_material(session, "linalool").preferred_name == "Linalool"
        assert curation.find_material(session, "Linalol").preferred_name == "Linalool"


def test_a_new_name_may_not_be_another_materials_synonym(two_materials):
    with two_materials.transaction() as session:
        with pytest.raises(curation.CurationError, match="already a synonym of"):
            curation.add_material(session, draft("O=c1ccc2ccccc2o1", "linalol"))


def test_nul_bytes_anywhere_in_an_import_file_are_refused(two_materials):
    header = b"name,smiles,notes,structure_source\n"
    filler = b"".join(b"Octanal %d,CCCCCCCC=O,padding,from memory\n" % i for i in range(200))
    assert len(header + filler) > 4096
    data = header + filler + b"Coumarin,O=c1ccc2ccccc2o1,bad\x00note,from memory\n"
    with pytest.raises(transfer.ImportFileError, match="NUL byte"):
        transfer.read_rows("late-nul.csv", data=data)


@pytest.mark.parametrize("notes", ["line\x00break", "bell\x07", "escape\x1b[31m"])
def test_control_characters_in_notes_are_refused(notes):
    with pytest.raises(curation.CurationError, match="control character"):
        draft("COc1cc(C=O)ccc1O", "Vanillin", notes=notes)


def test_add_with_a_directory_or_unreadable_path_is_one_clear_line(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'cli.sqlite'}"
    assert main(["--db", url, "init"]) == 0
    folder = tmp_path / "somedir.mol"
    folder.mkdir()
    locked = tmp_path / "locked.mol"
    locked.write_text("x")
    locked.chmod(0)
    capsys.readouterr()
    for path, message in ((folder, "is a folder"), (tmp_path / "missing.mol", "does not exist")):
        code = main(["--db", url, "add", str(path), "--name", "X"])
        err = capsys.readouterr().err
        assert code == 2 and message in err and len(err.strip().splitlines()) == 1, err
    code = main(["--db", url, "add", str(locked), "--name", "X"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1 and "internal error" not in err, err
    for path in (folder, locked):  # (root can read a mode-0 file: then it is refused for its content)
        code = main(["--db", url, "import", str(path)])
        err = capsys.readouterr().err
        assert code in (1, 2) and "internal error" not in err, err
    with Catalogue(url).reading() as session:
        assert session.query(Material).count() == 0
