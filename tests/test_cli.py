"""The `olibra` command end to end: one clear line on errors, never a traceback."""

import json
import subprocess
import sys

import pytest

from library.cli import main

MIXED_CSV = """name,smiles,cas,odor,structure_source,cas_source,odor_source
Linalool,CC(C)=CCCC(C)(O)C=C,78-70-6,floral|citrus:0.4,from memory,from memory,from memory
Broken ring,C1CC,,,from memory,,
Vanillin,COc1cc(C=O)ccc1O,121-33-5,vanilla|sweet,from memory,from memory,from memory
"""


@pytest.fixture
def olibra(tmp_path, capsys, monkeypatch):
    """Run the command in-process against a fresh SQLite catalogue; returns (code, stdout, stderr)."""
    url = f"sqlite:///{tmp_path / 'cli.sqlite'}"
    monkeypatch.delenv("OLIBRA_DB", raising=False)

    def run(*args):
        code = main(["--db", url, *args])
        captured = capsys.readouterr()
        return code, captured.out, captured.err

    code, out, err = run("init")
    assert code == 0, err
    run("vocabulary", "add", "floral")
    for term in ("citrus", "vanilla", "sweet"):
        run("vocabulary", "add", term)
    return run


def test_add_show_list(olibra):
    code, out, _ = olibra("add", "CC(C)=CCCC(C)(O)C=C", "--name", "Linalool", "--cas", "78-70-6",
                          "--odor", "floral", "citrus:0.4", "--synonym", "linalol")
    assert code == 0 and "added #1 Linalool" in out
    code, out, _ = olibra("add", "C=CC(C)(O)CCC=C(C)C", "--name", "Same thing")
    assert code == 1 and "already present as #1 Linalool" in out
    code, out, _ = olibra("show", "linalol", "--history")
    assert code == 0
    assert "78-70-6" in out and "CDOSHBSSFJOMGT-UHFFFAOYSA-N" in out  # linalool InChIKey (from memory)
    assert "treated as a mixture of stereoisomers" in out and "history" in out
    code, out, _ = olibra("list", "--format", "json")
    assert json.loads(out)[0]["name"] == "Linalool"


def test_import_reports_each_row_and_keep_good(olibra, tmp_path):
    path = tmp_path / "mixed.csv"
    path.write_text(MIXED_CSV, encoding="utf-8")
    code, out, _ = olibra("import", str(path))
    assert code == 1
    assert "row 2: rejected: Broken ring: could not parse SMILES" in out
    assert "nothing was imported" in out
    assert olibra("list", "--format", "json")[1].strip() == "[]"
    code, out, _ = olibra("import", str(path), "--keep-good")
    assert "2 added, 0 already present, 1 rejected" in out
    code, out, _ = olibra("import", str(path), "--keep-good")
    assert "0 added, 2 already present, 1 rejected" in out


def test_export_to_file_and_stdout(olibra, tmp_path):
    olibra("add", "COc1cc(C=O)ccc1O", "--name", "Vanillin", "--odor", "vanilla")
    target = tmp_path / "out.sdf"
    code, _, err = olibra("export", "--format", "sdf", "--out", str(target))
    assert code == 0 and target.read_text().count("$$$$") == 1
    code, out, _ = olibra("export", "--format", "csv")
    assert out.splitlines()[1].startswith("Vanillin,")


@pytest.mark.parametrize("args,message", [
    (("add", "C1CC", "--name", "x"), "could not parse SMILES"),
    (("add", "CCO", "--name", "Ethanol", "--cas", "64-17-6"), "check digit"),
    (("show", "nothing"), "no material matches"),
    (("import", "/nonexistent.csv"), "does not exist"),
    (("vocabulary", "add"), "give the term"),
    (("status", "nothing", "retired"), "no material matches"),
])
def test_errors_are_one_line_with_exit_code_2(olibra, args, message):
    code, out, err = olibra(*args)
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("olibra: error:") and message in err
    assert "Traceback" not in err


def test_uninitialized_database_gives_advice(tmp_path, capsys):
    code = main(["--db", f"sqlite:///{tmp_path / 'empty.sqlite'}", "list"])
    assert code == 2 and "no olibra catalogue yet; create it first (run `olibra init`)" in capsys.readouterr().err


def test_console_script_runs_as_a_program(tmp_path):
    result = subprocess.run([sys.executable, "-m", "library.cli", "--db", "not a url", "list"],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 2
    assert "is not a database URL" in result.stderr and "Traceback" not in result.stderr


def test_health_page(tmp_path):
    from library.catalogue.database import initialize
    from webui import create_app

    url = f"sqlite:///{tmp_path / 'web.sqlite'}"
    initialize(url).dispose()
    client = create_app({"OLIBRA_DB": url, "TESTING": True}).test_client()
    response = client.get("/health")
    assert response.status_code == 200 and response.get_json() == {"status": "ok", "materials": 0}
