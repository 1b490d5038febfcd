"""The JSON API of the search pages, under /api: type-ahead suggestions, substitutes, compare,
disagreements, scorecard, and pair flags (POST, curators, X-CSRF-Token header).

Arguments are the pages' own (query string for reads, a JSON object for the flag);
errors are {"error": {"status": N, "message": "..."}} like the rest of the API.
"""

from __future__ import annotations

from flask import Blueprint, jsonify, request

from library.search import scorecard as scorecard_figures
from library.search.substitutes import CAUTION
from webui import db_session, explore, queries
from webui.api import OPTIONAL_TEXT, TEXT, json_body
from webui.disagreements import store_flag

blueprint = Blueprint("search_api", __name__, url_prefix="/api")

SUGGESTIONS = 10


@blueprint.get("/suggest")
def suggest():
    """Up to 10 materials whose name, synonym, CAS RN or InChIKey contains q (type-ahead)."""
    query = explore.text_argument(request.args, "q", "the search text", limit=queries.MAX_QUERY_CHARS)
    if not query:
        return jsonify(materials=[])
    page = queries.search_materials(db_session(), query, per_page=SUGGESTIONS,
                                    include_retired=explore.flag_argument(request.args, "retired"))
    return jsonify(materials=[{"id": m.id, "name": m.preferred_name, "cas": m.cas_rn, "inchikey": m.inchikey,
                               "synonyms": [s.name for s in m.synonyms][:3], "status": m.status}
                              for m in page.items], total=page.total)


@blueprint.get("/substitutes")
def substitutes():
    asked = explore.substitute_request(request.args)
    if not asked.asked:
        raise explore.ArgumentError("give material=NAME (or id, CAS RN, InChIKey) or structure=SMILES")
    outcome, _ = explore.find_substitutes(asked)
    return jsonify(explore.outcome_json(outcome))


@blueprint.get("/compare")
def compare():
    return jsonify(explore.comparison_json(explore.compare(request.args)))


@blueprint.get("/disagreements")
def disagreements():
    asked = explore.disagreement_request(request.args)
    found, label = explore.find_disagreements(asked)
    ordered = explore.sort_rows(found, request.args.get("sort", "rank"), request.args.get("order", "asc"))
    per_page = int(explore.number_argument(request.args, "per_page", "per_page", default=50, low=1,
                                           high=queries.MAX_PAGE_SIZE, integer=True,
                                           example=f" from 1 to {queries.MAX_PAGE_SIZE}"))
    page, pages = explore.page_argument(request.args, len(ordered), per_page)
    rows = ordered[(page - 1) * per_page: page * per_page]
    return jsonify(rows=[explore.disagreement_row(r) for r in rows], total=len(ordered), page=page,
                   per_page=per_page, pages=pages, observed=label, thresholds=explore.thresholds_used(asked),
                   vibration_metric=asked.vibration_metric, caution=CAUTION)


@blueprint.get("/scorecard")
def scorecard():
    asked = explore.scorecard_request(request.args)
    report, label, notes = explore.run_scorecard(asked)
    return jsonify(observed=label, **scorecard_figures.report_json(report), notes=notes,
                   permutations=asked.permutations, resamples=asked.resamples)


@blueprint.post("/flags")
def add_flag():
    data = json_body({"a": (str, int), "b": (str, int), "kind": TEXT, "note": OPTIONAL_TEXT})
    for key in ("a", "b", "kind"):
        if not isinstance(data.get(key), (str, int)) or not str(data[key]).strip():
            raise explore.ArgumentError(f"'{key}' is required (a material key for a and b, a flag kind for kind)")
    note = data.get("note")
    if note is not None and not isinstance(note, str):
        raise explore.ArgumentError("'note' must be a string")
    flag = store_flag(str(data["a"]).strip(), str(data["b"]).strip(), str(data["kind"]), note)
    return jsonify(flag), 201
