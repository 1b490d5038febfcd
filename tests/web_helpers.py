"""Helpers shared by the web tests (Flask test client and browser): accounts, CSRF tokens, signing in, and
the computed search catalogue. Imported by name; the fixtures built on them are in conftest.py."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import pytest
from sqlalchemy import func, select

from library.catalogue import accounts, curation, transfer
from library.catalogue.database import initialize
from library.catalogue.models import Material
from webui.auth import SESSION_ENDPOINTS, WRITE_METHODS

from catalogue_helpers import compute_missing_records, seed_rows

PASSWORD = "correct horse battery"
READER, CURATOR = "rhea", "cora"  # the accounts every web test catalogue has
# Seed materials of the computed search catalogue: a mirror-image pair (the carvones) and an
# isotopologue pair (benzaldehyde and its d6 form), the pairs the two hypotheses treat differently.
SEARCH_SEED_NAMES = ("Citral", "Geranyl nitrile", "Citronellal", "Citronellyl nitrile", "(R)-(-)-Carvone",
                     "(S)-(+)-Carvone", "Benzaldehyde", "Benzaldehyde-d6 (demo)", "Octanal", "Octanenitrile",
                     "Eugenol", "Vanillin")


def csrf_token(client) -> str:
    """The CSRF token the sign-in page hands this client's session."""
    return re.search(r'name="csrf-token" content="([^"]+)"', client.get("/sign-in").text).group(1)


def sign_in(client, username: str) -> str:
    """Sign `client` in through the form; returns the session's CSRF token for later writes."""
    token = csrf_token(client)
    response = client.post("/sign-in", data={"username": username, "password": PASSWORD, "csrf_token": token})
    assert response.status_code == 302, response.text
    return csrf_token(client)


def signed_in_client(app, username: str):
    """A new test client of `app` signed in as `username`, its CSRF token in `.token`."""
    client = app.test_client()
    client.token = sign_in(client, username)
    return client


def write_requests(app):
    """(endpoint, method, url) of every state-changing route except signing in and out."""
    adapter = app.url_map.bind("localhost")
    found = []
    for rule in app.url_map.iter_rules():
        for method in sorted(rule.methods & WRITE_METHODS):
            if rule.endpoint in SESSION_ENDPOINTS:
                continue
            found.append((rule.endpoint, method, adapter.build(rule.endpoint, {a: 1 for a in rule.arguments},
                                                               method=method)))
    return found


def add_web_accounts(catalogue) -> None:
    with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
        accounts.create_user(session, READER, PASSWORD, "reader")
        accounts.create_user(session, CURATOR, PASSWORD, "curator")


def computed_catalogue_template(tmp_path_factory) -> Path:
    """A SQLite catalogue of SEARCH_SEED_NAMES with current records and the web accounts; built once per
    test session (the web search tests and the browser search tests share it) and copied by each user."""
    path = tmp_path_factory.getbasetemp() / "web-search-template" / "catalogue.sqlite"
    if path.exists():
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    building = path.with_suffix(".building")
    catalogue = initialize(f"sqlite:///{building}")
    try:
        with catalogue.transaction() as session:
            curation.load_vocabulary(session)
            report = transfer.import_rows(session, seed_rows(SEARCH_SEED_NAMES), actor="seed")
            assert report.committed and report.count("added") == len(SEARCH_SEED_NAMES)
        job = compute_missing_records(catalogue, processes=2)
        assert job.done == len(SEARCH_SEED_NAMES)
        add_web_accounts(catalogue)
    finally:
        catalogue.dispose()
    building.rename(path)
    return path


# The web test catalogue: real seed materials, the two accounts (a copy per test; PostgreSQL loads its own).
SEED_NAMES = ("(R)-(+)-Limonene", "(S)-(-)-Limonene", "Citral", "Geranial", "Neral", "Octanal",
              "Linalool", "Eugenol")
BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
on_both_backends = pytest.mark.parametrize("backend", BACKENDS, indirect=True)


def load_web_catalogue(url: str, names=SEED_NAMES):
    catalogue = initialize(url)
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
        report = transfer.import_rows(session, seed_rows(names), actor="seed")
        assert report.committed and report.count("added") == len(names)
    add_web_accounts(catalogue)
    return catalogue


def material_count(catalogue) -> int:
    with catalogue.reading() as session:
        return session.scalar(select(func.count()).select_from(Material))


def material_id(catalogue, name: str) -> int:
    with catalogue.reading() as session:
        return session.scalar(select(Material.id).where(Material.preferred_name == name))


class FormValues(HTMLParser):
    """The values a browser would submit from a page's form (inputs, textareas, selected options)."""

    def __init__(self):
        super().__init__()
        self.values: dict[str, str] = {}
        self._textarea: str | None = None
        self._select: str | None = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "input" and attrs.get("name"):
            if attrs.get("type") == "checkbox":
                if "checked" in attrs:
                    self.values[attrs["name"]] = attrs.get("value", "y")
            else:
                self.values[attrs["name"]] = attrs.get("value", "")
        elif tag == "textarea":
            self._textarea = attrs["name"]
            self.values[self._textarea] = ""
        elif tag == "select":
            self._select = attrs["name"]
        elif tag == "option" and self._select and "selected" in attrs:
            self.values[self._select] = attrs["value"]

    def handle_endtag(self, tag):
        if tag == "textarea":
            self._textarea = None
        elif tag == "select":
            self._select = None

    def handle_data(self, data):
        if self._textarea:
            self.values[self._textarea] += data


def edit_form(client, material) -> dict:
    parser = FormValues()
    parser.feed(client.get(f"/materials/{material}/edit").text)
    values = parser.values
    values["synonyms"] = values["synonyms"].lstrip("\n")
    values.pop("csrf-token", None)
    return values


def computed_app(template: Path, folder: Path, **config):
    """Yields the web app (testing mode) on a copy of the computed template in `folder`, with `config`
    added, and closes its catalogues afterwards (use with `yield from` in a fixture)."""
    import shutil

    from library.catalogue.database import Catalogue
    from webui import create_app

    target = folder / "catalogue.sqlite"
    shutil.copyfile(template, target)
    catalogue = Catalogue(f"sqlite:///{target}")
    app = create_app({"OLIBRA_DB": catalogue.url, "TESTING": True,
                      "OLIBRA_INDEX_CACHE_DIR": str(folder / "index-cache"), **config})
    yield app
    catalogue.dispose()
    state = app.extensions["olibra"]
    if state._catalogue is not None:
        state._catalogue.dispose()
