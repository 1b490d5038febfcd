"""A repeatable corpus of hostile inputs across the CLI, import files and the JSON API.

Every input must be refused with a clear message: no traceback, no internal error, no 5xx, and no
catalogue row changed. The test prints how many inputs it tried per channel (the figure the issue
asks for); run it with `pytest tests/test_hostile_inputs.py -s -q`.
"""

from __future__ import annotations

import hashlib
import json

import pytest
from sqlalchemy import select

from library.catalogue.models import (
    AuditEntry,
    Material,
    MaterialOdor,
    OdorDescriptor,
    PairFlag,
    Provenance,
    Synonym,
)
from library.cli import main

from bad_inputs import BAD_CSV, BAD_CSV_ROWS, BAD_MOLFILES, BAD_SDF, BAD_SMILES, GOOD_MOLFILE, REFUSED
from web_helpers import csrf_token, sign_in

HOSTILE_TEXT = ["", " ", "\x00", "a\x00b", "\n", "line\nbreak", "\t", "\x1b[31m", "x" * 201, "=cmd|' /C calc'!A0",
                "'; DROP TABLE material; --", "\" OR 1=1 --", "<script>alert(1)</script>", "$$$$", "> <cas>",
                "\u202e\u0644reversed", "\ud7ff", "\uffff", "%s%s%n", "../../etc/passwd", "｜", "a|b"]
BAD_CAS = ["１０６-２２-９", "106-22-8", "106-22", "106229", "-22-9", "1234567890-12-3", "\u0661\u0660\u0666-22-9",
           "106-22-9\x00", "106 22 9", "0-00-0x", "abc", "106—22—9"]
STRUCTURES = [s for s, _ in BAD_SMILES if s.strip() and "\x00" not in s and len(s) < 1000] + [s for s, _ in REFUSED]


@pytest.fixture
def catalogue(web_catalogue):
    """A copy of the web test catalogue (seed materials and the two accounts)."""
    return web_catalogue


def snapshot(catalogue) -> str:
    digest = hashlib.sha256()
    with catalogue.reading() as session:
        for model in (Material, Synonym, Provenance, MaterialOdor, OdorDescriptor, PairFlag, AuditEntry):
            for row in session.scalars(select(model)):
                digest.update(repr(sorted((k, str(v)) for k, v in vars(row).items()
                                          if not k.startswith("_"))).encode())
    return digest.hexdigest()


def cli_corpus(tmp_path) -> list[list[str]]:
    corpus = [["add", s, "--name", "Hostile"] for s in STRUCTURES]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Octanal", "--cas", cas] for cas in BAD_CAS]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", text] for text in HOSTILE_TEXT if text.strip() == "" or
               any(ord(c) < 32 for c in text) or len(text) > 200]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Octanal x", f"--notes={text}"] for text in ("a\x00b", "\x1b[31m",
                                                                                           "bell\x07")]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Octanal y", "--odor", odor] for odor in
               ("nonexistent-term", "citrus:2", "citrus:-1", "citrus:x", "citrus|citrus")]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Octanal z", f"--synonym={s}"] for s in ("Citral", "citral", "a|b",
                                                                                        "tab\there")]
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Citral"]]  # a name taken by another structure
    corpus += [["add", "COc1cc(C=O)ccc1O", "--name", "Octanal w", "--source", s] for s in
               ("guessed", "literature", "literature:   ", "from memory\x00")]
    corpus += [["show", text] for text in HOSTILE_TEXT if text.strip()]
    corpus += [["status", text, "retired"] for text in HOSTILE_TEXT if text.strip()]
    corpus += [["status", "Citral", "deleted"], ["export", "--format", "xml"], ["list", "--format", "yaml"],
               ["import", str(tmp_path)], ["import", str(tmp_path / "missing.csv")], ["add"], ["frobnicate"],
               ["vocabulary", "add"], ["vocabulary", "add", "bad|term"], ["vocabulary", "add", "x" * 61],
               ["user", "role", "nobody", "admin"], ["user", "disable", "nobody"], ["user", "remove", "nobody"],
               ["user", "role", "rhea", "emperor"], ["compute", "shape", "no such material"],
               ["search", "no such material"], ["compare", "Citral", "no such material"]]
    corpus += [["add", str(tmp_path), "--name", "Folder"], ["add", str(tmp_path / "x.mol"), "--name", "Missing"]]
    corpus += [["--db", "not a url", "list"], ["--db", "sqlite:////no/such/folder/x.sqlite", "list"]]
    return corpus


def import_corpus() -> list[tuple[str, bytes]]:
    files = [("bad.csv", data) for data, _ in BAD_CSV]
    files += [("bad-row.csv", data) for data, _ in BAD_CSV_ROWS]
    files += [("bad.sdf", text.encode()) for text, _ in BAD_SDF]
    files += [("bad.sdf", (text + "\n$$$$\n").encode()) for text, _ in BAD_MOLFILES]
    header = b"name,smiles,structure_source,restricted,odor_sources,status,cas,cas_source\n"
    files += [("late-nul.csv", header + b"A,CCO,from memory,,,,,\n" * 300 + b"B,CC\x00O,from memory,,,,,\n")]
    for values in (b"X,COc1cc(C=O)ccc1O,from memory,maybe,,,,", b"X,COc1cc(C=O)ccc1O,from memory,,{not json},,,",
                   b'X,COc1cc(C=O)ccc1O,from memory,,"[""a""]",,,', b'X,COc1cc(C=O)ccc1O,from memory,,"{""citrus"": 1}",,,',
                   b"X,COc1cc(C=O)ccc1O,from memory,,,deleted,,", b"X,COc1cc(C=O)ccc1O,from memory,,,,\xef\xbc\x91\xef\xbc\x90"
                   b"\xef\xbc\x96-22-9,from memory", b"X,[Na+].[Cl-],from memory,,,,,", b"X,[H][H],from memory,,,,,",
                   b"X,[Fe+2].c1cc[cH-]c1.c1cc[cH-]c1,from memory,,,,,", b"Citral,COc1cc(C=O)ccc1O,from memory,,,,,"):
        files.append(("bad-field.csv", header + values + b"\n"))
    for document in ('{"format": "olibra-materials", "materials": 3}', '{"format": "other", "materials": []}',
                     '{"format": "olibra-materials", "materials": [1]}', "[" * 100_000 + "]" * 100_000,
                     '{"format": "olibra-materials", "materials": [{"name": 1, "smiles": "CCO"}]}',
                     '{"format": "olibra-materials", "materials": [{"name": "A", "smiles": "CCO", "odor": "x"}]}',
                     '{"format": "olibra-materials", "materials": [{"name": "A", "smiles": "CCO", "restricted": "no"}]}',
                     '{"format": "olibra-materials", "materials": []}', "{", '{"format": "olibra-materials"'):
        files.append(("bad.json", document.encode()))
    for structure in STRUCTURES:  # every refused structure also as a one-row CSV file
        quoted = structure.replace('"', '""')
        files.append(("structure.csv", f'name,smiles,structure_source\nHostile,"{quoted}",from memory\n'.encode()))
    files.append(("bad.sdf", (GOOD_MOLFILE + ">  <notes>  [json]\nnot a json string\n\n$$$$\n").encode()))
    files.append(("bad.sdf", (GOOD_MOLFILE + ">  <notes>  [json]\n[1, 2]\n\n$$$$\n").encode()))
    return files


def json_corpus() -> list[tuple[str, str, object]]:
    corpus = []
    base = {"structure": "COc1cc(C=O)ccc1O", "name": "Hostile octanal"}
    types = [None, True, 1, 1.5, [], [1], {}, {"a": "b"}, "x" * 2_000_000]
    for field in ("structure", "name", "synonyms", "cas", "family", "odors", "notes", "source"):
        for value in types:
            if field in ("synonyms", "odors") and value == []:
                continue
            if field in ("cas", "family", "notes", "source") and value is None:
                continue
            corpus.append(("POST", "/api/materials", {**base, field: value}))
    corpus += [("POST", "/api/materials", {**base, "structure": s}) for s in STRUCTURES]
    corpus += [("POST", "/api/materials", {**base, "cas": cas}) for cas in BAD_CAS]
    corpus += [("POST", "/api/materials", {**base, "name": text}) for text in HOSTILE_TEXT
               if not text.strip() or any(ord(c) < 32 for c in text) or len(text) > 200]
    corpus += [("POST", "/api/materials", {**base, "synonyms": [s]}) for s in ("Citral", "a|b", "x\ny")]
    corpus += [("POST", "/api/materials", {**base, "notes": n}) for n in ("a\x00b", "\x1b[31m")]
    corpus += [("POST", "/api/materials", {**base, "unknown": 1}), ("POST", "/api/materials", [base]),
               ("POST", "/api/materials", "text"), ("POST", "/api/materials", None)]
    corpus += [("POST", "/api/vocabulary", body) for body in ({"term": t} for t in ("", "a|b", "x" * 61, 5, None))]
    corpus += [("POST", "/api/vocabulary", {"term": "ok-term", "family": ["x"]})]
    corpus += [("POST", "/api/flags", body) for body in (
        {"a": "Citral", "b": "Citral", "kind": "shape-alike smell-different"}, {"a": "Citral"},
        {"a": "Citral", "b": "Nothing", "kind": "x"}, {"a": [], "b": {}, "kind": 1},
        {"a": "Citral", "b": "Octanal", "kind": "bad kind"}, {"a": True, "b": False, "kind": "x"})]
    corpus += [("POST", "/api/jobs/recompute", body) for body in (
        {"kinds": "everything"}, {"engine": "dft"}, {"kinds": 1}, {"kinds": "all", "extra": 1})]
    for depth in (9, 100, 10_000, 100_000):
        for path in ("/api/materials", "/api/vocabulary", "/api/flags", "/api/jobs/recompute"):
            corpus.append(("POST", path, "[" * depth + "]" * depth))
    corpus += [("GET", f"/api/scorecard?{q}", None) for q in ("permutations=9999&resamples=10000", "k=0",
                                                                "permutations=abc", "observation=nope",
                                                                "permutations=1e309")]
    corpus += [("GET", f"/api/substitutes?{q}", None) for q in ("k=1000&material=Citral", "metric=smell&material=Citral",
                                                                  "weight=2&material=Citral", "material=" + "x" * 300,
                                                                  "mw_min=5&mw_max=1&material=Citral", "")]
    corpus += [("GET", f"/api/materials?{q}", None) for q in ("page=0", "page=-1", "per_page=100000", "q=" + "x" * 300)]
    return corpus


def test_hostile_inputs_are_refused_cleanly_and_change_nothing(app, catalogue, tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("OLIBRA_DB", raising=False)
    before = snapshot(catalogue)
    counts = {"CLI": 0, "import files": 0, "JSON and API": 0}
    tracebacks = server_errors = 0

    def run_cli(argv):
        nonlocal tracebacks
        code = main(argv if argv[:1] == ["--db"] else ["--db", catalogue.url, *argv])
        err = capsys.readouterr().err
        if "Traceback" in err or "internal error" in err:
            tracebacks += 1
        return code, err

    for argv in cli_corpus(tmp_path):
        try:
            code, err = run_cli(argv)
        except SystemExit as exc:  # argparse's own refusal, exit 2 with one line
            code, err = exc.code, capsys.readouterr().err
        assert code in (1, 2), (argv, code, err)
        assert err.strip() and "Traceback" not in err, (argv, err)
        counts["CLI"] += 1
    for index, (name, data) in enumerate(import_corpus()):
        path = tmp_path / f"{index}-{name}"
        path.write_bytes(data)
        code, err = run_cli(["import", str(path)])
        assert code in (1, 2), (name, data[:200], code, err)
        counts["import files"] += 1
    client = app.test_client()
    sign_in(client, "cora")
    token = csrf_token(client)
    for method, path, body in json_corpus():
        data = body if isinstance(body, str) and body.startswith("[") else json.dumps(body)
        response = client.open(path, method=method, data=None if method == "GET" else data,
                               content_type="application/json", headers={"X-CSRF-Token": token})
        server_errors += response.status_code >= 500
        assert 400 <= response.status_code < 500, (method, path, str(body)[:200], response.status_code,
                                                   response.text[:300])
        counts["JSON and API"] += 1
    changed = snapshot(catalogue) != before
    total = sum(counts.values())
    print(f"\nhostile inputs: {total} tried ({', '.join(f'{k} {v}' for k, v in counts.items())}); "
          f"{tracebacks} tracebacks, {server_errors} 5xx, catalogue rows changed: {'yes' if changed else 'none'}")
    assert tracebacks == 0 and server_errors == 0 and not changed
    assert total >= 400
