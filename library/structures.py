"""Parse, standardize and identify structures (SMILES, molfile/SDF records, InChI).

A material's identity is the standard InChIKey of its standardized structure:
largest organic fragment, charges neutralized where a neutral form exists,
isotopes and stereochemistry kept. A deuterated analogue and a mirror-image form
are therefore distinct materials; a structure with unassigned stereocentres is
kept as such and means a mixture of its stereoisomers.
"""

from __future__ import annotations

import logging
import re
from contextlib import contextmanager
from dataclasses import dataclass

from rdkit import Chem, RDLogger, rdBase
from rdkit.Chem import rdMolDescriptors
from rdkit.Chem.MolStandardize import rdMolStandardize

from library.errors import OlibraError

DEFAULT_MAX_HEAVY_ATOMS = 60
# Elements a material may contain: the organic set that odorants and flavor
# materials are made of, plus the halogens, boron, silicon and selenium.
SUPPORTED_ELEMENTS = frozenset("H B C N O F Si P S Cl Se Br I".split())
# Simple cations of salts of organic acids (monosodium glutamate, potassium sorbate): stripped when they
# stand alone as ions. Every other metal, and these when bonded, means a metal complex or an
# organometallic, which is refused: a metal atom is never a counterion to strip.
COUNTERION_METALS = frozenset("Li Na K Mg Ca".split())
# Elements RDKit counts as metals (for the message); anything else outside SUPPORTED_ELEMENTS is simply unsupported.
NONMETALS = frozenset("H He B C N O F Ne Si P S Cl Ar Ge As Se Br Kr Sb Te I Xe At Rn".split())
INPUT_FORMATS = ("smiles", "molfile", "inchi")
MAX_INPUT_CHARS = 200_000


class StructureError(OlibraError, ValueError):
    """A structure that olibra cannot accept; the message says why and what to do."""


@dataclass(frozen=True)
class StandardStructure:
    """A standardized structure and its identifiers.

    Masses: `average_mass` in g/mol (IUPAC standard atomic weights, isotope-exact
    for labelled atoms), `monoisotopic_mass` in Da (unified atomic mass units).
    """

    mol: Chem.Mol
    smiles: str
    inchi: str
    inchikey: str
    formula: str
    average_mass: float
    monoisotopic_mass: float
    stereo_status: str  # 'defined' | 'partly undefined' | 'none'
    stereo_element_count: int
    unassigned_stereo_count: int
    heavy_atom_count: int
    molfile: str
    notes: tuple[str, ...] = ()  # what standardization changed, for the user


@contextmanager
def _captured_rdkit_messages():
    """Collect RDKit's error/warning messages instead of letting them reach stderr."""
    messages: list[str] = []

    class _Collector(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            text = record.getMessage().strip()
            if text:
                messages.append(text)

    rdBase.LogToPythonLogger()
    logger = logging.getLogger("rdkit")
    previous = (logger.handlers[:], logger.propagate)
    logger.handlers = [_Collector()]
    logger.propagate = False
    RDLogger.EnableLog("rdApp.error")
    try:
        yield messages
    finally:
        logger.handlers, logger.propagate = previous


def _rdkit_detail(messages: list[str]) -> str:
    useful = [m.split("]", 1)[-1].strip() if m.startswith("[") else m for m in messages]
    useful = [m for m in useful if m]
    return f" (RDKit says: {useful[0]})" if useful else ""


def detect_format(text: str) -> str:
    """Guess whether `text` is a SMILES string, a molfile record or an InChI."""
    stripped = text.strip()
    if stripped.startswith("InChI="):
        return "inchi"
    if "\n" in stripped or "M  END" in stripped or "V2000" in stripped or "V3000" in stripped:
        return "molfile"
    return "smiles"


def _parse(text: str, input_format: str) -> Chem.Mol:
    with _captured_rdkit_messages() as messages:
        if input_format == "smiles":
            token = text.strip()
            if any(c.isspace() for c in token):
                raise StructureError(
                    f"SMILES must be a single token without spaces: {_shorten(token)!r}; "
                    "put the name in its own field")
            params = Chem.SmilesParserParams()
            params.sanitize = False
            params.removeHs = False
            mol = Chem.MolFromSmiles(token, params)
            if mol is None:
                raise StructureError(
                    f"could not parse SMILES {_shorten(token)!r}{_rdkit_detail(messages)}; "
                    "check brackets, ring-closure digits and element symbols")
        elif input_format == "molfile":
            if "M  END" not in text:
                raise StructureError(
                    "molfile record is truncated: no 'M  END' line; export the record again")
            mol = Chem.MolFromMolBlock(text, sanitize=False, removeHs=False)
            if mol is None:
                raise StructureError(
                    f"could not parse the molfile record{_rdkit_detail(messages)}; "
                    "check the counts line and the atom and bond blocks")
        elif input_format == "inchi":
            mol = Chem.MolFromInchi(text.strip(), sanitize=True, removeHs=False)
            if mol is None:
                raise StructureError(
                    f"could not parse InChI {_shorten(text.strip())!r}{_rdkit_detail(messages)}; "
                    "check that it starts with 'InChI=1S/' and was copied whole")
        else:
            raise StructureError(
                f"unknown structure format {input_format!r}; use one of {', '.join(INPUT_FORMATS)}")
    return mol


def _shorten(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _check_chemistry(mol: Chem.Mol) -> None:
    problems = Chem.DetectChemistryProblems(mol)
    if problems:
        first = problems[0]
        kind = first.GetType()
        detail = first.Message().split("]", 1)[-1].strip()
        if kind == "AtomValenceException":
            raise StructureError(f"valence error: {detail}; check charges and bond orders")
        if kind in ("AtomKekulizeException", "KekulizeException"):
            raise StructureError(
                f"aromatic system cannot be kekulized: {detail}; "
                "check the aromatic atoms (an [nH] may be missing)")
        raise StructureError(f"structure is not chemically valid: {detail}")
    Chem.SanitizeMol(mol)


def _check_metals(mol: Chem.Mol, supported_elements: frozenset[str]) -> None:
    """Refuse metal complexes and organometallics before any fragment is stripped."""
    for atom in mol.GetAtoms():
        symbol = atom.GetSymbol()
        if atom.GetAtomicNum() == 0 or symbol in supported_elements or symbol in NONMETALS:
            continue
        if symbol in COUNTERION_METALS and atom.GetDegree() == 0:
            continue  # a lone Na+, K+ ... of a salt
        kind = "bonded to other atoms (an organometallic or metal complex)" if atom.GetDegree() else \
            "a metal that olibra does not strip as a counterion (a metal complex or metal salt)"
        raise StructureError(
            f"structure contains {symbol}, {kind}; olibra holds organic odorants and small neutral "
            "inorganic ones, and strips only lone Li, Na, K, Mg or Ca ions of salts")


def _choose_fragment(mol: Chem.Mol) -> tuple[Chem.Mol, list[str]]:
    """Strip counterions and solvents; refuse true mixtures of organic components and inorganic salts."""
    fragments = Chem.GetMolFrags(mol, asMols=True, sanitizeFrags=False)
    if len(fragments) == 1:
        return mol, []
    organic = {}
    for fragment in fragments:
        if any(atom.GetSymbol() == "C" for atom in fragment.GetAtoms()):
            organic.setdefault(Chem.MolToSmiles(fragment), fragment)
    if len(organic) > 1:
        heavy = sorted((f.GetNumHeavyAtoms() for f in organic.values()), reverse=True)
        # A small organic counterion (acetate, formate...) beside a large component is a salt.
        if heavy[1] > 4:
            raise StructureError(
                f"structure is a mixture of {len(organic)} organic components; "
                "add each component as its own material")
    whole = Chem.MolToSmiles(mol)
    if not organic:
        raise StructureError(
            f"structure {_shorten(whole)} is a salt or mixture of inorganic ions; stripping its counterions "
            "would store a different compound; give the neutral substance itself (e.g. N for ammonia)")
    chooser = rdMolStandardize.LargestFragmentChooser(preferOrganic=True)
    chosen = chooser.choose(mol)
    kept = Chem.MolToSmiles(chosen)
    removed = [Chem.MolToSmiles(f) for f in fragments]
    if kept in removed:
        removed.remove(kept)
    return chosen, [f"removed {len(removed)} counterion or solvent fragment(s): {', '.join(removed)}"]


def standardize(text: str | Chem.Mol, *, input_format: str | None = None,
                canonical_tautomer: bool = False,
                max_heavy_atoms: int = DEFAULT_MAX_HEAVY_ATOMS,
                supported_elements: frozenset[str] = SUPPORTED_ELEMENTS) -> StandardStructure:
    """Standardize a structure given as SMILES, molfile, InChI text or an RDKit Mol.

    Steps: parse, check valences, keep the largest organic fragment, neutralize,
    normalize functional groups, optionally pick RDKit's canonical tautomer, and
    identify. Isotopes and stereochemistry are kept. Raises StructureError with
    the reason for unparsable text, an empty structure, valence errors,
    radicals, too many heavy atoms, unsupported elements and mixtures.
    """
    notes: list[str] = []
    if isinstance(text, Chem.Mol):
        mol = Chem.Mol(text)
    else:
        if not isinstance(text, str):
            raise StructureError(f"structure must be text, not {type(text).__name__}")
        if len(text) > MAX_INPUT_CHARS:
            raise StructureError(
                f"structure text is {len(text)} characters long (limit {MAX_INPUT_CHARS}); "
                "is this really one structure?")
        if not text.strip():
            raise StructureError("structure is empty; give a SMILES, molfile or InChI")
        if "\x00" in text:
            raise StructureError("structure text contains a NUL byte; is the file binary?")
        input_format = input_format or detect_format(text)
        mol = _parse(text, input_format)
    if mol.GetNumAtoms() == 0:
        raise StructureError("structure has no atoms; give a non-empty structure")

    if mol.GetNumHeavyAtoms() == 0:
        raise StructureError(
            f"structure {_shorten(Chem.MolToSmiles(mol))} has no heavy atom (only hydrogen); "
            "give an odorant with at least one atom other than hydrogen")

    with _captured_rdkit_messages():
        _check_chemistry(mol)
        _check_metals(mol, supported_elements)
        mol, fragment_notes = _choose_fragment(mol)
        notes += fragment_notes
        unsupported = sorted({a.GetSymbol() for a in mol.GetAtoms()} - supported_elements)
        if unsupported:
            raise StructureError(
                f"element(s) {', '.join(unsupported)} not supported; olibra accepts "
                f"{' '.join(sorted(supported_elements))}")
        charged_before = Chem.GetFormalCharge(mol) != 0 or any(a.GetFormalCharge() for a in mol.GetAtoms())
        before = Chem.MolToSmiles(mol)
        mol = rdMolStandardize.Uncharger().uncharge(mol)
        if charged_before and not any(a.GetSymbol() == "C" for a in mol.GetAtoms()):
            raise StructureError(
                f"structure {_shorten(before)} is a charged inorganic species; neutralizing it would store "
                f"{_shorten(Chem.MolToSmiles(mol))}, a different compound; give the neutral substance itself")
        if charged_before and not any(a.GetFormalCharge() for a in mol.GetAtoms()):
            notes.append(f"neutralized charges ({before} became {Chem.MolToSmiles(mol)})")
        mol = rdMolStandardize.Normalizer().normalize(mol)
        if canonical_tautomer:
            before = Chem.MolToSmiles(mol)
            mol = rdMolStandardize.TautomerEnumerator().Canonicalize(mol)
            if Chem.MolToSmiles(mol) != before:
                notes.append("replaced by RDKit's canonical tautomer")
        mol = Chem.RemoveHs(mol)  # keeps isotope-labelled hydrogens
        Chem.AssignStereochemistry(mol, cleanIt=True, force=True)

    radicals = [a.GetIdx() + 1 for a in mol.GetAtoms() if a.GetNumRadicalElectrons()]
    if radicals:
        raise StructureError(
            f"structure has unpaired electrons (radical) on atom(s) {radicals[:5]}; "
            "add the missing hydrogens or bonds")
    heavy = mol.GetNumHeavyAtoms()
    if heavy > max_heavy_atoms:
        raise StructureError(
            f"structure has {heavy} heavy atoms, more than the limit of {max_heavy_atoms}; "
            "olibra is for odorants (raise the limit only if you must)")

    stereo = Chem.FindPotentialStereo(mol)
    unassigned = sum(1 for s in stereo if s.specified != Chem.StereoSpecified.Specified)
    if not stereo:
        stereo_status = "none"
    elif unassigned:
        stereo_status = "partly undefined"
    else:
        stereo_status = "defined"

    with _captured_rdkit_messages() as messages:
        inchi = Chem.MolToInchi(mol)
        if not inchi:
            raise StructureError(f"InChI could not be generated{_rdkit_detail(messages)}")
        inchikey = Chem.InchiToInchiKey(inchi)
    from rdkit.Chem import rdDepictor  # loads NumPy: imported when a structure is standardized, not at start-up

    depiction = Chem.Mol(mol)
    rdDepictor.Compute2DCoords(depiction)
    return StandardStructure(
        mol=mol,
        smiles=Chem.MolToSmiles(mol),
        inchi=inchi,
        inchikey=inchikey,
        formula=rdMolDescriptors.CalcMolFormula(mol, True, True),
        average_mass=rdMolDescriptors._CalcMolWt(mol),  # what Descriptors.MolWt calls, without its import cost
        monoisotopic_mass=rdMolDescriptors.CalcExactMolWt(mol),
        stereo_status=stereo_status,
        stereo_element_count=len(stereo),
        unassigned_stereo_count=unassigned,
        heavy_atom_count=heavy,
        molfile=Chem.MolToMolBlock(depiction),
        notes=tuple(notes),
    )


_CAS_PATTERN = re.compile(r"^([0-9]{2,7})-([0-9]{2})-([0-9])$")


def cas_check_digit(digits: str) -> int:
    """Check digit of a CAS Registry Number from its other digits.

    The published rule: number the digits from the right starting at 1,
    multiply each by its position, sum, and take the sum modulo 10.
    """
    return sum(position * int(d) for position, d in enumerate(reversed(digits), start=1)) % 10


def check_cas(text: str) -> str:
    """Return the CAS RN normalized (no spaces, leading zeros dropped) or raise StructureError."""
    if not isinstance(text, str):
        raise StructureError(f"CAS RN must be text, not {type(text).__name__}")
    candidate = text.strip()
    if not candidate.isascii():
        raise StructureError(
            f"CAS RN {_shorten(candidate)!r} contains characters other than ASCII digits and hyphens; "
            "type it with the digits 0-9 (e.g. 106-22-9)")
    match = _CAS_PATTERN.match(candidate)
    if not match:
        raise StructureError(
            f"CAS RN {_shorten(candidate)!r} is not of the form NNNNNNN-NN-N "
            "(2 to 7 digits, 2 digits, 1 check digit)")
    first, second, check = match.groups()
    first = first.lstrip("0") or "0"
    if len(first) < 2:
        first = first.rjust(2, "0")
    expected = cas_check_digit(first + second)
    if expected != int(check):
        raise StructureError(
            f"CAS RN {candidate} has check digit {check} but its digits give {expected}; "
            "the number was probably mistyped")
    return f"{first}-{second}-{check}"


def mol_from_smiles(smiles: str) -> Chem.Mol:
    """The RDKit molecule of a SMILES string (sanitized, implicit hydrogens), or StructureError.

    The one place where olibra reads a SMILES it already holds (a standardized structure, a
    computation's input); user input goes through :func:`standardize` instead, which says more.
    """
    if not isinstance(smiles, str):
        raise StructureError(f"expected a SMILES string, got {type(smiles).__name__}")
    if not smiles.strip():
        raise StructureError("the SMILES string is empty; give a structure")
    with _captured_rdkit_messages() as messages:
        mol = Chem.MolFromSmiles(smiles.strip())
    if mol is None:
        raise StructureError(f"could not parse SMILES {_shorten(smiles.strip())!r}{_rdkit_detail(messages)}")
    return mol
