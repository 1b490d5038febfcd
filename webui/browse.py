"""The catalogue browser (type-ahead filter, paging) and one material's page."""

from __future__ import annotations

from flask import Blueprint, Response, abort, current_app, render_template, request
from sqlalchemy.orm import selectinload

from library import depiction, functional_groups
from library.catalogue import mixtures, observations, restrictions
from library.catalogue.models import Material, MaterialOdor
from webui import db_session, queries, receptor_views
from webui.forms import ComponentsForm

blueprint = Blueprint("browse", __name__)


@blueprint.get("/")
def index():
    query, page_number, include_retired = queries.parse_page_arguments(request.args)
    filters = queries.parse_catalogue_filters(request.args)
    page = queries.search_materials(db_session(), query, page=page_number, include_retired=include_retired,
                                    per_page=current_app.config["OLIBRA_PAGE_SIZE"], **filters)
    template = "browse/_results.html" if request.args.get("fragment") == "1" else "browse/index.html"
    return render_template(template, page=page, query=query, include_retired=include_retired, filters=filters,
                           families=queries.olfactive_families(db_session()))


def _material_or_404(material_id: int) -> Material:
    material = db_session().get(Material, material_id, options=(
        selectinload(Material.synonyms), selectinload(Material.provenance),
        selectinload(Material.odors).selectinload(MaterialOdor.descriptor)))
    if material is None:
        abort(404, description=f"There is no material #{material_id}; it may have been removed. "
                               "Search the catalogue for it by name or CAS RN.")
    return material


@blueprint.get("/materials/<int:material_id>")
def material(material_id: int):
    session = db_session()
    found = _material_or_404(material_id)
    records = queries.record_views(session, found)
    return render_template(
        "browse/material.html", material=found, records=records,
        groups=functional_groups.groups_of(found.smiles),
        missing_kinds=queries.missing_kinds(records), shape=queries.shape_summary(records),
        history=queries.audit_history(session, found.id), flags=queries.pair_flags(session, found.id),
        job=queries.latest_job_for(session, found.id), flag_kinds=observations.FLAG_KINDS,
        summary_rows=queries.summary_rows, provenance_text=queries.provenance_text,
        regulatory_tag=restrictions.tag,
        activation=receptor_views.activation_view([found.id], request.args.get("panel")),
        components=mixtures.components_of(session, found.id), mixtures=mixtures.mixtures_of(session, found.id),
        components_form=ComponentsForm())


@blueprint.get("/materials/<int:material_id>/depiction.svg")
def depiction_svg(material_id: int):
    found = _material_or_404(material_id)
    svg = depiction.structure_svg(found.molfile, found.smiles)
    response = Response(svg, mimetype="image/svg+xml")
    response.headers["Cache-Control"] = "private, max-age=300"
    # RDKit's SVG styles its paths inline; it is shown as an image, so nothing in it can run.
    response.headers["Content-Security-Policy"] = "default-src 'none'; style-src 'unsafe-inline'"
    return response
