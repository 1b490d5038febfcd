"""The `olibra` command end to end: one clear line on errors, never a traceback."""

import argparse
import json
import os
import subprocess
import sys

import pytest

from library.cli import COMMANDS, build_parser, main

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
    run.url = url

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


# Libraries that cost most of the start-up time (RDKit, SciPy, scikit-learn, SQLAlchemy, Alembic,
# Flask, Matplotlib, tblite, pandas) and olibra's own heavy layers.
HEAVY_MODULES = {"rdkit", "numpy", "scipy", "sklearn", "sqlalchemy", "alembic", "flask", "matplotlib", "tblite",
                 "pandas", "webui", "library.search", "library.catalogue.database", "library.vibration"}


def modules_loaded_by(argv: list[str], *, cache_folder=None) -> set[str]:
    """The modules loaded after `olibra ARGV` ran in a fresh interpreter (help output and exit included)."""
    environment = dict(os.environ, **({"OLIBRA_CACHE": str(cache_folder)} if cache_folder else {}))
    code = ("import json, sys\nfrom library.cli import main\n"
            "try:\n    main(sys.argv[1:])\nexcept SystemExit:\n    pass\n"
            "print(json.dumps(sorted(sys.modules)), file=sys.stderr)\n")
    result = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True, timeout=120,
                            env=environment)
    return set(json.loads(result.stderr.strip().splitlines()[-1]))


def test_help_loads_no_heavy_library():
    loaded = modules_loaded_by(["--help"])
    assert "library.cli" in loaded
    assert not loaded & HEAVY_MODULES  # a submodule loads its package, so package names suffice


def test_show_loads_no_search_web_or_plotting_library(olibra, tmp_path):
    olibra("add", "CC(C)=CCCC(C)(O)C=C", "--name", "Linalool")
    first = modules_loaded_by(["--db", olibra.url, "show", "Linalool"], cache_folder=tmp_path / "cache")
    assert "library.catalogue.database" in first  # it did open the catalogue
    slow = {"sklearn", "flask", "matplotlib", "tblite", "pandas", "webui", "library.search", "scipy.stats",
            "scipy.signal", "scipy.optimize"}
    assert not first & slow
    assert list((tmp_path / "cache").glob("stamps-*.json"))  # the first run computed the stamps and kept them
    # later runs read the stamps back, so neither NumPy nor an engine is loaded to show a material
    again = modules_loaded_by(["--db", olibra.url, "show", "Linalool"], cache_folder=tmp_path / "cache")
    assert "library.catalogue.database" in again
    assert not again & (slow | {"numpy", "scipy", "library.shape", "library.conformers", "library.vibration"})


def test_every_command_is_declared_with_its_help_and_registered():
    parser = build_parser(complete=True)  # raises when a module registers a command not in COMMANDS or misses one
    commands = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    assert list(commands.choices) == list(COMMANDS)
    listing = parser.format_help()
    for name, (_, help_text) in COMMANDS.items():
        assert help_text.split()[0] in listing
        chosen = commands.choices[name]
        nested = [a for a in chosen._actions if isinstance(a, argparse._SubParsersAction)]
        assert chosen.get_default("handler") or nested, name
    with pytest.raises(ValueError, match="must be declared in COMMANDS"):
        commands.add_parser("not-a-command")


def test_a_command_help_registers_its_options_on_use(capsys):
    with pytest.raises(SystemExit) as stopped:
        main(["search", "--help"])
    assert stopped.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: olibra search") and "--metric" in out and "--rerank-depth" in out
