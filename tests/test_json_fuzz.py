"""Every JSON endpoint answers malformed bodies with a 400 naming the problem, never a 5xx.

Reproductions (deeply nested bodies raised RecursionError; a dict for `odors` or `notes`, an int for
`synonyms` or `cas`, a list for `family` gave 500 on POST /api/materials), then a hypothesis fuzz test
that sends random JSON bodies and query arguments to every rule under /api of the real app.
"""

from __future__ import annotations

import json

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from library.catalogue.models import Material

from web_helpers import csrf_token, sign_in

JSON_ENDPOINTS = [("POST", "/api/session"), ("POST", "/api/materials"), ("POST", "/api/vocabulary"),
                  ("POST", "/api/jobs/recompute"), ("POST", "/api/flags")]


@pytest.fixture
def catalogue(web_catalogue):
    """A copy of the web test catalogue (seed materials and the two accounts)."""
    return web_catalogue


@pytest.fixture
def curator(app):
    client = app.test_client()
    sign_in(client, "cora")
    return client, csrf_token(client)


def send(client, token, method, path, body: bytes | str, query=None):
    return client.open(path, method=method, data=body, query_string=query, content_type="application/json",
                       headers={"X-CSRF-Token": token})


@pytest.mark.parametrize("method,path", JSON_ENDPOINTS)
@pytest.mark.parametrize("depth", [9, 1000, 100_000])
def test_deeply_nested_bodies_are_refused(curator, method, path, depth):
    client, token = curator
    for body in ("[" * depth + "]" * depth, '{"a":' * depth + "1" + "}" * depth):
        response = send(client, token, method, path, body)
        assert response.status_code == 400, response.text
        assert "levels deep" in response.json["error"]["message"]


@pytest.mark.parametrize("field,value,wanted", [
    ("odors", {"citrus": 1}, "a list of strings or a string"),
    ("notes", {"a": "b"}, "a string or null"),
    ("synonyms", 7, "a list of strings or a string"),
    ("synonyms", ["ok", 3], "a list of strings or a string"),
    ("cas", 78706, "a string or null"),
    ("family", ["citrus"], "a string or null"),
    ("name", None, "a string"),
    ("structure", True, "a string"),
])
def test_wrong_field_types_are_named(curator, catalogue, field, value, wanted):
    client, token = curator
    with catalogue.reading() as session:
        before = session.query(Material).count()
    body = {"structure": "O=c1ccc2ccccc2o1", "name": "Coumarin", field: value}
    response = send(client, token, "POST", "/api/materials", json.dumps(body))
    assert response.status_code == 400
    assert f"field '{field}' must be {wanted}" in response.json["error"]["message"]
    with catalogue.reading() as session:
        assert session.query(Material).count() == before


def test_a_body_that_is_not_json_is_refused(curator):
    client, token = curator
    for body in (b"{", b"\xff\xfe", b"NaN", b'{"a": 1}{', b""):
        response = send(client, token, "POST", "/api/materials", body)
        assert response.status_code == 400, body


_scalars = st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=False), st.text(max_size=30))
_json = st.recursive(_scalars, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                       st.dictionaries(st.text(max_size=10), inner, max_size=4)),
                     max_leaves=12)
_field_names = st.sampled_from(["structure", "name", "synonyms", "cas", "family", "odors", "notes", "source",
                                "username", "password", "term", "description", "kinds", "engine", "a", "b",
                                "kind", "note", "q", "page", "per_page", "material", "metric", "k", "weight",
                                "permutations", "resamples", "observation"])
_objects = st.dictionaries(_field_names, _json, max_size=6)
_bodies = st.one_of(_objects, _json)


def _rules(app):
    rules = []
    for rule in app.url_map.iter_rules():
        if not rule.rule.startswith("/api/"):
            continue
        path = rule.rule.replace("<int:material_id>", "1").replace("<int:job_id>", "1")
        for method in sorted(rule.methods - {"HEAD", "OPTIONS"}):
            if (method, path) != ("DELETE", "/api/session"):  # signing out would only leave 401s
                rules.append((method, path))
    return rules


def _would_start_a_job(method, path, body) -> bool:
    if (method, path) != ("POST", "/api/jobs/recompute") or not isinstance(body, dict):
        return False
    return set(body) <= {"kinds", "engine"} and body.get("kinds", "all") in ("all", "shape", "vibration") \
        and body.get("engine", "mmff") in ("mmff", "gfn2")


def test_random_json_to_every_api_endpoint_never_gets_a_5xx(app, catalogue):
    client = app.test_client()
    sign_in(client, "cora")
    token = csrf_token(client)
    rules = _rules(app)
    assert len(rules) >= 15, rules
    tried: dict[tuple, int] = {}

    @settings(max_examples=600, deadline=None, suppress_health_check=list(HealthCheck), database=None)
    @given(st.sampled_from(rules), _bodies, st.dictionaries(_field_names, st.text(max_size=20), max_size=4))
    def fuzz(rule, body, query):
        method, path = rule
        if _would_start_a_job(method, path, body):
            return
        response = send(client, token, method, path, json.dumps(body), query=query)
        assert response.status_code < 500, (method, path, body, query, response.text[:300])
        tried[rule] = tried.get(rule, 0) + 1

    fuzz()
    print(f"\nJSON fuzz: {sum(tried.values())} requests over {len(tried)} endpoint methods, no 5xx")
    assert len(tried) == len(rules)
