"""The scorecard page: how well each metric predicts observed similarity, side by side."""

from __future__ import annotations

from flask import Blueprint, render_template, request

from library.errors import OlibraError
from webui import charts, explore
from webui.errors import user_message

blueprint = Blueprint("scorecard", __name__)


@blueprint.get("/scorecard")
def index():
    error = scores = report = label = chart = None
    notes: list[str] = []
    sources = []
    try:
        sources = explore.observation_sources()
        asked = explore.scorecard_request(request.args)
    except OlibraError as exc:
        asked, error = explore.ScorecardRequest(), user_message(exc)
    if error is None and explore.flag_argument(request.args, "run"):
        try:
            report, label, notes = explore.run_scorecard(asked)
            scores = report.scores
            chart = charts.scorecard_svg(scores)
        except OlibraError as exc:
            error = user_message(exc)
    return render_template("scorecard/index.html", asked=asked, scores=scores, report=report, label=label, notes=notes,
                           chart=chart, error=error, sources=sources,
                           defaults=explore.SCORECARD_DEFAULTS), 400 if error else 200
