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
