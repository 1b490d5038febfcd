"""Receptor panels: definitions checked, stored and audited in a real catalogue (SQLite and
PostgreSQL), activation profiles from real tunnelling records through the CLI and the web pages,
and receptors with their own reorganization energy checked against the analytic line shape."""

from __future__ import annotations

import json
import math
import shutil

import numpy as np
import pytest
from sqlalchemy import func, select

from library import cli
from library.catalogue import receptor_panel_store
from library.catalogue.database import Catalogue
from library.catalogue.models import AuditEntry, StoredReceptorPanel
from library.errors import OlibraError
from library.vibration import receptors, tunnelling
from web_helpers import READER, computed_app, signed_in_client

H_CM1 = 1.0 / 8065.544  # eV per cm^-1 (CODATA: 1 eV = 8065.544 cm^-1), to 1e-6 relative


def _single_mode_record(frequency_cm1: float, huang_rhys: float, settings: dict):
    """A tunnelling record (and its vibration arrays) of one conformer with one mode, computed by the
    module's own formula on its grid."""
    grid = tunnelling.settings_grid_ev(settings)
    rate = tunnelling.inelastic_rate_s(grid, [frequency_cm1], [huang_rhys], lambda_ev=settings["lambda_ev"],
                                       temperature_k=settings["temperature_k"], hopping_ev=settings["hopping_ev"])
    arrays = {"tunnelling_spectrum": rate.astype(np.float32), "huang_rhys": np.array([huang_rhys], np.float32),
              "mode_counts": np.array([1.0], np.float32), "weights": np.array([1.0], np.float32)}
    return arrays, {"frequencies_cm1": np.array([frequency_cm1], np.float32)}


def test_panel_definitions_are_checked_with_a_message_naming_the_problem():
    with pytest.raises(receptors.PanelError, match="within 0.0-0.5 eV"):
        receptors.make_panel("p", [0.2, 0.7])
    with pytest.raises(receptors.PanelError, match="one per gap"):
        receptors.make_panel("p", [0.1, 0.2, 0.3], lambdas_ev=[0.03, 0.04])
    with pytest.raises(receptors.PanelError, match="within 0-0.5 eV"):
        receptors.make_panel("p", [0.1], lambdas_ev=[0.0])
    with pytest.raises(receptors.PanelError, match="must be numbers"):
        receptors.make_panel("p", ["0.1", "a lot"])
    # wavenumbers: 1000 cm^-1 is 0.12398 eV (CODATA 2022 hc / e)
    (gap,) = receptors.make_panel("p", [1000], unit="cm1").gaps_ev
    assert gap == pytest.approx(1000 * H_CM1, rel=1e-6)
    shared = receptors.make_panel("p", [0.1, 0.2], lambdas_ev=[0.05])
    assert [r.lambda_ev for r in shared.receptors] == [0.05, 0.05]


def test_a_receptor_with_its_own_lambda_peaks_where_the_marcus_line_shape_says():
    settings = tunnelling.parameters()
    arrays, vibration = _single_mode_record(1200.0, 0.02, settings)
    own = 0.08
    mode_ev = 1200.0 * tunnelling.CM1_TO_EV
    panel = receptors.ReceptorPanel("t", (
        receptors.Receptor(round(mode_ev + settings["lambda_ev"], 3)),  # the model's lambda: read off the record
        receptors.Receptor(mode_ev + own, own),  # its own lambda: at the channel's peak
        receptors.Receptor(mode_ev + own + math.sqrt(2 * own * tunnelling.BOLTZMANN_EV_PER_K
                                                     * settings["temperature_k"]), own)))  # one sigma off
    rows = receptors.profile(arrays, panel, settings=settings, vibration_arrays=vibration)
    prefactor = 2 * math.pi / (1.054571817e-34 / 1.602176634e-19) * settings["hopping_ev"] ** 2  # CODATA hbar, e
    kt = tunnelling.BOLTZMANN_EV_PER_K * settings["temperature_k"]
    # the normalized Gaussian of variance 2 lambda kT has height 1/sqrt(4 pi lambda kT) at its centre (analytic)
    assert rows[1]["rate_s"] == pytest.approx(prefactor * 0.02 / math.sqrt(4 * math.pi * own * kt), rel=1e-6)
    assert rows[2]["rate_s"] / rows[1]["rate_s"] == pytest.approx(math.exp(-0.5), rel=1e-6)  # one sigma: e^-1/2
    stored = tunnelling.inelastic_rate_s([panel.receptors[0].gap_ev], [1200.0], [0.02], **{
        k: settings[k] for k in ("lambda_ev", "temperature_k", "hopping_ev")})[0]
    assert rows[0]["rate_s"] == pytest.approx(stored, rel=1e-5)  # float32 record, a grid point
    assert rows[1]["mode_cm1"] == pytest.approx(1200.0, abs=0.1)
    # peak heights scale as 1/sqrt(lambda): the narrower line of the model's lambda is the panel's largest
    assert rows[0]["relative"] == 1.0
    assert rows[1]["relative"] == pytest.approx(math.sqrt(settings["lambda_ev"] / own), abs=1e-3)
    with pytest.raises(receptors.PanelError, match="vibration record"):
        receptors.profile(arrays, panel, settings=settings)


def test_panels_are_stored_audited_and_removed(catalogue):
    with catalogue.transaction() as session:
        added = receptor_panel_store.add_panel(session, "Aldehyde-Band", [1650, 1750], unit="cm1",
                                               lambdas_ev=[0.03, 0.06], note="carbonyl stretch", actor="tester")
    assert added.name == "aldehyde-band"
    with catalogue.reading() as session:
        names = [p.name for p in receptor_panel_store.panels(session)]
        found = receptor_panel_store.find_panel(session, "ALDEHYDE-band")
    assert names == [receptors.DEFAULT_PANEL_NAME, "aldehyde-band"]
    assert [r.lambda_ev for r in found.receptors] == [0.03, 0.06] and found.note == "carbonyl stretch"
    assert found.gaps_ev == pytest.approx((1650 * H_CM1, 1750 * H_CM1), rel=1e-5)

    for name, message in (("aldehyde-band", "already exists"), (receptors.DEFAULT_PANEL_NAME, "built-in"),
                          ("with space", "lowercase letters")):
        with pytest.raises(OlibraError, match=message), catalogue.transaction() as session:
            receptor_panel_store.add_panel(session, name, [0.2])
    with pytest.raises(OlibraError, match="the panels are: mid-ir-10, aldehyde-band"), \
            catalogue.reading() as session:
        receptor_panel_store.find_panel(session, "nothing")
    with catalogue.transaction() as session:
        receptor_panel_store.remove_panel(session, "aldehyde-band", actor="tester")
    with pytest.raises(OlibraError, match="cannot be removed"), catalogue.transaction() as session:
        receptor_panel_store.remove_panel(session, receptors.DEFAULT_PANEL_NAME)
    with catalogue.reading() as session:
        assert session.scalar(select(func.count()).select_from(StoredReceptorPanel)) == 0
        trail = session.scalars(select(AuditEntry).where(AuditEntry.entity == "receptor_panel")
                                .order_by(AuditEntry.id)).all()
    assert [(e.action, e.actor) for e in trail] == [("add", "tester"), ("remove", "tester")]


@pytest.fixture(scope="module")
def computed(computed_template, tmp_path_factory):
    path = tmp_path_factory.mktemp("receptors") / "catalogue.sqlite"
    shutil.copy(computed_template, path)
    opened = Catalogue(f"sqlite:///{path}")
    yield opened
    opened.dispose()


def run(catalogue, capsys, *argv):
    code = cli.main(["--db", catalogue.url, *argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_cli_profiles_an_isotopologue_pair_over_a_stored_panel(computed, capsys):
    # receptors tuned (gap = mode + lambda) to aromatic C-D and C-H stretches, near 2280 and 3060 cm^-1
    # (textbook ratio about 1.34; common practice, no source)
    gaps = [f"{w * H_CM1 + tunnelling.DEFAULTS['lambda_ev']:.4f}" for w in (2280, 3060)]
    code, out, _ = run(computed, capsys, "receptors", "panel", "add", "stretches", "--gaps", *gaps,
                       "--note", "C-D and C-H stretch receptors")
    assert code == 0 and "'stretches' added (2 receptors)" in out
    code, out, _ = run(computed, capsys, "receptors", "panel", "list", "--format", "json")
    listed = {p["name"]: p for p in json.loads(out)}
    assert listed["stretches"]["receptors"] == 2 and listed[receptors.DEFAULT_PANEL_NAME]["receptors"] == 10

    code, out, _ = run(computed, capsys, "receptors", "profile", "Benzaldehyde", "Benzaldehyde-d6 (demo)",
                       "--panel", "stretches", "--format", "json")
    assert code == 0
    c_d, c_h = json.loads(out)
    assert c_h["mode_cm1"] == pytest.approx(3060, abs=1) and c_d["mode_cm1"] == pytest.approx(2280, abs=1)
    # deuteration moves the stretch channel from the C-H receptor to the C-D one (measured: 16x and 2x with
    # MMFF94 intensities, whose C-D stretches are weak beside the soft-mode background)
    assert c_h["Benzaldehyde rate_s"] > 5 * c_h["Benzaldehyde-d6 (demo) rate_s"]
    assert c_d["Benzaldehyde-d6 (demo) rate_s"] > 1.3 * c_d["Benzaldehyde rate_s"]

    code, out, err = run(computed, capsys, "receptors", "profile", "Benzaldehyde", "--panel", "nothing")
    assert code != 0 and "no receptor panel named 'nothing'" in err and "Traceback" not in err
    code, out, err = run(computed, capsys, "receptors", "panel", "add", "bad", "--gaps", "9000", "--unit", "cm1")
    assert code != 0 and "within 0.0-0.5 eV" in err
    code, out, _ = run(computed, capsys, "receptors", "panel", "remove", "stretches")
    assert code == 0 and "removed" in out


@pytest.fixture
def receptor_app(computed_template, tmp_path):
    yield from computed_app(computed_template, tmp_path)


def test_material_and_compare_pages_show_the_activation_profiles(receptor_app):
    client = signed_in_client(receptor_app, READER)
    catalogue = receptor_app.extensions["olibra"].catalogue
    with catalogue.transaction() as session:
        receptor_panel_store.add_panel(session, "c-h", [3300], unit="cm1", actor="tester")
    page = client.get("/materials/1")
    assert page.status_code == 200 and 'id="receptors"' in page.text
    assert page.text.count('class="band receptor"') == 10  # the built-in panel
    assert tunnelling.CAUTION in page.text
    chosen = client.get("/materials/1?panel=c-h")
    assert chosen.text.count('class="band receptor"') == 1 and '<option value="c-h" selected>' in chosen.text
    unknown = client.get("/materials/1?panel=nothing")
    assert unknown.status_code == 200 and "no receptor panel named" in unknown.text
    pair = client.get("/compare?a=Benzaldehyde&b=Benzaldehyde-d6+(demo)&panel=c-h")
    assert pair.status_code == 200
    assert pair.text.count('class="band-dot dot-a"') == 1 and pair.text.count('class="band-dot dot-b"') == 1
    assert "Benzaldehyde: rate, s⁻¹" in pair.text and "Benzaldehyde-d6 (demo): rate, s⁻¹" in pair.text
