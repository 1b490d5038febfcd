"""README's first command end to end: `olibra demo` builds the seed catalogue, computes every
record, prints a first substitutes search and serves the web interface on 127.0.0.1."""

import os
import re
import signal
import subprocess
import sys
import time
import urllib.request

import pytest


@pytest.mark.slow
def test_demo_builds_the_catalogue_searches_and_serves(tmp_path):
    environment = dict(os.environ, OLIBRA_CACHE=str(tmp_path / "cache"), PYTHONUNBUFFERED="1")
    environment.pop("OLIBRA_DB", None)
    process = subprocess.Popen(
        [sys.executable, "-m", "library.cli", "demo", "--folder", str(tmp_path / "demo"), "--port", "0"],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=environment)
    lines = []
    address = None
    deadline = time.monotonic() + 600
    try:
        for line in process.stdout:
            lines.append(line)
            found = re.search(r"on (http://127\.0\.0\.1:\d+/)", line)
            if found:
                address = found.group(1)
                break
            assert time.monotonic() < deadline, "demo took more than 10 minutes"
        output = "".join(lines)
        assert address, output
        with urllib.request.urlopen(address + "health", timeout=30) as response:
            assert response.status == 200 and b'"status":"ok"' in response.read().replace(b" ", b"")
    finally:
        process.send_signal(signal.SIGINT)
        try:
            process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
    assert re.search(r"seed catalogue: \d{3} added", output)
    assert re.search(r"(\d+) of \1 material\(s\) computed", output), output  # every material, none failed
    assert "0 failed" in output
    assert "substitutes for Citral by blend" in output and "Geranyl nitrile" in output
    assert "caution:" in output and "sign in as 'demo' with password" in output
    assert "Traceback" not in output

    # running it again reuses what is computed
    again = subprocess.run(
        [sys.executable, "-m", "library.cli", "demo", "--folder", str(tmp_path / "demo"), "--no-serve"],
        capture_output=True, text=True, env=environment, timeout=300)
    assert again.returncode == 0, again.stderr
    assert "already present" in again.stdout and "all up to date" in again.stdout

    # DEMO.md: every command it shows runs on this catalogue, and the claims it makes hold
    import json
    import shlex
    from pathlib import Path

    import library

    guide = (Path(library.__file__).parent / "seed_catalog" / "DEMO.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```\n(.*?)```", guide, re.DOTALL)
    commands = [shlex.split(line)[1:] for block in blocks for line in block.splitlines()
                if line.startswith("olibra ") and not line.startswith("olibra demo")]
    assert len(commands) >= 8
    environment["OLIBRA_DB"] = f"sqlite:///{tmp_path / 'demo' / 'catalogue.sqlite'}"

    def olibra(*argv):
        done = subprocess.run([sys.executable, "-m", "library.cli", *argv], capture_output=True, text=True,
                              env=environment, timeout=300)
        assert done.returncode == 0 and "Traceback" not in done.stderr, (argv, done.stderr)
        return done.stdout

    shown = {tuple(argv): olibra(*argv) for argv in commands}

    def hits(*argv):
        return json.loads(olibra(*argv, "--format", "json"))

    # step 2: citral's own isomers left out, its nitriles in the first ten; no aldehyde for bleach
    citral = [h["name"] for h in hits("search", "Citral", "--metric", "blend", "--weight", "0.5")]
    assert "Neral" not in citral and "Geranial" not in citral
    assert {"Geranyl nitrile", "Citronellyl nitrile"} <= set(citral[:10])
    assert all("aldehyde" not in h["groups"]
               for h in hits("search", "Citral", "--stable-in", "hypochlorite bleach"))
    bands = shown[("compare", "Citral", "Geranyl nitrile")]
    assert re.search(r"only in the first\s+\[C=O\]", bands) and re.search(r"only in the second\s+\[C≡N\]", bands)
    # step 3: the prohibited lily aldehyde relatives stay out; the second search has no aldehyde
    lily = [h["name"] for h in hits("search", "2-(4-tert-Butylbenzyl)propanal")]
    assert "Hydroxyisohexyl 3-cyclohexene carboxaldehyde" not in lily
    assert all("aldehyde" not in h["groups"]
               for h in hits("search", "2-(4-tert-Butylbenzyl)propanal", "--without-group", "aldehyde"))
    assert "prohibited" in olibra("restriction", "list", "2-(4-tert-Butylbenzyl)propanal")
    # step 5: the carvone mirror pair and a deuterated demo entry are among the disagreements
    listed = shown[("disagreements",)]
    assert "(S)-(+)-Carvone" in listed and "Linalool-d18 (demo)" in listed
