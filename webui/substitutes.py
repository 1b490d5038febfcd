"""The substitutes page: candidates for a material (or a pasted structure) under a chosen metric,
with filters, every metric's score and rank, previews of each candidate's spectrum and a CSV export."""

from __future__ import annotations

from flask import Blueprint, Response, render_template, request

from library import depiction, functional_groups
from library.catalogue import base_preset_store
from library.errors import OlibraError
from library.search import metrics
from library.search.spectra import fingerprint_curve
from webui import charts, db_session, explore
from webui.errors import user_message

blueprint = Blueprint("substitutes", __name__)

CSV_COLUMNS = ["rank", "id", "name", "cas"] + [c for m in metrics.names() for c in (m, f"{m}_rank")] + [
    "odors", "molecular_weight", "logp", "status", "restricted", "regulatory", "smiles"]


@blueprint.get("/substitutes")
def index():
    error = outcome = None
    previews, regulatory = {}, {}
    try:
        asked = explore.substitute_request(request.args)
    except OlibraError as exc:
        asked, error = explore.SubstituteRequest(), user_message(exc)
    if error is None and asked.asked:
        try:
            outcome, cat_index = explore.find_substitutes(asked)
            if outcome.query.material_id is not None:
                query_points = explore.preview_points(cat_index, outcome.query.material_id)
            else:
                curve = fingerprint_curve(cat_index, query=outcome.query)
                query_points = None if curve is None else charts.preview_points(*curve)
            regulatory = explore.regulatory_tags(outcome)
            for c in outcome.candidates:
                previews[c.material.id] = charts.preview_svg(
                    explore.preview_points(cat_index, c.material.id), query_points,
                    label=f"spectrum of {c.material.name} (color) over the query's (gray)")
        except OlibraError as exc:
            error = user_message(exc)
    status = 400 if error else 200
    return render_template("substitutes/index.html", asked=asked, outcome=outcome, error=error,
                           previews=previews, regulatory=regulatory, metrics=metrics.metrics(indexed=True), score_columns=metrics.names(),
                           group_names=list(functional_groups.VOCABULARY), base_presets=base_preset_store.presets(db_session()),
                           args=request.args), status


@blueprint.get("/substitutes.csv")
def export():
    outcome, _ = explore.find_substitutes(_required(explore.substitute_request(request.args)))
    tags = explore.regulatory_tags(outcome)
    return explore.csv_response([explore.candidate_row(c, tags) for c in outcome.candidates], CSV_COLUMNS,
                                "substitutes.csv", caution=outcome.caution)


def _required(asked: explore.SubstituteRequest) -> explore.SubstituteRequest:
    if not asked.asked:
        raise explore.ArgumentError("choose a material (name, synonym, CAS RN, InChIKey) or paste a structure")
    return asked


@blueprint.get("/structure.svg")
def structure_svg():
    """A 2D depiction of a pasted structure (SMILES or molfile) that is not in the catalogue."""
    from library.structures import StructureError, standardize

    text = explore.text_argument(request.args, "structure", "the structure", limit=explore.MAX_STRUCTURE_CHARS)
    try:
        structure = standardize(text)
    except StructureError as exc:
        raise explore.ArgumentError(f"the structure cannot be drawn: {exc}") from None
    response = Response(depiction.structure_svg("", structure.smiles), mimetype="image/svg+xml")
    response.headers["Cache-Control"] = "private, max-age=300"
    response.headers["Content-Security-Policy"] = "default-src 'none'; style-src 'unsafe-inline'"
    return response
