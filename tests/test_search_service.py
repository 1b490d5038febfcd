"""Search over a real small catalogue: records computed with the real engines, stored, indexed, queried."""

import numpy as np
import pytest

from catalogue_helpers import draft
from library import computations
from library.catalogue import curation, jobs, observations
from library.search import catalogue_index, disagreement_policy, evidence, metrics, pairs, substitutes

# Real aroma materials (structures from memory); the test pairs that the two hypotheses
# treat differently: a mirror-image pair and an isotopologue pair.
MATERIALS = {
    "Citral": "CC(C)=CCCC(C)=CC=O",
    "Geranyl nitrile": "CC(C)=CCC/C(C)=C/C#N",
    "Citronellal": "CC(C)=CCCC(C)CC=O",
    "(R)-carvone": "CC1=CC[C@@H](CC1=O)C(C)=C",
    "(S)-carvone": "CC1=CC[C@H](CC1=O)C(C)=C",
    "Benzaldehyde": "O=Cc1ccccc1",
    "Benzaldehyde-d6": "[2H]C(=O)c1c([2H])c([2H])c([2H])c([2H])c1[2H]",
    "Vanillin": "COc1cc(C=O)ccc1O",
    "Ethyl vanillin": "CCOc1cc(C=O)ccc1O",
    "Anethole": "C/C=C/c1ccc(OC)cc1",
}
ODORS = {"Citral": "citrus", "Geranyl nitrile": "citrus", "Citronellal": "citrus|green",
         "(R)-carvone": "minty", "(S)-carvone": "spicy|herbal", "Benzaldehyde": "fruity|sweet",
         "Benzaldehyde-d6": "fruity", "Vanillin": "vanilla|sweet", "Ethyl vanillin": "vanilla|sweet",
         "Anethole": "spicy|sweet"}


@pytest.fixture(scope="module")
def searchable(tmp_path_factory):
    """A SQLite catalogue with computed shape and vibration (MMFF94) records for every material."""
    from library.catalogue.database import initialize
    from catalogue_helpers import TEST_VOCABULARY

    folder = tmp_path_factory.mktemp("search")
    catalogue = initialize(f"sqlite:///{folder / 'search.sqlite'}")
    with catalogue.transaction() as session:
        for term, family in TEST_VOCABULARY.items():
            curation.add_descriptor(session, term, family=family)
        for name, smiles in MATERIALS.items():
            curation.add_material(session, draft(smiles, name, odors=ODORS[name]))
    plan = computations.Plan()
    stamps = computations.stamps(plan)
    report = jobs.run(catalogue, stamps, computations.worker(plan),
                      jobs.select_materials(catalogue, stamps), processes=2)
    assert report.done == len(MATERIALS) and not report.failures, report.failures
    yield catalogue, folder
    catalogue.dispose()


@pytest.fixture
def index(searchable):
    catalogue, folder = searchable
    return catalogue_index.load_index(catalogue, cache_dir=folder / "cache")


def test_every_material_is_indexed_and_the_cache_is_reused_until_a_change(searchable):
    catalogue, folder = searchable
    first = catalogue_index.load_index(catalogue, cache_dir=folder / "cache-a")
    assert not first.from_cache and len(first.materials) == len(MATERIALS) and not first.unindexed
    again = catalogue_index.load_index(catalogue, cache_dir=folder / "cache-a")
    assert again.from_cache and again.revision == first.revision
    with catalogue.transaction() as session:
        curation.set_restricted(session, curation.find_material(session, "Anethole"), True)
    changed = catalogue_index.load_index(catalogue, cache_dir=folder / "cache-a")
    assert not changed.from_cache and changed.revision != first.revision
    with catalogue.transaction() as session:
        curation.set_restricted(session, curation.find_material(session, "Anethole"), False)


def test_new_tunnelling_settings_invalidate_the_cached_index(searchable, monkeypatch):
    # the index reads tunnelling records too: a cache built under other tunnelling settings must not be reused
    from library import computations
    from library.vibration import tunnelling

    catalogue, folder = searchable
    first = catalogue_index.load_index(catalogue, cache_dir=folder / "cache-t")
    assert catalogue_index.load_index(catalogue, cache_dir=folder / "cache-t").from_cache
    monkeypatch.setitem(tunnelling.DEFAULTS, "lambda_ev", tunnelling.DEFAULTS["lambda_ev"] * 2)
    computations.current_stamps.cache_clear()
    changed = catalogue_index.load_index(catalogue, cache_dir=folder / "cache-t")
    assert not changed.from_cache and changed.revision.tunnelling_stamp != first.revision.tunnelling_stamp


def test_substitutes_rank_by_the_chosen_metric_and_report_every_metric(searchable, index):
    catalogue, _ = searchable
    outcome = substitutes.find_substitutes(catalogue, "Citral", metric="blend", weight=0.5, k=5, cat_index=index)
    names = [c.material.name for c in outcome.candidates]
    assert "Citral" not in names and len(names) == 5
    blends = [c.scores["blend"] for c in outcome.candidates]
    assert blends == sorted(blends, reverse=True)
    for c in outcome.candidates:
        assert set(c.scores) >= {"shape", "vibration", "blend", "structure"}
        assert c.scores["blend"] == pytest.approx(0.5 * c.scores["shape"] + 0.5 * c.scores["vibration"], abs=1e-5)
        assert all(0.0 <= v <= 1.0 for v in c.scores.values())
    # the nitrile analogue is the perfumer's usual stability substitute (common practice, no source)
    assert "Geranyl nitrile" in names[:3]
    assert "IFRA" in outcome.caution and "safety data sheet" in outcome.caution


def test_shape_search_is_reranked_by_overlay_and_filters_apply(searchable, index):
    catalogue, _ = searchable
    outcome = substitutes.find_substitutes(catalogue, "(R)-carvone", metric="shape", k=3, cat_index=index,
                                           include_own_family=True)  # keep the mirror image
    assert outcome.candidates[0].material.name == "(S)-carvone"
    overlays = [c.scores["overlay"] for c in outcome.candidates]
    assert overlays == sorted(overlays, reverse=True)
    filtered = substitutes.find_substitutes(
        catalogue, "(R)-carvone", metric="shape", k=5, cat_index=index,
        filters=substitutes.build_filter(must_not_have=["herbal"], mw_range=(100, 160)))
    for c in filtered.candidates:
        assert "herbal" not in c.material.odors and 100 <= c.material.molecular_weight <= 160


def test_new_structure_is_computed_on_the_fly_and_not_stored(searchable, index):
    catalogue, _ = searchable
    revision = catalogue.revision()
    outcome = substitutes.find_substitutes(catalogue, "CC(C)=CCCC(C)=CC#N", k=3, cat_index=index)  # citral nitrile mix
    assert outcome.query.material_id is None and any("not stored" in n for n in outcome.notes)
    assert outcome.candidates[0].material.name in ("Geranyl nitrile", "Citral")
    with catalogue.reading() as session:
        with pytest.raises(curation.CurationError):
            curation.find_material(session, "CC(C)=CCCC(C)=CC#N")
    assert catalogue.revision() == revision


def test_compare_explains_the_mirror_image_pair(searchable, index):
    catalogue, _ = searchable
    result = pairs.compare(catalogue, "(R)-carvone", "(S)-carvone", cat_index=index)
    # enantiomers have identical harmonic frequencies (textbook: same potential energy surface), and
    # olibra computes them from one ensemble, so the fingerprints agree to float precision
    for name in ("vibration", "vibration-ir", "vibration-window"):
        assert result.scores[name] == pytest.approx(1.0, abs=1e-6)
        assert result.spreads[name] == pytest.approx(0.0, abs=1e-6)  # they are resampled together
    assert result.scores["structure"] == 1.0  # Morgan bits ignore stereo unless asked
    # a rotation cannot superpose the two hands; the handedness score says so, the shape vector barely
    assert result.scores["handedness"] < 0.999 and result.scores["overlay"] < 0.999
    assert result.scores["handedness"] < result.scores["shape"]
    assert result.spreads["shape"] > 0  # conformer noise is reported, not hidden
    bands = result.explanation["bands"]
    assert bands.score == 1.0 and not bands.unmatched_a


def test_compare_gives_isotopologues_one_shape(searchable, index):
    catalogue, _ = searchable
    result = pairs.compare(catalogue, "Benzaldehyde", "Benzaldehyde-d6", cat_index=index)
    assert result.scores["shape"] == pytest.approx(1.0, abs=1e-6)
    assert result.spreads["shape"] == pytest.approx(0.0, abs=1e-6)
    assert result.scores["handedness"] == 1.0  # achiral: neutral by construction
    # C-H stretches near 3000-3100 cm-1 move to C-D near 2200-2300 cm-1 (ratio ~1/sqrt(2), textbook)
    assert result.scores["vibration"] < 0.9
    assert "C-D" in result.explanation["bands"].to_dict()["groups"]["b"].values()


def test_disagreements_surface_the_isotopologue_and_mirror_image_pairs(searchable, index):
    catalogue, _ = searchable
    rows, label = disagreement_policy.find_disagreement_rows(catalogue, k=5, cat_index=index)
    pairs = {frozenset((r.a.name, r.b.name)): r for r in rows}
    isotopologue = pairs[frozenset(("Benzaldehyde", "Benzaldehyde-d6"))]
    assert isotopologue.pair.direction == "shape-not-vibration"
    assert isotopologue.pair.shape > 0.999 and isotopologue.pair.vibration < 0.9
    mirror = pairs[frozenset(("(R)-carvone", "(S)-carvone"))]
    assert mirror.pair.direction == "vibration-not-shape"
    assert mirror.basis == "indistinguishable by vibration, told apart by handedness"
    assert mirror.pair.vibration == pytest.approx(1.0, abs=1e-6) and mirror.pair.handedness < 0.999
    assert label == "odor descriptor Jaccard"
    assert rows[0].basis.startswith("indistinguishable")


def test_flags_and_observations_feed_the_scorecard(searchable, index, tmp_path):
    catalogue, _ = searchable
    with catalogue.transaction() as session:
        a, b = (curation.find_material(session, n) for n in ("Benzaldehyde", "Benzaldehyde-d6"))
        observations.flag_pair(session, b, a, kind="shape-alike smell-different", note="panel check")
    rows, _ = disagreement_policy.find_disagreement_rows(catalogue, k=5, cat_index=index)
    flagged = [r for r in rows if r.flags]
    assert flagged and flagged[0].flags == ["shape-alike smell-different"]

    # an invented panel data set (demo data): intensity 0-10 on four descriptors
    profiles = {"Citral": (9, 1, 0, 2), "Geranyl nitrile": (8, 1, 0, 1), "Citronellal": (7, 3, 0, 1),
                "(R)-carvone": (1, 8, 0, 2), "(S)-carvone": (1, 2, 0, 8), "Vanillin": (0, 0, 9, 3),
                "Ethyl vanillin": (0, 0, 9, 4), "Benzaldehyde": (1, 0, 2, 6)}
    lines = ["material,citrus,minty,vanilla,spicy"] + [f"{n},{','.join(map(str, v))}" for n, v in profiles.items()]
    with catalogue.transaction() as session:
        report = observations.import_observations(
            session, "\n".join(lines).encode(), "panel.csv", set_name="demo panel", kind="panel profile",
            source="demo")
    assert report.stored and report.values == 32
    report, label, _ = evidence.run_scorecard(catalogue, observation="demo panel", permutations=99,
                                              resamples=99, k=2, cat_index=index)
    scores = report.scores
    assert [s.metric for s in scores] == list(metrics.names(indexed=True))
    for s in scores:
        assert -1 <= s.spearman <= 1 and 0 < s.mantel_p <= 1 and s.ci_low <= s.ci_high and s.materials == 8
    assert "profile correlation" in label


def test_bad_observation_files_store_nothing(searchable):
    catalogue, _ = searchable
    for body, problem in [(b"material,citrus\nNo such thing,3\n", "no material matches"),
                          (b"material,citrus\nCitral,lots\n", "not a number"),
                          (b"material,variable,value\nCitral,citrus,1\nCitral,citrus,2\n", "given twice")]:
        with catalogue.sessions() as session:
            with session.begin() as outer:
                report = observations.import_observations(session, body, "bad.csv", set_name=f"bad {problem}",
                                                          kind="panel profile", source="demo")
                assert not report.stored and problem in report.problems[0]
                outer.rollback()
    with catalogue.reading() as session:
        with pytest.raises(curation.CurationError, match="no data set"):
            observations.observation_profiles(session, "bad not a number")


def test_metric_matrices_agree_with_pair_scores(index):
    rows = np.arange(len(index.materials))
    matrices = evidence.metric_matrices(index.index, rows)
    pair = index.index.pair_scores([0, 1, 2], [3, 4, 5])
    for metric in ("shape", "vibration", "structure"):
        assert np.allclose([matrices[metric][0, 3], matrices[metric][1, 4], matrices[metric][2, 5]],
                           pair[metric], atol=1e-5)


def test_search_commands_end_to_end(searchable, capsys, monkeypatch, tmp_path):
    import json
    import re

    from library.cli import main

    catalogue, folder = searchable
    monkeypatch.setenv("OLIBRA_CACHE", str(tmp_path / "cache"))
    url = catalogue.url

    def run(*args):
        code = main(["--db", url, *args])
        out = capsys.readouterr()
        return code, out.out, out.err

    code, out, _ = run("search", "Citral", "-k", "3", "--format", "json")
    hits = json.loads(out)
    assert code == 0 and len(hits) == 3 and {"shape_rank", "vibration_rank", "blend", "structure"} <= set(hits[0])
    code, out, _ = run("search", "Vanillin", "--metric", "vibration", "-k", "2")
    assert code == 0 and "caution:" in out and "IFRA" in out and "Ethyl vanillin" in out
    assert "contested hypothesis" not in out
    code, out, _ = run("search", "Vanillin", "--metric", "tunnelling", "-k", "2")
    assert code == 0 and "tunnelling receptor model: a model of a contested hypothesis" in out
    code, out, _ = run("compare", "Benzaldehyde", "Benzaldehyde-d6", "--format", "json")
    result = json.loads(out)
    assert result["scores"]["shape"] > 0.999 and result["scores"]["vibration"] < 0.9
    code, out, _ = run("disagreements", "--format", "csv", "--neighbors", "5")
    assert code == 0 and "Benzaldehyde-d6" in out and "indistinguishable by shape" in out
    # the tunnelling receptor model as the vibration side: the isotopologue pair stays a telling pair
    code, out, _ = run("disagreements", "--vibration-metric", "tunnelling", "--format", "json", "--neighbors", "5")
    rows = {frozenset((r["a"].split(" ", 1)[1], r["b"].split(" ", 1)[1])): r for r in json.loads(out)}
    isotopologues = rows[frozenset(("Benzaldehyde", "Benzaldehyde-d6"))]
    assert code == 0 and isotopologues["basis"] == "indistinguishable by shape"
    assert isotopologues["vibration"] == round(result["scores"]["tunnelling"], 4) < 0.9
    code, out, _ = run("disagreements", "--vibration-metric", "tunnelling", "--max-vibration", "p5", "--limit", "1")
    assert code == 0 and re.search(r"tunnelling <= 0\.\d{3} \(p5 of catalogue pairs\)", out)
    assert "contested hypothesis" in out
    code, out, _ = run("disagreements", "--neighbors", "5", "--max-shape", "p10", "--limit", "1")
    assert code == 0 and re.search(r"thresholds: .*shape <= 0\.\d{3} \(p10 of catalogue pairs\)", out)
    code, _, err = run("disagreements", "--max-shape", "p200")
    assert code == 2 and "is not a percentile" in err and "Traceback" not in err
    code, _, err = run("flag", "Citral", "Citral", "--kind", "other")
    assert code == 2 and "two different materials" in err
    target = tmp_path / "spectrum.svg"
    code, out, _ = run("spectrum", "Benzaldehyde", "--against", "Benzaldehyde-d6", "--out", str(target))
    assert code == 0 and target.read_text().lstrip().startswith(("<?xml", "<svg"))
    code, out, _ = run("search", "CCCCCCCCC#N", "--store-as", "Nonanenitrile", "-k", "2")
    assert code == 0 and "added #" in out and "substitutes for Nonanenitrile" in out
    code, out, _ = run("show", "Nonanenitrile")
    assert "vibration" in out and "shape" in out
    code, _, err = run("search", "no such material and no SMILES (", "-k", "2")
    assert code == 2 and "no material matches" in err and "Traceback" not in err


def test_streamed_arrays_equal_the_loaded_records_whatever_the_chunk(searchable, index):
    """The index is read from the database a chunk of materials at a time: any chunk size gives the
    same arrays as loading the whole records, in the order asked, and the index matches."""
    from library.catalogue import records

    catalogue, folder = searchable
    ids = sorted(index.materials)[::-1] + [10**9]  # reversed order, and one id with no record
    names = metrics.record_arrays("vibration")
    engine = catalogue_index.record_stamps(index.vibration_engine)["vibration"].engine_name
    with catalogue.reading() as session:
        whole = records.load_records(session, "vibration", engine, material_ids=ids, names=names)
        for chunk in (1, 3, 1000):
            streamed = list(records.iter_arrays(session, "vibration", engine, ids, names, chunk=chunk))
            assert [i for i, _ in streamed] == ids[:-1]
            for material_id, arrays in streamed:
                assert set(arrays) == set(names)
                for name in names:
                    assert np.array_equal(arrays[name], whole[material_id].arrays[name])
    rebuilt = catalogue_index.load_index(catalogue, use_cache=False)
    row = rebuilt.index.row_of(ids[0])
    assert np.array_equal(rebuilt.index.fingerprints_[row], index.index.fingerprints_[index.index.row_of(ids[0])])
