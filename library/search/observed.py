"""Observed similarity of two materials: what the disagreement list and the scorecard compare the
metrics against."""

from __future__ import annotations

import numpy as np

from library.search.errors import SearchError

DESCRIPTORS = "descriptors"


def observed_similarity(catalogue, source: str | None, *, include_demo: bool = False):
    """A callable (id_a, id_b) -> observed similarity or None, and a label saying what it is.

    source 'descriptors': Jaccard index of the two odor descriptor sets (None when either has none);
    descriptors whose source is 'demo' (invented notes of demo entries) are not observations and are
    left out unless `include_demo`;
    otherwise the name of an observation data set: Pearson correlation of the two profiles over
    the variables both were measured on (None with fewer than 3 shared variables).
    """
    from sqlalchemy import select

    from library.catalogue import curation, observations
    from library.catalogue.models import MaterialOdor, OdorDescriptor

    if source is None:
        return None, None
    if source == DESCRIPTORS:
        with catalogue.reading() as session:
            sets: dict[int, set[str]] = {}
            query = select(MaterialOdor.material_id, OdorDescriptor.term).join(OdorDescriptor)
            if not include_demo:
                query = query.where(MaterialOdor.source_kind != "demo")
            for material_id, term in session.execute(query):
                sets.setdefault(material_id, set()).add(term)

        def jaccard(a, b):
            if a not in sets or b not in sets:
                return None
            return len(sets[a] & sets[b]) / len(sets[a] | sets[b])

        return jaccard, "odor descriptor Jaccard" + (" (demo notes included)" if include_demo else "")
    with catalogue.reading() as session:
        try:
            ids, variables, matrix = observations.observation_profiles(session, source)
        except curation.CurationError as exc:
            raise SearchError(str(exc), remedy=exc.remedy) from None
    row_of = {m: i for i, m in enumerate(ids)}

    def correlation(a, b):
        if a not in row_of or b not in row_of:
            return None
        x, y = matrix[row_of[a]], matrix[row_of[b]]
        both = ~np.isnan(x) & ~np.isnan(y)
        if both.sum() < 3 or np.std(x[both]) == 0 or np.std(y[both]) == 0:
            return None
        return float(np.corrcoef(x[both], y[both])[0, 1])

    return correlation, f"profile correlation in data set {source!r} ({len(variables)} variables)"
