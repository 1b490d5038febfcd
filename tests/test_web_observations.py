"""Observation data sets in the web interface and the command line: import with the per-row report,
list, replace and delete (curators only; audited), on a real catalogue file and PostgreSQL."""

from __future__ import annotations

import io
import json

import pytest
from sqlalchemy import select

from library import cli
from library.catalogue import observations
from library.catalogue.models import AuditEntry
from web_helpers import on_both_backends

PANEL_CSV = b"material,citrus,floral\nCitral,8.5,1\nLinalool,3,7.5\nOctanal,6,\n"  # invented demo values


@pytest.fixture
def catalogue(web_catalogue):
    return web_catalogue


def upload(client, data: bytes, **fields):
    form = {"set_name": "panel-a", "kind": "panel profile", "source": "demo", "csrf_token": client.token,
            "file": (io.BytesIO(data), "panel.csv"), **fields}
    return client.post("/observations", data=form, content_type="multipart/form-data")


@on_both_backends
def test_curator_imports_replaces_and_deletes_a_data_set(curator, reader, catalogue):
    stored = upload(curator, PANEL_CSV, unit="intensity 0-10")
    assert stored.status_code == 200, stored.text
    assert "data set &#39;panel-a&#39;: 5 value(s) for 3 material(s) stored" in stored.text
    listing = reader.get("/observations")
    assert listing.status_code == 200 and "panel-a" in listing.text and "intensity 0-10" in listing.text
    assert "Delete</button>" not in listing.text and 'id="observation-form"' not in listing.text  # readers only read

    again = upload(curator, PANEL_CSV)
    assert again.status_code == 400 and "already exists" in again.text
    bad = upload(curator, b"material,citrus\nCitral,lots\nNo such material,2\n", replace="y")
    assert bad.status_code == 422
    # every problem by row, at once, and nothing replaced
    assert "row 1: value &#39;lots&#39; is not a number" in bad.text and "row 2: no material matches" in bad.text
    with catalogue.reading() as session:
        (summary,) = observations.set_summaries(session)
    assert (summary.values, summary.materials, summary.unit) == (5, 3, "intensity 0-10")

    replaced = upload(curator, b"material,variable,value\nCitral,citrus,9\n", replace="y")
    assert replaced.status_code == 200
    with catalogue.reading() as session:
        (summary,) = observations.set_summaries(session)
    assert (summary.values, summary.materials) == (1, 1)

    assert reader.post(f"/observations/{summary.id}/delete", data={"csrf_token": reader.token}).status_code == 403
    deleted = curator.post(f"/observations/{summary.id}/delete", data={"csrf_token": curator.token},
                           follow_redirects=True)
    assert deleted.status_code == 200 and "Deleted data set &#39;panel-a&#39; (1 values)" in deleted.text
    assert curator.post(f"/observations/{summary.id}/delete", data={"csrf_token": curator.token}).status_code == 404
    with catalogue.reading() as session:
        assert observations.set_summaries(session) == []
        actions = [a for a, in session.execute(select(AuditEntry.action).where(
            AuditEntry.entity == "observation_set").order_by(AuditEntry.id))]
    assert actions == ["import", "import", "delete"]


def test_command_line_lists_and_deletes_data_sets(catalogue, tmp_path, capsys):
    path = tmp_path / "panel.csv"
    path.write_bytes(PANEL_CSV)
    assert cli.main(["--db", catalogue.url, "observations", "import", str(path), "--set", "panel-a",
                     "--source", "demo"]) == 0
    capsys.readouterr()
    assert cli.main(["--db", catalogue.url, "observations", "list", "--format", "json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)
    assert (row["name"], row["values"], row["materials"], row["source"]) == ("panel-a", 5, 3, "demo")
    assert cli.main(["--db", catalogue.url, "observations", "delete", "panel-a"]) == 0
    assert "deleted (5 value(s))" in capsys.readouterr().out
    assert cli.main(["--db", catalogue.url, "observations", "delete", "panel-a"]) != 0
    assert "no data set named 'panel-a'" in capsys.readouterr().err
