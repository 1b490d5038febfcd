"""The search pages in a real headless browser, against a live server on a catalogue whose records were
computed with the real engines: substitutes with type-ahead, a comparison, flagging a disagreement and
the scorecard. Screenshots go to artifacts/screenshots/ (not kept in git)."""

from __future__ import annotations

import os
import shutil
import threading

import pytest
from werkzeug.serving import make_server

from library.catalogue import curation, observations
from library.search import metrics
from library.catalogue.database import Catalogue
from webui import create_app

from web_helpers import CURATOR, PASSWORD, computed_catalogue_template


@pytest.fixture(scope="module")
def search_server(tmp_path_factory):
    """A live server (werkzeug, threaded) on a copy of the computed search catalogue."""
    folder = tmp_path_factory.mktemp("search-browser")
    target = folder / "catalogue.sqlite"
    shutil.copyfile(computed_catalogue_template(tmp_path_factory), target)
    catalogue = Catalogue(f"sqlite:///{target}")
    app = create_app({"OLIBRA_DB": catalogue.url, "SECRET_KEY": os.urandom(32).hex(),
                      "OLIBRA_INDEX_CACHE_DIR": str(folder / "index-cache")})
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, name="olibra-search-test-server", daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_port}", catalogue
    server.shutdown()
    thread.join(timeout=30)
    catalogue.dispose()


@pytest.fixture
def curator_page(browser, search_server):
    url, _ = search_server
    context = browser.new_context(base_url=url, viewport={"width": 1360, "height": 900})
    context.set_default_timeout(30_000)
    page = context.new_page()
    page.console_errors = []
    page.on("console", lambda m: m.type == "error" and page.console_errors.append(m.text))
    page.goto("/")
    page.fill("#username", CURATOR)
    page.fill("#password", PASSWORD)
    page.click("button:has-text('Sign in')")
    page.wait_for_url("**/")
    yield page
    context.close()


def test_find_substitutes_by_type_ahead_then_compare(curator_page, expect, screenshot):
    page = curator_page
    page.click("nav >> text=Substitutes")
    expect(page.locator("h1")).to_contain_text("Find substitutes")
    page.locator("#material").press_sequentially("5392-40", delay=40)  # a CAS RN finds the material
    suggestion = page.locator("#material-suggestions button", has_text="Citral")
    expect(suggestion).to_be_visible()
    suggestion.click()
    expect(page.locator("#material")).to_have_value("Citral")
    page.check("input[name=metric][value=blend]")
    page.fill("#weight", "0.7")
    page.dispatch_event("#weight", "input")
    expect(page.locator("#weight-value")).to_have_text("0.70")
    page.click("button:has-text('Find substitutes')")
    rows = page.locator("table.candidates tbody tr")
    expect(rows).to_have_count(10)
    expect(page.locator("#results h2")).to_contain_text("for Citral by blend (shape weight 0.70)")
    first = rows.first
    expect(first.locator("td.score")).to_have_count(len(metrics.names(indexed=True)))
    assert 0.0 <= float(first.locator("td.score.ranked-by").inner_text().split()[0]) <= 1.0
    expect(first.locator("svg.preview")).to_be_visible()
    expect(page.locator("aside.caution")).to_contain_text("IFRA Standards")
    page.wait_for_load_state("load")
    assert first.locator("img.thumb").evaluate("img => img.complete && img.naturalWidth") > 0
    screenshot(page, "substitutes")
    with page.expect_download() as download:
        page.click("text=Download CSV")
    assert download.value.suggested_filename == "substitutes.csv"
    candidate = first.locator("td a").first.inner_text()
    first.locator("text=compare").click()
    expect(page.locator("h1")).to_contain_text("Compare two materials")
    expect(page.locator("#comparison")).to_contain_text(candidate)
    expect(page.locator("svg.mirrored")).to_be_visible()
    expect(page.locator("table.scores")).to_contain_text("overlay")
    expect(page.locator("aside.caution")).to_be_visible()
    screenshot(page, "compare")
    assert page.console_errors == []


def test_compare_the_mirror_image_pair(curator_page, expect):
    page = curator_page
    page.goto("/compare?a=(R)-(-)-Carvone&b=(S)-(%2B)-Carvone")
    expect(page.locator("svg.mirrored g.matched").first).to_be_attached()
    assert page.locator("svg.mirrored g.unmatched").count() == 0  # same vibrations: every band matched
    title = page.locator("svg.mirrored g.matched title").first.text_content()
    assert title.startswith("matched:") and "cm⁻¹" in title


def test_flag_a_disagreement_as_curator(curator_page, search_server, expect, screenshot):
    page = curator_page
    _, catalogue = search_server
    page.click("nav >> text=Disagreements")
    expect(page.locator("table.disagreements")).to_contain_text("indistinguishable by shape")
    row = page.locator("table.disagreements tbody tr", has_text="Benzaldehyde-d6 (demo)")
    row.locator("summary:has-text('flag')").click()
    row.locator("select[name=kind]").select_option("shape-alike smell-different")
    row.locator("input[name=note]").fill("the deuterated form smells fainter to our panel")
    screenshot(page, "disagreements")
    row.locator("button:has-text('Save flag')").click()
    expect(page.locator(".flash-success")).to_contain_text("shape-alike smell-different")
    expect(page.locator("table.disagreements tbody tr", has_text="Benzaldehyde-d6 (demo)")
           .locator(".tag")).to_contain_text("shape-alike smell-different")
    with catalogue.reading() as session:
        flags = [(f.kind, f.note) for f in observations.list_flags(session)]
    assert ("shape-alike smell-different", "the deuterated form smells fainter to our panel") in flags
    page.click("th a:has-text('Gap')")
    expect(page.locator("th[aria-sort]")).to_contain_text("Gap")
    assert page.console_errors == []


def test_scorecard_runs_and_draws(curator_page, expect, screenshot):
    page = curator_page
    page.click("nav >> text=Scorecard")
    page.fill("#permutations", "49")
    page.fill("#resamples", "50")
    page.click("button:has-text('Run scorecard')")
    expect(page.locator("table.scorecard-table tbody tr")).to_have_count(len(metrics.names(indexed=True)))
    expect(page.locator("svg.scorecard")).to_be_visible()
    expect(page.locator("#results h2")).to_contain_text("odor descriptor Jaccard")
    expect(page.locator("#scorecard-summary")).to_contain_text("agrees best with the observations")
    expect(page.locator("table.scorecard-table thead")).to_contain_text("Chance")
    screenshot(page, "scorecard")
    page.goto("/materials/1")
    expect(page.locator("svg.spectrum g.band").first).to_be_attached()
    expect(page.locator("svg.npr")).to_be_visible()
    screenshot(page, "material-spectrum")
    assert page.console_errors == []


def test_pair_class_page_tests_the_enantiomers(curator_page, expect, screenshot):
    page = curator_page
    page.click("nav >> text=Pair classes")
    row = page.locator("#pair-classes tbody tr", has_text="enantiomers")
    expect(row.locator("td.num")).to_have_text("1")  # (R)/(S)-carvone: the seed file's one pair here
    row.locator("a:has-text('test')").click()
    expect(page.locator("#class-test")).to_contain_text("(R)-(-)-Carvone / (S)-(+)-Carvone")
    expect(page.locator("#class-test tbody tr")).to_have_count(len(metrics.names(indexed=True)))
    screenshot(page, "pair-class-test")
    assert page.console_errors == []
# --- layout at a small laptop's and a phone's width -------------------------------------------------

LAYOUT_WIDTHS = (1024, 390)  # a 1024 px laptop window; a 390 px phone screen (common practice, no source)


@pytest.mark.parametrize("width", LAYOUT_WIDTHS)
def test_every_main_page_fits_the_width_without_horizontal_overflow(curator_page, search_server, expect,
                                                                   screenshot, width):
    _, catalogue = search_server
    with catalogue.reading() as session:
        citral = curation.find_material(session, "Citral").id
        octanal = curation.find_material(session, "Octanal").id
    pages = {"catalogue": "/", "material": f"/materials/{citral}", "substitutes": "/substitutes?material=Citral",
             "compare": f"/compare?a={citral}&b={octanal}", "disagreements": "/disagreements",
             "scorecard": "/scorecard", "vocabulary": "/vocabulary", "jobs": "/jobs",
             "add-material": "/materials/new", "import": "/import", "edit": f"/materials/{citral}/edit",
             "history": "/history", "pair-classes": "/pairs", "regulatory": f"/materials/{citral}/restrictions",
             "observations": "/observations", "presets": "/presets"}
    curator_page.set_viewport_size({"width": width, "height": 900})
    for name, url in pages.items():
        curator_page.goto(url)
        sizes = curator_page.evaluate(
            "() => ({scroll: document.scrollingElement.scrollWidth, inner: window.innerWidth})")
        screenshot(curator_page, f"layout-{name}-{width}")
        assert sizes["scroll"] <= sizes["inner"], (name, width, sizes)
        sign_out = curator_page.get_by_role("button", name="Sign out")
        expect(sign_out).to_be_visible()
        box = sign_out.bounding_box()
        assert box["x"] >= 0 and box["x"] + box["width"] <= sizes["inner"], (name, width, box)
    # the folded navigation opens from its Menu toggle
    curator_page.goto("/")
    nav_link = curator_page.locator("nav.mainnav a", has_text="Disagreements")
    expect(nav_link).to_be_hidden()
    curator_page.click("label.nav-toggle-label")
    expect(nav_link).to_be_visible()
    # CAS RNs stay on one line: the text of each CAS RN cell lays out as a single line box
    lines = curator_page.evaluate("""() => [...document.querySelectorAll('td.cas')].map(cell => {
        const range = document.createRange(); range.selectNodeContents(cell);
        return new Set([...range.getClientRects()].map(r => Math.round(r.top))).size; })""")
    assert lines and set(lines) == {1}, lines
    assert curator_page.console_errors == []
