"""Writers wait for each other instead of failing, and a lost race gets "changed since you opened it".

Reproductions: web writes answered 503 "database is locked" within milliseconds while another writer
was busy (a read-then-write transaction cannot wait on SQLite once another writer has committed); two
simultaneous edits of one material gave the loser "database is locked"; a long import held the write
lock for its whole run; a writer held up past the busy timeout got a raw driver error.
"""

from __future__ import annotations

import threading
import time

import pytest
from flask import request

from library.catalogue import database, transfer
from library.catalogue.models import AuditEntry, Material, OdorDescriptor
from library.seed_catalog import MATERIALS_FILE
from webui import curation as curation_views

from web_helpers import csrf_token, edit_form, material_id, on_both_backends, sign_in
from catalogue_helpers import seed_rows


@pytest.fixture
def catalogue(web_catalogue):
    """A copy of the web test catalogue (seed materials and the two accounts)."""
    return web_catalogue


def hold_write_lock(catalogue, seconds: float, started: threading.Event) -> threading.Thread:
    """Another writer: takes the write lock, writes, keeps it `seconds`, then commits."""
    def run():
        with catalogue.transaction() as session:
            session.add(AuditEntry(actor="other writer", action="test", entity="test"))
            session.flush()
            started.set()
            time.sleep(seconds)
    thread = threading.Thread(target=run)
    thread.start()
    return thread


def test_a_web_write_waits_for_another_writer_instead_of_failing(app, catalogue):
    holders = []

    @app.before_request
    def another_writer_commits_after_this_request_read():
        # Runs after the sign-in check has read the user (a read transaction is open by now).
        if request.path == "/api/vocabulary" and not holders:
            started = threading.Event()
            holders.append(hold_write_lock(catalogue, 0.5, started))
            started.wait(5)

    client = app.test_client()
    sign_in(client, "cora")
    token = csrf_token(client)

    response = client.post("/api/vocabulary", json={"term": "petrichor"}, headers={"X-CSRF-Token": token})
    holders[0].join()
    assert response.status_code == 201, response.text
    with catalogue.reading() as session:
        assert session.query(OdorDescriptor).filter_by(term="petrichor").count() == 1


@on_both_backends
def test_of_two_simultaneous_edits_the_second_is_told_the_material_changed(app, catalogue, monkeypatch):
    neral = material_id(catalogue, "Neral")
    clients = [app.test_client() for _ in range(2)]
    forms = []
    for client in clients:
        sign_in(client, "cora")
        forms.append(edit_form(client, neral))  # both open the form on the same version
    forms[0]["notes"], forms[1]["notes"] = "first editor", "second editor"
    original = curation_views.apply_changes
    inside = threading.Event()

    def slow_apply(*args, **kwargs):
        changed = original(*args, **kwargs)
        if not inside.is_set():
            inside.set()
            time.sleep(0.5)  # hold the write a moment, so the other edit arrives meanwhile
        return changed

    monkeypatch.setattr(curation_views, "apply_changes", slow_apply)
    results = [None, None]

    def edit(index):
        results[index] = clients[index].post(f"/materials/{neral}/edit", data=forms[index])

    first = threading.Thread(target=edit, args=(0,))
    first.start()
    assert inside.wait(10)
    second = threading.Thread(target=edit, args=(1,))
    second.start()
    first.join()
    second.join()
    assert results[0].status_code == 302
    assert results[1].status_code == 400
    assert "Someone changed this material after you opened the form" in results[1].text
    assert "locked" not in results[1].text
    with catalogue.reading() as session:
        assert session.get(Material, neral).notes == "first editor"


def test_an_import_holds_no_lock_while_it_standardizes(app, catalogue):
    client = app.test_client()
    sign_in(client, "cora")
    token = csrf_token(client)
    rows = transfer.read_rows(MATERIALS_FILE)[:40]
    answers = []

    def web_write_during_import(_step):
        if not answers:
            answers.append(client.post("/api/vocabulary", json={"term": "petrichor"},
                                       headers={"X-CSRF-Token": token}).status_code)

    report = transfer.import_into(catalogue, rows, keep_good=True, progress=web_write_during_import)
    assert answers == [201]
    assert report.count("added") + report.count("present") == 40


def test_a_writer_held_up_too_long_gets_a_clear_message(app, catalogue, monkeypatch, capsys):
    monkeypatch.setattr(database, "SQLITE_BUSY_TIMEOUT_MS", 200)
    holder = database.Catalogue(catalogue.url)  # connections opened from now on wait 0.2 s
    web = app.extensions["olibra"]
    web._catalogue = database.Catalogue(catalogue.url)
    client = app.test_client()
    sign_in(client, "cora")
    token = csrf_token(client)
    started = threading.Event()
    thread = hold_write_lock(holder, 3.0, started)
    assert started.wait(5)
    try:
        response = client.post("/api/vocabulary", json={"term": "petrichor"}, headers={"X-CSRF-Token": token})
        assert response.status_code == 503 and response.headers["Retry-After"] == "5"
        message = response.json["error"]["message"]
        assert "another writer" in message and "more than 0.2 s" in message and "nothing was changed" in message
        with pytest.raises(database.CatalogueBusy, match=r"held it for more than 0.2 s.*\(3 attempts\)"):
            transfer.import_into(database.Catalogue(catalogue.url), seed_rows(("Octanal",)))
    finally:
        thread.join()
    holder.dispose()


@on_both_backends
def test_two_coordinators_and_a_curator_at_once_lose_and_duplicate_nothing(app, catalogue, tmp_path):
    import os
    import subprocess
    import sys

    from library import computations
    from library.catalogue import records
    from library.catalogue.models import ComputedRecord
    from sqlalchemy import func, select
    from web_helpers import SEED_NAMES

    names = list(SEED_NAMES)
    overlapping = (names[:5], names[3:])  # two coordinators, two materials in common
    environment = dict(os.environ, OLIBRA_CACHE=str(tmp_path / "cache"))
    coordinators = [subprocess.Popen([sys.executable, "-m", "library.cli", "--db", catalogue.url, "compute", "all",
                                      *keys, "--processes", "1", "--quiet"], stdout=subprocess.PIPE,
                                     stderr=subprocess.PIPE, text=True, env=environment) for keys in overlapping]
    client = app.test_client()
    sign_in(client, "cora")
    ids = {name: material_id(catalogue, name) for name in names}
    edits, while_computing = [], 0
    for round_number in range(60):  # a curator keeps editing every material while both compute
        running = any(p.poll() is None for p in coordinators)
        if not running and round_number:
            break
        for name, number in ids.items():
            form = edit_form(client, number)
            form["notes"] = f"edited in round {round_number}"
            edits.append(client.post(f"/materials/{number}/edit", data=form).status_code)
            while_computing += running
    outputs = [p.communicate(timeout=600) for p in coordinators]
    for process, (out, err) in zip(coordinators, outputs):
        assert process.returncode == 0 and "Traceback" not in err, (out, err)
    assert while_computing and set(edits) == {302}, edits  # every edit went through, none told to retry
    stamps = computations.stamps(computations.Plan())
    with catalogue.reading() as session:
        per_record = session.execute(select(ComputedRecord.material_id, ComputedRecord.kind, func.count())
                                     .group_by(ComputedRecord.material_id, ComputedRecord.kind)).all()
        assert {(m, k) for m, k, _ in per_record} == {(i, s.kind) for i in ids.values() for s in stamps}
        assert {n for _, _, n in per_record} == {1}  # no record lost or duplicated
        for stamp in stamps:
            assert set(records.record_state(session, stamp).values()) == {"current"}
        notes = {session.get(Material, i).notes for i in ids.values()}
    assert len(notes) == 1 and notes.pop().startswith("edited in round")  # the last round's edit of each stands
