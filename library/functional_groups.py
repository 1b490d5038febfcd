"""Functional groups as SMARTS patterns, and base presets: named lists of groups to avoid in a product base.

Pure: takes SMILES text or RDKit molecules, returns plain values. The patterns follow common
practice (common practice, no source); the presets are trade rules of thumb (common practice, no
source), not stability findings: a material passing a preset still needs a stability test in the base.
"""

from __future__ import annotations

from dataclasses import dataclass

from rdkit import Chem, rdBase

# name -> (SMARTS, one-line description). Names are the vocabulary used by filters.
VOCABULARY: dict[str, tuple[str, str]] = {
    "aldehyde": ("[CX3H1](=O)[#6,#1]", "carbon-bound formyl group, R-CHO"),
    "ketone": ("[#6][CX3](=O)[#6]", "carbonyl between two carbons"),
    "ester": ("[#6][#6X3](=O)[#8X2][#6]", "carboxylic ester, R-CO-O-R' (lactones included)"),
    "lactone": ("[#6;R][#6X3;R](=O)[#8X2;R][#6;R]", "cyclic ester (ester group inside a ring)"),
    "carboxylic acid": ("[CX3](=O)[OX2H1]", "free carboxylic acid, R-COOH"),
    "nitrile": ("[CX2]#[NX1]", "cyano group, R-C#N"),
    "primary alcohol": ("[OX2H1][CX4H2][#6]", "hydroxyl on a CH2 carbon"),
    "secondary alcohol": ("[OX2H1][CX4H1]([#6])[#6]", "hydroxyl on a CH carbon bearing two carbons"),
    "tertiary alcohol": ("[OX2H1][CX4]([#6])([#6])[#6]", "hydroxyl on a carbon bearing three carbons"),
    "phenol": ("[OX2H1]c", "hydroxyl on an aromatic ring"),
    "ether": ("[OD2;!$(O[CX3]=[O,S,N]);!$(O[CX4][OX2])]([#6])[#6]",
              "C-O-C oxygen that is not part of an ester or an acetal"),
    "acetal": ("[CX4]([OX2][#6])[OX2][#6]", "carbon bearing two ether oxygens (acetal, ketal)"),
    "schiff base": ("[CX3]([#6])=[NX2][#6]", "imine C=N-C, as made from an aldehyde and an amine"),
    "thiol": ("[SX2H1][#6]", "sulfanyl group, R-SH"),
    "sulfide": ("[SX2;H0]([#6])[#6]", "thioether, R-S-R'"),
    "amine": ("[NX3;!$(N[CX3]=[O,S,N]);!$(N=*);!$(N~[#8])]", "amine nitrogen, aliphatic or aromatic (not an amide)"),
    "aromatic amine": ("[NX3;H2,H1;!$(N[CX3]=[O,S,N])]a", "amino group on an aromatic ring (anilines)"),
    "alkene": ("[CX3]=[CX3]", "carbon-carbon double bond outside aromatic rings"),
    "alkyne": ("[CX2]#[CX2]", "carbon-carbon triple bond"),
    "aromatic ring": ("a1aaaaa1", "six-membered aromatic ring"),
    "nitro": ("[$([NX3](=O)=O),$([NX3+](=O)[O-])]", "nitro group (nitro musks)"),
}

# name -> (groups to avoid, why). All: common practice, no source.
BASE_PRESETS: dict[str, tuple[tuple[str, ...], str]] = {
    "hypochlorite bleach": (("aldehyde", "primary alcohol", "secondary alcohol", "phenol", "amine",
                             "aromatic amine", "schiff base", "thiol", "sulfide", "alkene", "acetal"),
                            "strong oxidant at high pH: oxidizes aldehydes, alcohols, amines, sulfur groups "
                            "and double bonds"),
    "high-pH soap": (("aldehyde", "ester", "lactone", "schiff base", "phenol"),
                     "alkaline (pH 9-11): hydrolyzes esters and lactones, aldol-condenses and discolors "
                     "aldehydes, colors phenols and Schiff bases"),
    "acidic cleaner": (("acetal", "schiff base", "ester", "tertiary alcohol"),
                       "acid (pH 2-3): hydrolyzes acetals and Schiff bases, esters slowly; dehydrates and "
                       "rearranges tertiary alcohols"),
    "antiperspirant": (("aldehyde", "schiff base", "acetal"),
                       "acidic aluminum salts: condense aldehydes and hydrolyze acetals and Schiff bases"),
}
PRESET_SOURCE = "common practice, no source"


class GroupError(ValueError):
    """A group name or SMARTS pattern that cannot be used; the message names it and what to do."""


@dataclass(frozen=True)
class GroupPattern:
    """A named SMARTS pattern: a vocabulary group, or a user's own SMARTS (named by its text)."""

    name: str
    smarts: str
    query: Chem.Mol

    def matches(self, mol: Chem.Mol) -> bool:
        return mol.HasSubstructMatch(self.query)


def _compile(name: str, smarts: str) -> GroupPattern:
    with rdBase.BlockLogs():
        query = Chem.MolFromSmarts(smarts) if smarts.strip() else None
    if query is None:
        raise GroupError(f"{smarts!r} is not a valid SMARTS pattern; give a group name "
                         f"({', '.join(VOCABULARY)}) or a SMARTS such as '[CX3H1](=O)[#6]'")
    return GroupPattern(name, smarts, query)


_COMPILED = {name: _compile(name, smarts) for name, (smarts, _) in VOCABULARY.items()}


def pattern(text: str) -> GroupPattern:
    """A vocabulary group by name (case-insensitive, '_' or '-' for spaces) or, failing that, `text` read
    as SMARTS. Raises GroupError naming the text when it is neither."""
    key = text.strip().lower().replace("_", " ")
    for candidate in (key, key.replace("-", " ")):
        if candidate in _COMPILED:
            return _COMPILED[candidate]
    if not any(ch in text for ch in "[]()=#~@$*"):  # a bare word: a mistyped group name, not SMARTS
        raise GroupError(f"unknown functional group {text!r}; known groups: {', '.join(VOCABULARY)} "
                         "(or give a SMARTS pattern in brackets, e.g. '[CX3H1](=O)[#6]')")
    return _compile(text, text)


@dataclass(frozen=True)
class BasePreset:
    """A product base and the groups it usually attacks. `builtin`: shipped with olibra; `edited`: a
    curator's stored version (of a built-in preset, or a preset of their own)."""

    name: str
    groups: tuple[str, ...]
    why: str
    source: str
    builtin: bool = False
    edited: bool = False


def builtin_presets() -> list[BasePreset]:
    return [BasePreset(name, groups, why, PRESET_SOURCE, builtin=True) for name, (groups, why) in BASE_PRESETS.items()]


def find_preset(presets: list[BasePreset], name: str) -> BasePreset:
    """The preset called `name` (case-insensitive) among `presets`; GroupError lists the known ones."""
    key = (name or "").strip().lower()
    for candidate in presets:
        if candidate.name.lower() == key:
            return candidate
    raise GroupError(f"unknown base preset {name!r}; known presets: {', '.join(p.name for p in presets)}")


def preset(name: str) -> tuple[str, ...]:
    """The groups a built-in base preset avoids (library.catalogue.base_preset_store has the curators'
    versions); GroupError names the unknown preset and lists the known ones."""
    return find_preset(builtin_presets(), name).groups


def checked_groups(groups) -> tuple[str, ...]:
    """Group names or SMARTS for a preset, each checked (GroupError naming the first bad one), in the
    vocabulary's spelling where it is a vocabulary group, duplicates dropped."""
    out: list[str] = []
    for text in groups:
        if not str(text).strip():
            continue
        found = pattern(str(text))
        if found.name not in out:
            out.append(found.name)
    if not out:
        raise GroupError("a base preset needs at least one functional group to avoid")
    return tuple(out)


def _as_mol(structure: str | Chem.Mol) -> Chem.Mol:
    if isinstance(structure, Chem.Mol):
        return structure
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(structure)
    if mol is None:
        raise GroupError(f"{structure!r} is not a readable SMILES")
    return mol


def groups_of(structure: str | Chem.Mol) -> tuple[str, ...]:
    """The vocabulary groups present in a structure, in vocabulary order."""
    mol = _as_mol(structure)
    return tuple(name for name, compiled in _COMPILED.items() if compiled.matches(mol))


def passes(structure: str | Chem.Mol, *, must_have=(), must_not_have=()) -> bool:
    """Whether a structure has every `must_have` pattern and none of the `must_not_have` ones
    (GroupPattern objects or names/SMARTS text)."""
    mol = _as_mol(structure)
    have = [p if isinstance(p, GroupPattern) else pattern(p) for p in must_have]
    avoid = [p if isinstance(p, GroupPattern) else pattern(p) for p in must_not_have]
    return all(p.matches(mol) for p in have) and not any(p.matches(mol) for p in avoid)
