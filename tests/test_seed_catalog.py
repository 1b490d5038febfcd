"""The shipped seed catalogue (library/seed_catalog/) checked against RDKit, the CAS check-digit rule and its own format.

Outside references used here: RDKit's SMILES parser, InChI (the IUPAC reference
implementation bundled with RDKit) and CIP labeler; the published CAS Registry
Number check-digit rule; InChIKeys and registry numbers recalled for a few
well-known materials (each marked where it appears).
"""

from __future__ import annotations

import csv
import re
from collections import Counter
from pathlib import Path

import pytest
from rdkit import Chem
from rdkit.Chem import rdCIPLabeler
from rdkit.Chem.rdMolDescriptors import CalcMolFormula

from library.seed_catalog import MATERIALS_FILE, SEED_DIR, VOCABULARY_FILE
from library.structures import StructureError, cas_check_digit, check_cas, standardize

COLUMNS = ["name", "synonyms", "cas", "smiles", "formula", "family", "odor",
           "structure_source", "cas_source", "odor_source", "notes", "restrictions", "components"]
FAMILIES = {"citrus", "green", "floral", "fruity", "herbal", "spicy", "woody", "amber", "musk",
            "balsamic", "marine", "gourmand", "animalic", "aldehydic"}
ALLOWED_ELEMENTS = {"C", "H", "N", "O", "S"}
PROVENANCE = re.compile(
    r"^(from memory|demo"
    r"|literature: [A-Z][^,]*? \d+, \d+ \((1[89]|20)\d\d\)"  # journal volume, page (year)
    r"|measured: \S.*|computed: \S.*)$")
PAIR = re.compile(r"Pair: (enantiomer|nitrile analogue|alcohol|ketone|ester|ether) of (.+?)(?:;|\.(?:\s|$))")
ISOTOPOLOGUE = re.compile(r"isotopologue of (.+?)\.(?:\s|$)")
ODOR_ITEM = re.compile(r"^([a-z][a-z-]*[a-z])(?::(0(?:\.\d+)?|1(?:\.0+)?))?$")

# Functional groups a near-neighbor pair claims to have (SMARTS).
GROUPS = {
    "alcohol": "[CX4][OX2H1]",
    "ketone": "[#6][CX3](=O)[#6]",
    "ester": "[#6][CX3](=O)[OX2][#6]",
    "ether": "[OX2]([#6;!$([CX3]=O)])[#6;!$([CX3]=O)]",
    "aldehyde": "[CX3H1](=O)[#6]",
    "nitrile": "[CX2]#[NX1]",
}


def _read_csv(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    with path.open(encoding="utf-8", newline="") as handle:
        reader = csv.reader(handle, strict=True)
        header = next(reader)
        rows = []
        for number, fields in enumerate(reader, start=2):
            assert len(fields) == len(header), f"{path.name} line {number}: {len(fields)} fields, expected {len(header)}"
            rows.append(dict(zip(header, fields)))
    return header, rows


HEADER, MATERIALS = _read_csv(MATERIALS_FILE)
VOCAB_HEADER, VOCABULARY = _read_csv(VOCABULARY_FILE)
BY_NAME = {row["name"]: row for row in MATERIALS}


def _mol(row: dict[str, str]) -> Chem.Mol:
    mol = Chem.MolFromSmiles(row["smiles"])
    assert mol is not None, f"{row['name']}: RDKit cannot parse {row['smiles']!r}"
    return mol


def _key(row: dict[str, str]) -> str:
    return Chem.MolToInchiKey(_mol(row))


def _pairs(relation: str) -> list[tuple[dict[str, str], dict[str, str]]]:
    found = []
    for row in MATERIALS:
        for rel, partner in PAIR.findall(row["notes"]):
            if rel == relation:
                assert partner in BY_NAME, f"{row['name']}: pair partner {partner!r} is not in the catalogue"
                found.append((row, BY_NAME[partner]))
    return found


def reference_check_digit(body: str) -> int:
    """Independent CAS check digit: sum of digits weighted 1, 2, 3, ... from the right, modulo 10."""
    return sum(int(d) * weight for weight, d in enumerate(reversed(body), start=1)) % 10


def reference_cas_ok(text: str) -> bool:
    match = re.fullmatch(r"(\d{2,7})-(\d\d)-(\d)", text)
    return bool(match) and reference_check_digit(match[1] + match[2]) == int(match[3])


# ---------------------------------------------------------------- file shape

def test_header_is_exactly_the_documented_columns():
    assert HEADER == COLUMNS
    assert VOCAB_HEADER == ["term", "family", "description"]


def test_format_version_is_recorded():
    assert (SEED_DIR / "VERSION").read_text(encoding="utf-8").strip() == "1"
    assert "format version 1" in (SEED_DIR / "FORMAT.md").read_text(encoding="utf-8")


def test_no_stray_whitespace_in_fields():
    for row in MATERIALS:
        for column, value in row.items():
            assert value == value.strip(), f"{row['name']}: {column} has leading/trailing space"


# ---------------------------------------------------------------- vocabulary

def test_vocabulary_size_and_shape():
    terms = [v["term"] for v in VOCABULARY]
    assert 30 <= len(terms) <= 60
    assert len(set(terms)) == len(terms), [t for t, n in Counter(terms).items() if n > 1]
    for v in VOCABULARY:
        assert ODOR_ITEM.match(v["term"]) and ":" not in v["term"], v["term"]
        assert v["family"] in FAMILIES, (v["term"], v["family"])
        assert len(v["description"]) >= 15, v["term"]
    # every family has at least one descriptor of its own name
    assert FAMILIES <= set(terms)


def test_every_odor_descriptor_is_in_the_vocabulary_with_a_valid_strength():
    terms = {v["term"] for v in VOCABULARY}
    for row in MATERIALS:
        items = row["odor"].split("|")
        assert items and all(items), f"{row['name']}: empty odor descriptor"
        seen = set()
        for item in items:
            match = ODOR_ITEM.match(item)
            assert match, f"{row['name']}: {item!r} is not 'term' or 'term:strength' with strength 0-1"
            assert match[1] in terms, f"{row['name']}: {match[1]!r} is not in the vocabulary"
            assert match[1] not in seen, f"{row['name']}: {match[1]!r} given twice"
            seen.add(match[1])


# ---------------------------------------------------------------- coverage

def test_catalogue_size_and_family_spread():
    assert len(MATERIALS) >= 150
    counts = Counter(row["family"] for row in MATERIALS)
    assert set(counts) == FAMILIES, set(counts) ^ FAMILIES
    assert min(counts.values()) >= 6, counts


def test_names_are_unique_and_plain():
    names = [row["name"].casefold() for row in MATERIALS]
    assert len(set(names)) == len(names), [n for n, k in Counter(names).items() if k > 1]
    for row in MATERIALS:
        # '|' separates synonyms and '; ' / '. ' end pair references in notes
        assert row["name"] and not re.search(r"[|;]|\.\s|\.$", row["name"]), row["name"]
        synonyms = [s for s in row["synonyms"].split("|") if row["synonyms"]]
        assert all(s.strip() == s and s for s in synonyms), row["name"]


# ---------------------------------------------------------------- structures

@pytest.mark.parametrize("row", MATERIALS, ids=[r["name"] for r in MATERIALS])
def test_structure_parses_and_standardizes_without_loss(row):
    raw = _mol(row)
    standard = standardize(row["smiles"])
    # same InChIKey as RDKit's own reading: no fragment, isotope or stereo element dropped
    assert standard.inchikey == Chem.MolToInchiKey(raw)
    assert standard.formula == row["formula"]
    assert CalcMolFormula(raw, separateIsotopes=True) == row["formula"]
    assert standard.heavy_atom_count == raw.GetNumHeavyAtoms() <= 40
    assert {a.GetSymbol() for a in Chem.AddHs(raw).GetAtoms()} <= ALLOWED_ELEMENTS
    assert Chem.GetFormalCharge(raw) == 0 and len(Chem.GetMolFrags(raw)) == 1


def test_most_materials_are_small():
    small = sum(_mol(row).GetNumHeavyAtoms() <= 25 for row in MATERIALS)
    assert small >= 0.8 * len(MATERIALS)


def test_inchikeys_are_unique():
    keys = Counter(_key(row) for row in MATERIALS)
    assert not [k for k, n in keys.items() if n > 1]


@pytest.mark.parametrize("name,inchikey", [
    ("(R)-(+)-Limonene", "XMGQYMWWDOXHJM-JTQLQIEISA-N"),  # from memory
    ("(S)-(-)-Limonene", "XMGQYMWWDOXHJM-SNVBAGLBSA-N"),  # from memory
    ("(R)-(-)-Carvone", "ULDHMXUKGWMISQ-SECBINFHSA-N"),  # from memory
    ("(S)-(+)-Carvone", "ULDHMXUKGWMISQ-VIFPVBQESA-N"),  # from memory
    ("(-)-Menthol", "NOOLISFMXDJSKH-KXUCPTDWSA-N"),  # from memory
    ("Linalool", "CDOSHBSSFJOMGT-UHFFFAOYSA-N"),  # from memory
    ("Geraniol", "GLZPCOQZEFWAFX-JXMROGBWSA-N"),  # from memory
    ("Vanillin", "MWOOGOJBHIARFG-UHFFFAOYSA-N"),  # from memory
    ("Coumarin", "ZYGHJZDHTFUPRJ-UHFFFAOYSA-N"),  # from memory
    ("Eugenol", "RRAFCDWBNXTKKO-UHFFFAOYSA-N"),  # from memory
    ("Indole", "SIKJAQJRHWYJAI-UHFFFAOYSA-N"),  # from memory
    ("2-Phenylethanol", "WRMNZCZEMHIOCP-UHFFFAOYSA-N"),  # from memory
])
def test_well_known_materials_have_their_known_inchikey(name, inchikey):
    assert _key(BY_NAME[name]) == inchikey


def test_single_center_names_match_the_cip_label():
    """A name starting '(R)-' or '(S)-' must carry that CIP label on its only stereocenter."""
    checked = 0
    for row in MATERIALS:
        match = re.match(r"\(([RS])\)-", row["name"])
        if not match:
            continue
        mol = _mol(row)
        rdCIPLabeler.AssignCIPLabels(mol)
        labels = [a.GetProp("_CIPCode") for a in mol.GetAtoms() if a.HasProp("_CIPCode")]
        assert labels == [match[1]], (row["name"], labels)
        checked += 1
    assert checked >= 8


def test_multi_center_descriptors_in_names_and_synonyms_match_the_cip_labels():
    """Where a name or synonym spells out every descriptor, e.g. '(1R,2S,5R)-menthol', the multiset must match."""
    checked = 0
    for row in MATERIALS:
        for text in [row["name"], *row["synonyms"].split("|")]:
            match = re.match(r"\(((?:\d+[a-z]?[RS],)+\d+[a-z]?[RS])\)-", text)
            if not match:
                continue
            wanted = sorted(d[-1] for d in match[1].split(","))
            mol = _mol(row)
            rdCIPLabeler.AssignCIPLabels(mol)
            labels = sorted(a.GetProp("_CIPCode") for a in mol.GetAtoms() if a.HasProp("_CIPCode"))
            assert labels == wanted, (row["name"], text, labels)
            checked += 1
    assert checked >= 5


# ---------------------------------------------------------------- CAS Registry Numbers

@pytest.mark.parametrize("number,body,check", [
    ("7732-18-5", "773218", 5),  # water, from memory
    ("64-17-5", "6417", 5),  # ethanol, from memory
    ("50-00-0", "5000", 0),  # formaldehyde, from memory
    ("121-33-5", "12133", 5),  # vanillin, from memory
    ("5989-27-5", "598927", 5),  # (R)-(+)-limonene, from memory
    ("2216-51-5", "221651", 5),  # (-)-menthol, from memory
])
def test_reference_check_digit_helper_on_real_numbers(number, body, check):
    assert reference_check_digit(body) == check
    assert reference_cas_ok(number)
    assert cas_check_digit(body) == check
    assert check_cas(number) == number


@pytest.mark.parametrize("wrong", ["7732-18-4", "64-17-6", "121-33-4", "5989-27-6"])  # one digit off the real ones
def test_wrong_check_digit_is_refused_by_both_helpers(wrong):
    assert not reference_cas_ok(wrong)
    with pytest.raises(StructureError):
        check_cas(wrong)


def test_every_cas_number_passes_its_check_digit():
    given = [row for row in MATERIALS if row["cas"]]
    assert len(given) >= 0.8 * len(MATERIALS)
    for row in given:
        assert reference_cas_ok(row["cas"]), (row["name"], row["cas"])
        assert check_cas(row["cas"]) == row["cas"], (row["name"], row["cas"])


def test_cas_numbers_are_unique():
    numbers = Counter(row["cas"] for row in MATERIALS if row["cas"])
    assert not [n for n, k in numbers.items() if k > 1]


# ---------------------------------------------------------------- provenance

def test_every_row_has_provenance_in_the_documented_syntax():
    for row in MATERIALS:
        assert PROVENANCE.match(row["structure_source"]), (row["name"], row["structure_source"])
        assert PROVENANCE.match(row["odor_source"]), (row["name"], row["odor_source"])
        if row["cas"]:
            assert PROVENANCE.match(row["cas_source"]), (row["name"], row["cas_source"])
        else:
            assert row["cas_source"] == "", row["name"]


# ---------------------------------------------------------------- deliberate test pairs

def test_enantiomer_pairs_share_connectivity_but_not_identity():
    pairs = _pairs("enantiomer")
    partners = {frozenset((a["name"], b["name"])) for a, b in pairs}
    assert len(partners) >= 4
    named = {(a["name"], b["name"]) for a, b in pairs}
    for a, b in pairs:
        assert (b["name"], a["name"]) in named, f"{b['name']} does not name {a['name']} as its enantiomer"
        key_a, key_b = _key(a), _key(b)
        assert key_a != key_b
        assert key_a.split("-")[0] == key_b.split("-")[0]
        # true mirror images: inverting every stereocenter of one gives the other
        mirror = Chem.Mol(_mol(a))
        for atom in mirror.GetAtoms():
            atom.InvertChirality()
        assert Chem.MolToInchiKey(mirror) == key_b, (a["name"], b["name"])
        assert standardize(a["smiles"]).stereo_status == "defined"
        assert a["odor"] != b["odor"], "a mirror-image pair is here because its odors differ"


def test_nitrile_analogues_replace_an_aldehyde_group():
    pairs = _pairs("nitrile analogue")
    assert len(pairs) >= 4
    nitrile, aldehyde = Chem.MolFromSmarts(GROUPS["nitrile"]), Chem.MolFromSmarts(GROUPS["aldehyde"])
    for row, partner in pairs:
        mol, other = _mol(row), _mol(partner)
        assert mol.HasSubstructMatch(nitrile) and not mol.HasSubstructMatch(aldehyde), row["name"]
        assert other.HasSubstructMatch(aldehyde), partner["name"]

        def carbons(m):
            return sum(a.GetSymbol() == "C" for a in m.GetAtoms())

        assert carbons(mol) == carbons(other), (row["name"], partner["name"])


@pytest.mark.parametrize("relation", ["alcohol", "ketone", "ester", "ether"])
def test_functional_near_neighbors_carry_the_named_group(relation):
    pairs = _pairs(relation)
    assert pairs, f"no '{relation}' near-neighbor pair"
    pattern = Chem.MolFromSmarts(GROUPS[relation] if relation != "alcohol" else "[#6][OX2H1]")
    for row, partner in pairs:
        assert _mol(row).HasSubstructMatch(pattern), (row["name"], relation)
        assert _key(row).split("-")[0] != _key(partner).split("-")[0], row["name"]


def test_at_least_two_ester_or_ether_and_two_alcohol_or_ketone_pairs():
    assert len(_pairs("ester")) + len(_pairs("ether")) >= 2
    assert len(_pairs("alcohol")) + len(_pairs("ketone")) >= 2


def test_isotopologues_are_demo_entries_distinct_from_their_parent():
    demos = [row for row in MATERIALS if ISOTOPOLOGUE.search(row["notes"])]
    assert len(demos) >= 3
    for row in demos:
        parent = BY_NAME[ISOTOPOLOGUE.search(row["notes"])[1]]
        assert "(demo)" in row["name"] and row["cas"] == "" and row["odor_source"] == "demo"
        assert row["notes"].startswith("Demo entry: invented odor notes;")
        key, parent_key = _key(row), _key(parent)
        assert key != parent_key
        assert key.split("-")[0] == parent_key.split("-")[0]
        # perdeuterated: no protium left, and as many deuterium atoms as the parent has hydrogens
        heavy = Chem.AddHs(_mol(row))
        hydrogens = [a for a in heavy.GetAtoms() if a.GetAtomicNum() == 1]
        assert hydrogens and all(a.GetIsotope() == 2 for a in hydrogens)
        assert len(hydrogens) == Chem.AddHs(_mol(parent)).GetNumAtoms() - _mol(parent).GetNumAtoms()
    assert all(row["odor_source"] != "demo" or row in demos for row in MATERIALS)


# ---------------------------------------------------------------- excluded materials

def test_excluded_materials_are_absent():
    # The product brief keeps three materials out of the project; they are named
    # here only by the first block of their InChIKey (skeleton, any stereo or
    # isotope form), computed with RDKit's InChI from structures recalled from memory.
    excluded_blocks = {"KWOLFJPFCHCOCG", "RYYVLZVUVIJVGH", "OIRDTQYFTABQOQ"}
    present = {_key(row).split("-")[0] for row in MATERIALS}
    assert not present & excluded_blocks
    # metallocenes: no metal atom anywhere (the element check above allows only C, H, N, O, S)
    assert all(a.GetSymbol() in ALLOWED_ELEMENTS for row in MATERIALS for a in _mol(row).GetAtoms())


def test_seed_row_whose_name_the_catalogue_gives_another_structure_is_left_out_not_replaced(sqlite_url):
    # a catalogue seeded by an older olibra (here: Ambrettolide with the other double-bond geometry) must
    # take the rest of the seed, keep its own material untouched and say which row it left out and why
    from library.catalogue import curation
    from library.catalogue.database import initialize
    from library.catalogue.models import Material
    from library.catalogue.seed import load_seed
    from sqlalchemy import select

    catalogue = initialize(sqlite_url)
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
        draft = curation.draft_material("O=C1CCCCC/C=C/CCCCCCCCO1", name="Ambrettolide",
                                        sources={"structure": "from memory", "preferred_name": "from memory"})
        curation.add_material(session, draft, actor="test")
    first = load_seed(catalogue)
    assert len(first.kept_local) == 1 and "Ambrettolide" in first.kept_local[0]
    assert "retire or rename" in first.kept_local[0]
    assert first.count("added") == len(MATERIALS) - 1
    with catalogue.reading() as session:
        kept = session.scalar(select(Material).where(Material.preferred_name == "Ambrettolide"))
        assert kept.smiles == "O=C1CCCCC/C=C/CCCCCCCCO1"  # the catalogue's own structure, unchanged
    again = load_seed(catalogue)  # idempotent: the rest is present, the same row left out again
    assert again.count("added") == 0 and len(again.kept_local) == 1
    catalogue.dispose()


def test_a_bad_seed_row_imports_nothing(sqlite_url, tmp_path):
    from library.catalogue import curation
    from library.catalogue.database import initialize
    from library.catalogue.models import Material
    from library.catalogue.seed import load_seed
    from library.errors import OlibraError
    from sqlalchemy import func, select

    lines = MATERIALS_FILE.read_text(encoding="utf-8").splitlines()
    broken = tmp_path / "materials.csv"
    header = next(csv.reader([lines[0]]))
    bad = dict.fromkeys(header, "")
    bad.update(name="Not a molecule", smiles="C1CC(")
    with broken.open("w", encoding="utf-8", newline="") as out:
        writer = csv.DictWriter(out, header)
        writer.writeheader()
        writer.writerows(MATERIALS[:5])
        writer.writerow(bad)
    catalogue = initialize(sqlite_url)
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
        # a material without a CAS RN: the bad row (no CAS RN either) must not pass for its own version
        curation.add_material(session, curation.draft_material(
            "CCCCCCCCO", name="Octan-1-ol", sources={"structure": "from memory", "preferred_name": "from memory"}),
            actor="test")
    with pytest.raises(OlibraError, match="bad row 6 .*bug in olibra's seed files"):
        load_seed(catalogue, broken)
    with catalogue.reading() as session:  # all or nothing: the five good rows were not stored either
        assert session.scalar(select(func.count()).select_from(Material)) == 1
    catalogue.dispose()
