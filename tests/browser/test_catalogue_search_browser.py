"""The catalogue page in a real browser: search by odor descriptor and family, filters, column sorting.
Seed materials (tests/browser/conftest.py SEED_NAMES); Eugenol is the only one with the descriptor
"clove" and the family "spicy" in the seed catalogue."""


def names(page):
    return page.locator("table.materials tbody tr td:nth-child(2) > a").all_inner_texts()


def test_odor_and_family_search_then_sort(signed_in, live_server, expect, screenshot):
    page = signed_in
    page.fill("#material-filter", "clove")  # an odor descriptor, typed: the list follows
    expect(page.locator("table.materials tbody tr")).to_have_count(1)
    expect(page.locator("#results")).to_contain_text("Eugenol")
    page.fill("#material-filter", "")
    page.select_option("#family-filter", "citrus")
    page.click("button:has-text('Search')")
    expect(page.locator("#family-filter")).to_have_value("citrus")
    shown = names(page)
    assert "Eugenol" not in shown and "Linalool" not in shown and "Citral" in shown
    page.fill("#odor-filter", "lemon")
    page.click("button:has-text('Search')")
    assert set(names(page)) <= {"Citral", "Geranial", "(R)-(+)-Limonene", "(S)-(-)-Limonene"} and names(page)
    page.goto("/")
    ascending = names(page)
    assert ascending == sorted(ascending, key=str.lower)
    page.click("th a[data-sort=name]")  # already sorted by name: a click reverses
    expect(page.locator("th[aria-sort=descending]")).to_contain_text("Name")
    assert names(page) == ascending[::-1]
    screenshot(page, "catalogue-sorted-by-name-descending")
    page.fill("#material-filter", "o")  # typing keeps the chosen order
    expect(page.locator("th[aria-sort=descending]")).to_have_count(1)
    typed = names(page)
    assert typed == sorted(typed, key=str.lower, reverse=True)
    assert page.console_errors == []
