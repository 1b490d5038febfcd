"""The web interface in a real headless browser: sign in, browse, add, import, follow a recompute.

Screenshots of the main pages go to artifacts/screenshots/ (not kept in git).
"""

from __future__ import annotations

import re

from sqlalchemy import select

from library.catalogue import curation
from library.catalogue.models import Material


def test_sign_in_and_type_ahead_filter(signed_in, live_server, expect, screenshot):
    page = signed_in
    expect(page.locator("table.materials tbody tr")).to_have_count(len(live_server.seed_names))
    expect(page.locator(".whoami")).to_contain_text("cora")
    screenshot(page, "catalogue")
    page.fill("#material-filter", "limon")  # no submit: the list follows the typing
    expect(page.locator("table.materials tbody tr")).to_have_count(2)
    expect(page.locator("#results")).to_contain_text("(S)-(-)-Limonene")
    assert "q=limon" in page.url
    page.fill("#material-filter", "5392-40-5")
    expect(page.locator("table.materials tbody tr")).to_have_count(1)
    expect(page.locator("#results")).to_contain_text("Citral")
    page.fill("#material-filter", "nothing like this")
    expect(page.locator("#results")).to_contain_text("No material matches")
    assert page.console_errors == []


def test_material_page_with_depiction(signed_in, expect, screenshot):
    page = signed_in
    page.click("text=Eugenol")
    expect(page.locator("h1")).to_contain_text("Eugenol")
    image = page.locator(".depiction img")
    expect(image).to_be_visible()
    page.wait_for_load_state("load")  # the load event waits for images
    assert image.evaluate("img => img.complete && img.naturalWidth") > 0
    expect(page.locator("main")).to_contain_text("97-53-0")
    expect(page.locator("main")).to_contain_text("clove")
    expect(page.locator("footer")).to_contain_text("not a safety or regulatory finding")
    screenshot(page, "material")
    assert page.console_errors == []


def test_three_mistakes_are_shown_beside_their_fields_after_one_submit(signed_in, live_server, expect, screenshot):
    page = signed_in
    page.set_viewport_size({"width": 390, "height": 900})  # a phone: the menu opens from its toggle
    page.click("label.nav-toggle-label")
    page.click("nav >> text=Add material")
    page.fill("#structure", "C1CC(C")  # a broken SMILES (unclosed ring and branch)
    page.fill("#cas", "121-33-6")  # wrong check digit
    page.fill("#odors", "vanilla, moonlight")  # not a vocabulary term; the name is left empty
    page.click("button:has-text('Add material')")
    errors = page.locator(".field.has-error")
    expect(errors).to_have_count(4)
    for field_id, words in (("structure", "SMILES"), ("name", "needs a name"), ("cas", "check digit 6"),
                            ("odors", "moonlight")):
        expect(page.locator(f".field.has-error:has(#{field_id}) .error")).to_contain_text(words)
    screenshot(page, "add-material-errors-390")
    assert page.evaluate("document.scrollingElement.scrollWidth <= innerWidth")
    with live_server.catalogue.reading() as session:
        assert {m.preferred_name for m in session.scalars(select(Material))} == set(live_server.seed_names)


def test_add_material_then_duplicate_points_to_it(signed_in, live_server, expect, screenshot):
    page = signed_in
    page.click("nav >> text=Add material")
    page.fill("#structure", "COc1cc(C=O)ccc1O")
    page.fill("#name", "Vanillin")
    page.fill("#cas", "121-33-5")
    page.fill("#family", "gourmand")
    page.fill("#odors", "vanilla:1.0, sweet:0.8")
    screenshot(page, "add-material")
    page.click("button:has-text('Add material')")
    expect(page.locator("h1")).to_contain_text("Vanillin")
    expect(page.locator(".flash-success")).to_contain_text("Added")
    material_url = page.url
    page.click("nav >> text=Add material")
    page.fill("#structure", "O=Cc1ccc(O)c(OC)c1")  # the same structure written differently
    page.fill("#name", "Vanilla aldehyde")
    page.click("button:has-text('Add material')")
    expect(page.locator(".notice.banner")).to_contain_text("already in the catalogue")
    page.click(".notice.banner a")
    assert page.url == material_url
    page.click("text=Edit")
    page.fill("#notes", "benchmark gourmand material")
    page.click("button:has-text('Save changes')")
    expect(page.locator("table.history")).to_contain_text("benchmark gourmand material")
    with live_server.catalogue.reading() as session:
        assert curation.find_material(session, "Vanillin").notes == "benchmark gourmand material"


def test_import_a_file_with_a_bad_row_then_keep_good(signed_in, live_server, tmp_path, expect, screenshot):
    page = signed_in
    upload = tmp_path / "new-materials.csv"
    upload.write_text("name,smiles,cas,structure_source,cas_source\n"
                      "Coumarin,O=c1ccc2ccccc2o1,91-64-5,from memory,from memory\n"
                      "Half a ring,C1CC(C,,from memory,\n", encoding="utf-8")
    page.click("nav >> text=Import")
    page.set_input_files("#file", str(upload))
    page.click("button:has-text('Import')")
    expect(page.locator(".report")).to_contain_text("nothing was imported")
    expect(page.locator("tr.row-rejected")).to_contain_text("Half a ring")
    with live_server.catalogue.reading() as session:
        assert session.scalar(select(Material).where(Material.preferred_name == "Coumarin")) is None
    page.set_input_files("#file", str(upload))
    page.check("#keep_good")
    page.click("button:has-text('Import')")
    expect(page.locator(".report")).to_contain_text("1 added")
    screenshot(page, "import-report")
    page.click(".report >> text=Coumarin")
    expect(page.locator("h1")).to_contain_text("Coumarin")


def test_vocabulary_page(signed_in, expect, screenshot):
    page = signed_in
    page.click("nav >> text=Vocabulary")
    page.fill("#term", "seaweed")
    page.fill("#family", "marine")
    page.click("button:has-text('Add term')")
    expect(page.locator(".flash-success")).to_contain_text("seaweed")
    expect(page.locator("table.vocabulary")).to_contain_text("seaweed")
    screenshot(page, "vocabulary")


def test_compute_now_from_the_material_page_shows_the_job_and_then_the_records(signed_in, expect, screenshot):
    page = signed_in
    page.goto("/")
    page.click("text=Eugenol")
    page.click("button:has-text('Compute now')")
    expect(page.locator(".flash-success")).to_contain_text("computes this material's records")
    expect(page.locator("#material-job")).to_contain_text("compute shape, vibration, tunnelling records of material #")
    screenshot(page, "material-compute-now")
    for _ in range(180):  # the page does not poll; reload until the job ends (the limit only stops a hang)
        state = page.locator("#material-job .tag").inner_text()
        if state not in ("queued", "running"):
            break
        page.wait_for_timeout(1000)
        page.reload()
    assert state == "finished"
    expect(page.locator("#material-job")).to_contain_text("1 of 1 material done")
    expect(page.locator(".shape-values")).to_contain_text("NPR1")
    assert page.locator("table.records .tag-current").count() == 3  # shape, vibration and tunnelling


def test_recompute_progress_follows_the_job(signed_in, live_server, expect, screenshot):
    """Runs last: retires all but one material so that the job is short."""
    with live_server.catalogue.transaction() as session:
        for material in session.scalars(select(Material)):
            if material.preferred_name != "Octanal":
                curation.set_status(session, material, "retired", actor="browser test")
    page = signed_in
    page.click("nav >> text=Jobs")
    page.select_option("#kinds", "shape")
    page.click("button:has-text('Start recompute')")
    expect(page).to_have_url(re.compile(r"/jobs/\d+$"))
    screenshot(page, "job-running")
    # The page polls the JSON endpoint: the state and the bar change without a reload.
    expect(page.locator("#job-state")).to_have_text("finished", timeout=180_000)
    expect(page.locator("#job-count")).to_have_text("1 of 1 material")
    assert page.locator("#job-progress").evaluate("bar => bar.value === bar.max")
    page.reload()
    expect(page.locator("#job-state")).to_have_text("finished")
    screenshot(page, "job-finished")
    page.goto("/")
    page.click("text=Octanal")
    expect(page.locator(".shape-values")).to_contain_text("NPR1")
    screenshot(page, "material-with-shape")
