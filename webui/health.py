"""A health page: is the catalogue reachable and at the right schema?"""

from flask import Blueprint, jsonify
from sqlalchemy import func, select

from library.catalogue.models import Material
from library.errors import OlibraError
from webui import db_session

blueprint = Blueprint("health", __name__)


@blueprint.get("/health")
def health():
    try:
        session = db_session()
        count = session.scalar(select(func.count()).select_from(Material))
    except OlibraError as exc:
        return jsonify(status="error", detail=str(exc)), 503
    return jsonify(status="ok", materials=count)
