"""Bounded request cost: limits named in a 400, heavy searches in a small bounded pool, a time limit.

Reproductions: `GET /api/scorecard?permutations=9999&resamples=10000` ran for minutes; four concurrent
shape searches tied up every server thread. Speed itself is measured by `olibra bench load`, never here.
"""

from __future__ import annotations

import threading

import pytest

from library.catalogue.database import Catalogue
from library.search import substitutes
from webui import create_app
from webui.heavy import HeavyPool, ServerBusy, TooSlow

from web_helpers import PASSWORD, computed_app


@pytest.fixture
def limited_app(computed_template, tmp_path):
    yield from computed_app(computed_template, tmp_path, OLIBRA_HEAVY_WORKERS=1, OLIBRA_HEAVY_QUEUE=0)


def reader(app):
    client = app.test_client()
    token = client.get("/api/session").json["csrf_token"]
    assert client.post("/api/session", json={"username": "rhea", "password": PASSWORD},
                       headers={"X-CSRF-Token": token}).status_code == 200
    return client


@pytest.mark.parametrize("query,message", [
    ("permutations=9999&resamples=10000", "permutations 9999 is above this server's limit of 999 per request"),
    ("resamples=10000", "bootstrap resamples 10000 is above this server's limit of 1000 per request"),
    ("k=51", "k of precision at k 51 is above this server's limit of 50"),
    ("permutations=0", "outside the allowed 1 or more"),
])
def test_scorecard_costs_above_the_limits_are_refused_at_once(limited_app, query, message):
    response = reader(limited_app).get(f"/api/scorecard?{query}")
    assert response.status_code == 400 and message in response.json["error"]["message"]


@pytest.mark.parametrize("path,message", [
    ("/api/substitutes?material=Citral&k=101", "outside the allowed 1 to 100"),
    ("/api/disagreements?k=101", "outside the allowed 1 to 100"),
    ("/api/disagreements?per_page=201", "outside the allowed 1 to 200"),
    ("/api/materials?per_page=201", "from 1 to 200"),
])
def test_other_request_sizes_are_bounded(limited_app, path, message):
    response = reader(limited_app).get(path)
    assert response.status_code == 400 and message in response.json["error"]["message"]


def test_a_heavy_request_beyond_the_pool_gets_503_while_cheap_reads_go_on(limited_app, monkeypatch):
    release, running = threading.Event(), threading.Event()
    original = substitutes.find_substitutes

    def held(*args, **kwargs):
        if kwargs.get("metric") == "shape":
            running.set()
            assert release.wait(30)
        return original(*args, **kwargs)

    monkeypatch.setattr(substitutes, "find_substitutes", held)
    first, second, cheap = reader(limited_app), reader(limited_app), reader(limited_app)
    answers = {}
    thread = threading.Thread(target=lambda: answers.setdefault(
        "first", first.get("/api/substitutes?material=Citral&metric=shape&k=3")))
    thread.start()
    assert running.wait(30)
    busy = second.get("/api/substitutes?material=Octanal&metric=shape&k=3")
    assert busy.status_code == 503 and busy.headers["Retry-After"] == "5"
    assert "busy with 1 heavy searches" in busy.json["error"]["message"]
    assert cheap.get("/api/materials?q=citr").status_code == 200  # not queued behind the heavy search
    assert cheap.get("/api/substitutes?material=Octanal&metric=blend&k=3").status_code == 200
    release.set()
    thread.join()
    assert answers["first"].status_code == 200 and len(answers["first"].json["candidates"]) == 3


def test_the_pool_bounds_waiting_and_time_and_keeps_a_slow_result_for_a_retry(limited_app):
    pool = HeavyPool(workers=1, queue=1, time_limit_s=0.2)
    gate = threading.Event()
    calls = []

    def slow():
        calls.append(1)
        assert gate.wait(30)
        return "scorecard result"

    with limited_app.app_context():
        with pytest.raises(TooSlow, match="longer than this server's limit of 0.2 s"):
            pool.run("the scorecard", slow, key="card")
        with pytest.raises(TooSlow):  # the same key waits on the same work, not a second copy
            pool.run("the scorecard", slow, key="card")
        with pytest.raises(TooSlow):  # unkeyed work waiting behind it takes the one queue place
            pool.run("the comparison", slow)
        with pytest.raises(ServerBusy, match="at most 1 run at once and 1 wait"):
            pool.run("the shape search", lambda: "never run")
        gate.set()
        assert pool.run("the scorecard", slow, key="card") == "scorecard result"
    pool._executor.shutdown(wait=True)
    assert len(calls) == 2  # the keyed work once, the unkeyed once
