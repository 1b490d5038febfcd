"""The pair classes page on a computed catalogue (real SQLite file, real index, Flask test client)."""

from __future__ import annotations

import pytest

from web_helpers import READER, computed_app, signed_in_client


@pytest.fixture
def pairs_app(computed_template, tmp_path):
    yield from computed_app(computed_template, tmp_path)


def test_pair_classes_page_lists_classes_and_tests_one(pairs_app):
    client = signed_in_client(pairs_app, READER)
    page = client.get("/pairs")
    assert page.status_code == 200
    # (R)/(S)-carvone are the catalogue's one enantiomer pair (seed file notes)
    assert "enantiomers</td><td class=\"num\">1<" in page.text
    tested = client.get("/pairs?class=enantiomers&observation=descriptors")
    assert tested.status_code == 200
    assert "(R)-(-)-Carvone / (S)-(+)-Carvone" in tested.text and "Benjamini-Hochberg" in tested.text
    missing = client.get("/pairs?class=no-such-class")
    assert missing.status_code == 400 and "no pair class named" in missing.text
