"""Helpers shared by the test modules (imported by name; pytest puts tests/ on the path)."""

from library.catalogue import curation

TEST_VOCABULARY = {
    "citrus": "citrus", "floral": "floral", "green": "green", "woody": "woody", "minty": "herbal",
    "sweet": "gourmand", "vanilla": "gourmand", "fruity": "fruity", "spicy": "spicy", "herbal": "herbal",
}


def draft(smiles: str, name: str, **kwargs):
    """A material draft with 'from memory' provenance, for tests."""
    sources = {"structure": "from memory", "preferred_name": "from memory"}
    if kwargs.get("cas"):
        sources["cas_rn"] = "from memory"
    if kwargs.get("odors"):
        sources["odor"] = "from memory"
    return curation.draft_material(smiles, name=name, sources=sources, **kwargs)
