"""Named pair classes built from the catalogue itself, and how each metric scores them.

A pair class is a set of material pairs related by one structural change:

=================  ===========================================================================
enantiomers        same constitution, mirror image (every tetrahedral centre inverted); neither
                   material is superposable on its own mirror image
isotopologues      same structure once isotope labels are removed, different labels
e-z                same structure once double-bond geometry is removed, different geometry
reaction classes   applying a reaction SMARTS to one material gives the other's canonical
                   structure (aldehyde -> nitrile, ester -> ether, ...); users add their own
=================  ===========================================================================

For each class and each indexed metric, :func:`test_class` reports the class's score distribution
against the catalogue's (median, percentile of the class median among all pairs, two-sided
Mann-Whitney U), and whether the observed similarity of the class agrees with the metric: the
*gap* is the class's mean percentile under the metric minus its mean percentile under the observed
similarity (both percentiles over the catalogue's pairs), tested against a permutation null of
random pair sets of the same size. p-values are adjusted across classes x metrics by
Benjamini-Hochberg (J. R. Stat. Soc. B 57, 289 (1995)).

Overlay and handedness are scored on demand from stored conformers, one overlay per pair, and are
left out of the catalogue-wide distributions (too slow for every pair of a catalogue).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

# Built-in functional-group swaps: (name, reaction SMARTS, description). Each reaction is applied in
# the direction written; a pair is in the class when one material's product is the other material.
# Product atoms whose hydrogen count changes carry it explicitly ([CH0:1]): RDKit copies the count
# of a mapped atom from the reactant otherwise, which breaks valences for bracket atoms like [C@H].
BUILTIN_REACTIONS: tuple[tuple[str, str, str], ...] = (
    ("aldehyde-nitrile", "[CX3H1:1](=O)[#6:2]>>[CH0:1](#N)[#6:2]", "aldehyde CHO replaced by nitrile CN"),
    ("ester-ether", "[#6:1][CX3:2](=O)[OX2:3][#6:4]>>[#6:1][CH2:2][O:3][#6:4]",
     "ester carbonyl reduced to CH2 (ester -> ether)"),
    ("alcohol-ketone", "[CX4H1:1]([#6:2])([#6:3])[OX2H1:4]>>[CH0:1]([#6:2])([#6:3])=[OH0:4]",
     "secondary alcohol oxidised to ketone"),
    ("aldehyde-alcohol", "[CX3H1:1](=[O:2])[#6:3]>>[CH2:1]([OH1:2])[#6:3]", "aldehyde reduced to primary alcohol"),
    ("alcohol-acetate", "[CX4:1][OX2H1:2]>>[C:1][OH0:2]C(C)=O", "alcohol acetylated to its acetate ester"),
    ("aldehyde-acid", "[CX3H1:1](=[O:2])[#6:3]>>[CH0:1](=[O:2])([OH1])[#6:3]", "aldehyde oxidised to carboxylic acid"),
)
STRUCTURAL_CLASSES = ("enantiomers", "isotopologues", "e-z")
CATALOGUE_PAIRS = 20_000  # random catalogue pairs the class is set against (all pairs when fewer)
PERMUTATIONS = 999


class PairClassError(ValueError):
    """A pair class definition that cannot be used (the message names the problem)."""


@dataclass(frozen=True)
class PairClass:
    name: str
    description: str
    reaction: str | None = None  # reaction SMARTS of a functional-group swap


def parse_reaction(smarts: str, *, label: str = "reaction"):
    """An RDKit reaction from a one-reactant, one-product reaction SMARTS, or PairClassError saying why not."""
    from rdkit import RDLogger
    from rdkit.Chem import rdChemReactions

    text = (smarts or "").strip()
    if ">>" not in text:
        raise PairClassError(f"{label} {smarts!r} is not a reaction SMARTS: write reactant>>product, "
                             "for example [CX3H1:1]=O>>[C:1]#N")
    RDLogger.DisableLog("rdApp.*")
    try:
        reaction = rdChemReactions.ReactionFromSmarts(text)
    except ValueError as exc:
        raise PairClassError(f"{label} {smarts!r} could not be parsed ({str(exc).strip() or 'syntax error'}); "
                             "check brackets, atom maps and bond symbols") from None
    finally:
        RDLogger.EnableLog("rdApp.*")
    if reaction is None:
        raise PairClassError(f"{label} {smarts!r} could not be parsed; check brackets, atom maps and bond symbols")
    if reaction.GetNumReactantTemplates() != 1 or reaction.GetNumProductTemplates() != 1:
        raise PairClassError(f"{label} {smarts!r} must have exactly one reactant and one product template, "
                             f"got {reaction.GetNumReactantTemplates()} and {reaction.GetNumProductTemplates()}")
    reaction.Initialize()
    return reaction


def builtin_classes() -> tuple[PairClass, ...]:
    structural = (
        PairClass("enantiomers", "same constitution, mirror image (chiral materials only)"),
        PairClass("isotopologues", "same structure, different isotope labels"),
        PairClass("e-z", "same structure, different double-bond geometry"),
    )
    return structural + tuple(PairClass(name, text, smarts) for name, smarts, text in BUILTIN_REACTIONS)


# ---------------------------------------------------------------- membership


def _canonical(mol) -> str | None:
    from rdkit import Chem

    try:
        return Chem.MolToSmiles(mol)
    except Exception:  # noqa: BLE001 - an unsanitizable product is simply not a catalogue structure
        return None


def _without_isotopes(mol):
    from rdkit import Chem

    out = Chem.Mol(mol)
    for atom in out.GetAtoms():
        atom.SetIsotope(0)
    return Chem.RemoveHs(out)  # deuterium written as explicit atoms becomes implicit hydrogen


def _without_double_bond_geometry(mol):
    from rdkit import Chem

    out = Chem.Mol(mol)
    for bond in out.GetBonds():
        if bond.GetBondType() == Chem.BondType.DOUBLE:
            bond.SetStereo(Chem.BondStereo.STEREONONE)
        bond.SetBondDir(Chem.BondDir.NONE)
    return out


def _grouped_pairs(keys: Mapping[int, str | None], smiles: Mapping[int, str]) -> list[tuple[int, int]]:
    """Pairs of materials sharing a key but differing in canonical SMILES."""
    groups: dict[str, list[int]] = {}
    for material_id, key in keys.items():
        if key is not None:
            groups.setdefault(key, []).append(material_id)
    pairs = []
    for members in groups.values():
        members = sorted(members)
        pairs += [(a, b) for i, a in enumerate(members) for b in members[i + 1:] if smiles[a] != smiles[b]]
    return pairs


def class_pairs(pair_class: PairClass, structures: Mapping[int, str]) -> list[tuple[int, int]]:
    """The pairs (id_a, id_b), id_a < id_b, of materials {id: SMILES} that belong to `pair_class`."""
    from library import conformers
    from library.structures import mol_from_smiles

    mols = {i: mol_from_smiles(s) for i, s in structures.items()}
    canonical = {i: _canonical(m) for i, m in mols.items()}
    if pair_class.reaction is not None:
        return _reaction_pairs(parse_reaction(pair_class.reaction, label=pair_class.name), mols, canonical)
    if pair_class.name == "enantiomers":
        by_smiles: dict[str, list[int]] = {}
        for i, text in canonical.items():
            by_smiles.setdefault(text, []).append(i)
        pairs = set()
        for i, mol in mols.items():
            if conformers.superposable_on_mirror_image(mol):
                continue
            for j in by_smiles.get(_canonical(conformers.mirror_image(mol)), ()):
                if j != i:
                    pairs.add((min(i, j), max(i, j)))
        return sorted(pairs)
    if pair_class.name == "isotopologues":
        return _grouped_pairs({i: _canonical(_without_isotopes(m)) for i, m in mols.items()}, canonical)
    if pair_class.name == "e-z":
        return _grouped_pairs({i: _canonical(_without_double_bond_geometry(m)) for i, m in mols.items()}, canonical)
    raise PairClassError(f"pair class {pair_class.name!r} has neither a reaction nor a built-in rule")


def apply_reaction(reaction, mol) -> set[str]:
    """Canonical SMILES of every sanitizable product of a one-reactant reaction applied to `mol`."""
    from rdkit import Chem, RDLogger

    out = set()
    for products in reaction.RunReactants((mol,)):
        product = Chem.Mol(products[0])
        RDLogger.DisableLog("rdApp.*")
        try:
            Chem.SanitizeMol(product)
        except Exception:  # noqa: BLE001 - impossible valence: not a product
            continue
        finally:
            RDLogger.EnableLog("rdApp.*")
        text = _canonical(Chem.RemoveHs(product))
        if text:
            out.add(Chem.CanonSmiles(text))
    return out


def _reaction_pairs(reaction, mols, canonical) -> list[tuple[int, int]]:
    by_smiles: dict[str, list[int]] = {}
    for i, text in canonical.items():
        by_smiles.setdefault(text, []).append(i)
    pairs = set()
    for i, mol in mols.items():
        for product in apply_reaction(reaction, mol):
            for j in by_smiles.get(product, ()):
                if j != i:
                    pairs.add((min(i, j), max(i, j)))
    return sorted(pairs)


# ---------------------------------------------------------------- statistics


def benjamini_hochberg(p_values: Sequence[float]) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (J. R. Stat. Soc. B 57, 289 (1995)); NaN stays NaN.

    The same adjustment as scipy.stats.false_discovery_control(method='bh'); kept here so NaN
    entries (untestable classes) are allowed. May move to library.search.statistics.
    """
    p = np.asarray(p_values, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    valid = np.flatnonzero(~np.isnan(p))
    if valid.size == 0:
        return out
    values = p[valid]
    order = np.argsort(values)
    m = values.size
    scaled = values[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(scaled[::-1])[::-1]
    result = np.empty(m)
    result[order] = np.minimum(adjusted, 1.0)
    out[valid] = result
    return out


def percentile_of(values: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Mid-rank percentile (0-100) of each value among `reference`."""
    reference = np.sort(np.asarray(reference, np.float64))
    values = np.asarray(values, np.float64)
    below = np.searchsorted(reference, values, side="left")
    upto = np.searchsorted(reference, values, side="right")
    return 100.0 * (below + upto) / (2.0 * reference.size)


@dataclass(frozen=True)
class MetricResult:
    metric: str
    class_median: float
    catalogue_median: float
    median_percentile: float  # percentile (0-100) of the class median among catalogue pairs
    mann_whitney_p: float
    observed_pairs: int  # class pairs with an observed similarity
    gap: float | None  # mean metric percentile - mean observed percentile over the class (percent points)
    gap_p: float | None  # two-sided permutation p of the gap
    mann_whitney_q: float | None = None  # Benjamini-Hochberg adjusted
    gap_q: float | None = None

    @property
    def agrees(self) -> bool | None:
        """True when the metric's view of the class is not significantly apart from the observations."""
        return None if self.gap_q is None else bool(self.gap_q >= 0.05)


@dataclass
class ClassTest:
    pair_class: PairClass
    pairs: list[tuple[int, int]]
    catalogue_pairs: int
    observed_label: str | None
    results: list[MetricResult] = field(default_factory=list)


def _random_pairs(n: int, count: int, rng) -> tuple[np.ndarray, np.ndarray]:
    total = n * (n - 1) // 2
    if total <= count:
        a, b = np.triu_indices(n, 1)
        return a.astype(np.int64), b.astype(np.int64)
    a = rng.integers(0, n, size=count)
    b = rng.integers(0, n - 1, size=count)
    b = b + (b >= a)
    return np.minimum(a, b), np.maximum(a, b)


def score_class(pairs: Sequence[tuple[int, int]], *, row_of: Callable[[int], int], n: int,
                pair_scores: Callable[[np.ndarray, np.ndarray], Mapping[str, np.ndarray]],
                observed: Callable[[int, int], float | None] | None, material_ids: Sequence[int],
                permutations: int = PERMUTATIONS, catalogue_pairs: int = CATALOGUE_PAIRS,
                seed: int = 0) -> tuple[list[MetricResult], int]:
    """Per-metric results of one class (unadjusted p), and how many catalogue pairs it was set against."""
    from scipy.stats import mannwhitneyu

    rng = np.random.default_rng(seed)
    ref_a, ref_b = _random_pairs(n, catalogue_pairs, rng)
    reference = pair_scores(ref_a, ref_b)
    class_a = np.array([row_of(a) for a, _ in pairs], np.int64)
    class_b = np.array([row_of(b) for _, b in pairs], np.int64)
    scores = pair_scores(class_a, class_b) if len(pairs) else {name: np.empty(0) for name in reference}
    ids = np.asarray(material_ids)
    ref_observed = class_observed = None
    if observed is not None:
        ref_observed = np.array([_value(observed(ids[a], ids[b])) for a, b in zip(ref_a, ref_b)])
        class_observed = np.array([_value(observed(a, b)) for a, b in pairs])
    results = []
    for name, values in reference.items():
        values = np.asarray(values, np.float64)
        mine = np.asarray(scores[name], np.float64)
        if mine.size == 0:
            results.append(MetricResult(name, np.nan, float(np.median(values)), np.nan, np.nan, 0, None, None))
            continue
        median = float(np.median(mine))
        p_mw = float(mannwhitneyu(mine, values, alternative="two-sided").pvalue)
        gap = gap_p = None
        observed_count = 0
        if ref_observed is not None:
            gap, gap_p, observed_count = _gap_test(mine, class_observed, values, ref_observed,
                                                   permutations=permutations, rng=rng)
        results.append(MetricResult(name, median, float(np.median(values)),
                                    float(percentile_of([median], values)[0]), p_mw, observed_count, gap, gap_p))
    return results, int(ref_a.size)


def _value(x) -> float:
    return np.nan if x is None else float(x)


def _gap_test(class_metric, class_observed, ref_metric, ref_observed, *, permutations, rng):
    """Mean (metric percentile - observed percentile) over the class's observed pairs, and its two-sided
    permutation p against random sets of as many catalogue pairs with observations."""
    keep = ~np.isnan(class_observed)
    ref_keep = ~np.isnan(ref_observed)
    count = int(keep.sum())
    if count == 0 or ref_keep.sum() < count + 1:
        return None, None, count
    ref_metric, ref_observed = ref_metric[ref_keep], ref_observed[ref_keep]
    gap = float(np.mean(percentile_of(class_metric[keep], ref_metric)
                        - percentile_of(class_observed[keep], ref_observed)))
    ref_gaps = percentile_of(ref_metric, ref_metric) - percentile_of(ref_observed, ref_observed)
    null = np.array([ref_gaps[rng.choice(ref_gaps.size, size=count, replace=False)].mean()
                     for _ in range(int(permutations))])
    center = float(ref_gaps.mean())
    extreme = np.sum(np.abs(null - center) >= abs(gap - center) - 1e-12)
    return gap, float((extreme + 1) / (int(permutations) + 1)), count


def adjust(tests: Sequence[ClassTest]) -> None:
    """Benjamini-Hochberg across every class x metric of `tests`, separately for the Mann-Whitney and gap p."""
    from dataclasses import replace

    cells = [(t, i) for t in tests for i in range(len(t.results))]
    mw = benjamini_hochberg([t.results[i].mann_whitney_p for t, i in cells])
    gap = benjamini_hochberg([np.nan if t.results[i].gap_p is None else t.results[i].gap_p for t, i in cells])
    for (t, i), q_mw, q_gap in zip(cells, mw, gap):
        t.results[i] = replace(t.results[i], mann_whitney_q=None if np.isnan(q_mw) else float(q_mw),
                               gap_q=None if np.isnan(q_gap) else float(q_gap))


# ---------------------------------------------------------------- on a catalogue


def catalogue_classes(catalogue) -> tuple[PairClass, ...]:
    """Built-in classes followed by the classes users stored in the catalogue."""
    from library.catalogue import pair_class_store

    with catalogue.reading() as session:
        stored = pair_class_store.stored_classes(session)
    return builtin_classes() + tuple(PairClass(name, text or "user class", smarts) for name, smarts, text in stored)


def find_class(catalogue, name: str) -> PairClass:
    from library.search.errors import SearchError

    classes = catalogue_classes(catalogue)
    for pair_class in classes:
        if pair_class.name == name:
            return pair_class
    raise SearchError(f"no pair class named {name!r}; known: {', '.join(c.name for c in classes)}")


def list_classes(catalogue, cat_index=None) -> list[tuple[PairClass, list[tuple[int, int]]]]:
    """Every class with its pairs among the indexed materials."""
    from library.search.catalogue_index import load_index

    cat_index = cat_index or load_index(catalogue)
    structures = {i: info.smiles for i, info in cat_index.materials.items()}
    return [(c, class_pairs(c, structures)) for c in catalogue_classes(catalogue)]


def run_tests(catalogue, names: Sequence[str] | None = None, *, observed: str | None = "descriptors",
              permutations: int = PERMUTATIONS, seed: int = 0, cat_index=None,
              include_demo: bool = False) -> list[ClassTest]:
    """Test the named classes (all when None) on the catalogue's index; BH across classes x metrics.
    Demo entries' invented odor notes count as observations only with `include_demo`."""
    from library.search.catalogue_index import load_index
    from library.search.observed import observed_similarity

    if cat_index is None:
        cat_index = load_index(catalogue)
    index = cat_index.index
    chosen = catalogue_classes(catalogue) if names is None else [find_class(catalogue, n) for n in names]
    structures = {i: info.smiles for i, info in cat_index.materials.items()}
    similarity, label = observed_similarity(catalogue, observed, include_demo=include_demo)
    ids = [int(i) for i in index.ids_]
    tests = []
    for number, pair_class in enumerate(chosen):
        pairs = class_pairs(pair_class, structures)
        results, reference = score_class(
            pairs, row_of=index.row_of, n=index.size, pair_scores=lambda a, b: index.pair_scores(a, b),
            observed=similarity, material_ids=ids, permutations=permutations, seed=seed + number)
        tests.append(ClassTest(pair_class, pairs, reference, label, results))
    adjust(tests)
    return tests
