"""The stamp cache: the stamps read back are the ones computed, a damaged cache file is replaced,
and any change to olibra's code names another cache file."""

import shutil
from pathlib import Path

import library
from library import stamps
from library.vibration import engines


def _as_rows(found):
    return {key: (s.engine_version, s.parameter_hash) for key, s in found.items()}


def test_cached_stamps_are_the_computed_ones(tmp_path, monkeypatch):
    monkeypatch.setenv("OLIBRA_CACHE", str(tmp_path))
    stamps.current_stamps.cache_clear()
    try:
        computed = stamps.computed_current_stamps()
        assert {kind for kind, _ in computed} == set(stamps.KINDS)
        first = stamps.current_stamps()  # computes and writes the cache file
        (written,) = tmp_path.glob("stamps-*.json")
        stamps.current_stamps.cache_clear()
        again = stamps.current_stamps()  # reads it back
        assert _as_rows(first) == _as_rows(again) == _as_rows(computed)
        # each stamp read back hashes like the one a plan computes, the form records are written with
        for engine in engines.keys():
            try:
                planned = stamps.stamps(stamps.Plan(vibration_engine=engine))
            except ImportError:
                continue  # engine not installed here
            for s in planned:
                assert again[(s.kind, s.engine_name)].parameter_hash == s.parameter_hash

        written.write_text("{not json", encoding="utf-8")  # damaged: ignored, computed again and rewritten
        stamps.current_stamps.cache_clear()
        assert _as_rows(stamps.current_stamps()) == _as_rows(computed)
        assert _as_rows(stamps._read(written)) == _as_rows(computed)
        assert [p.name for p in tmp_path.iterdir()] == [written.name]  # no temporary file left behind
    finally:
        stamps.current_stamps.cache_clear()


def test_a_change_to_any_source_file_names_another_cache_file(tmp_path):
    copy = tmp_path / "library"
    shutil.copytree(Path(library.__file__).parent, copy, ignore=shutil.ignore_patterns("__pycache__"))
    key = stamps.installation_key(copy)
    assert key == stamps.installation_key(Path(library.__file__).parent)  # same sources, same key
    settings = copy / "vibration" / "tunnelling.py"
    settings.write_text(settings.read_text(encoding="utf-8") + "\n# changed\n", encoding="utf-8")
    assert stamps.installation_key(copy) != key
