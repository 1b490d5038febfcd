"""The compare page: two materials side by side, every metric's score, the overlay figures and
their spectra mirrored with matched and unmatched main bands; and the spectrum and NPR charts
that the material page shows (template globals)."""

from __future__ import annotations

from flask import Blueprint, render_template, request

from library.errors import OlibraError
from library.search import metrics as metric_registry
from library.search.spectra import spectrum_profile
from webui import charts, explore, receptor_views, web_state
from webui.errors import user_message

blueprint = Blueprint("compare", __name__)


@blueprint.get("/compare")
def index():
    error = result = chart = activation = None
    a, b = request.args.get("a", ""), request.args.get("b", "")
    if a.strip() or b.strip():
        try:
            result = explore.compare(request.args)
            engine = web_state().index_cache.vibration_engine
            catalogue = web_state().catalogue
            profile_a = spectrum_profile(catalogue, str(result.a.id), vibration_engine=engine)
            profile_b = spectrum_profile(catalogue, str(result.b.id), vibration_engine=engine)
            chart = charts.mirrored_spectra_svg(profile_a, profile_b, result.explanation["bands"])
            activation = receptor_views.activation_view([result.a.id, result.b.id], request.args.get("panel"))
        except OlibraError as exc:
            error, result = user_message(exc), None
    return render_template("compare/index.html", a=a, b=b, result=result, chart=chart, error=error,
                           activation=activation,
                           metrics=metric_registry.metrics(),
                           weight=request.args.get("weight", "0.5")), 400 if error else 200


@blueprint.app_template_global()
def material_spectrum_chart(material_id: int):
    """The material page's spectrum chart, or None when the material has no vibration record."""
    try:
        profile = spectrum_profile(web_state().catalogue, str(material_id),
                                           vibration_engine=web_state().index_cache.vibration_engine)
    except OlibraError:
        return None
    return charts.spectrum_svg(profile)


@blueprint.app_template_global()
def npr_triangle(npr1, npr2, name: str = ""):
    return charts.npr_triangle_svg(float(npr1), float(npr2), name=name)
