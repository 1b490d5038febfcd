"""The JSON API under /api: the same core calls as the pages, answers as JSON.

Sign in with POST /api/session (JSON user name and password); send the CSRF
token from GET /api/session in an X-CSRF-Token header with every POST, PUT,
PATCH or DELETE. Errors are {"error": {"status": N, "message": "..."}}.
"""

from __future__ import annotations

import json
import re

from flask import Blueprint, abort, current_app, jsonify, request
from flask_login import current_user
from flask_wtf.csrf import generate_csrf
from sqlalchemy import select
from sqlalchemy.orm import selectinload

from library.catalogue import curation
from library.catalogue.models import BackgroundJob, Material, MaterialOdor
from library.errors import OlibraError
from webui import db_session, queries, web_state, write_transaction
from webui.auth import SignInThrottled, checked_sign_in, end_session, start_session
from webui.curation import material_input, run_import
from webui.jobs import queue_new_materials, record_counts, start

blueprint = Blueprint("api", __name__, url_prefix="/api")

MAX_JSON_DEPTH = 8
MAX_JSON_BYTES = 1024 * 1024
_JSON_STRING = re.compile(rb'"(?:[^"\\]|\\.)*"')
_JSON_BRACKET = re.compile(rb"[\[\]{}]")
TEXT, OPTIONAL_TEXT = (str,), (str, type(None))
MATERIAL_FIELDS = {"structure": TEXT, "name": TEXT, "synonyms": (list, str), "cas": OPTIONAL_TEXT,
                   "family": OPTIONAL_TEXT, "odors": (list, str), "notes": OPTIONAL_TEXT, "source": OPTIONAL_TEXT}
TYPE_NAMES = {str: "a string", type(None): "null", list: "a list of strings", int: "a whole number",
              bool: "true or false"}


def _json_depth(raw: bytes) -> int:
    """How deeply arrays and objects nest in `raw` (strings skipped), without parsing it."""
    depth = deepest = 0
    for bracket in _JSON_BRACKET.findall(_JSON_STRING.sub(b'""', raw)):
        depth += 1 if bracket in (b"[", b"{") else -1
        deepest = max(deepest, depth)
    return deepest


def json_body(fields: dict[str, tuple] | None = None) -> dict:
    """The request's JSON object, checked: size, nesting depth, and with `fields` (name -> allowed types)
    no unknown field and each value of an allowed type. Any problem is a 400 naming it."""
    if request.mimetype != "application/json":
        abort(400, description="send a JSON object in the request body with Content-Type: application/json")
    raw = request.get_data(cache=True)
    if len(raw) > MAX_JSON_BYTES:
        abort(400, description=f"the JSON body is {len(raw)} bytes; the limit is {MAX_JSON_BYTES} bytes")
    if _json_depth(raw) > MAX_JSON_DEPTH:
        abort(400, description=f"the JSON body nests arrays or objects more than {MAX_JSON_DEPTH} levels deep; "
                               "send a flat object of the documented fields")
    try:
        data = json.loads(raw)
    except (ValueError, RecursionError) as exc:
        abort(400, description=f"the request body is not valid JSON ({str(exc)[:120]}); send a JSON object")
    if not isinstance(data, dict):
        abort(400, description="send a JSON object in the request body with Content-Type: application/json")
    if fields is not None:
        unknown = sorted(set(data) - set(fields))
        if unknown:
            abort(400, description=f"unknown field(s) {', '.join(k[:40] for k in unknown[:5])}; "
                                   f"allowed: {', '.join(sorted(fields))}")
        for name, allowed in fields.items():
            if name not in data:
                continue
            value = data[name]
            ok = any(type(value) is kind for kind in allowed)
            if ok and isinstance(value, list):
                ok = all(isinstance(item, str) for item in value)
            if not ok:
                wanted = " or ".join(TYPE_NAMES[kind] for kind in allowed)
                abort(400, description=f"field '{name}' must be {wanted}, not {_json_type(value)}")
    return data


def _json_type(value) -> str:
    if isinstance(value, list):
        return "a list with a non-string item" if all(not isinstance(v, (list, dict)) for v in value) \
            and any(not isinstance(v, str) for v in value) else "a list"
    return {dict: "an object", str: "a string", bool: "true or false", int: "a number", float: "a number",
            type(None): "null"}.get(type(value), type(value).__name__)


def _session_state():
    user = current_user if current_user.is_authenticated else None
    return {"signed_in": user is not None, "username": user.username if user else None,
            "role": user.role if user else None, "csrf_token": generate_csrf()}


@blueprint.get("/session")
def session_state():
    return jsonify(_session_state())


@blueprint.post("/session")
def sign_in():
    data = json_body({"username": TEXT, "password": TEXT})
    try:
        user = checked_sign_in(str(data.get("username") or ""), str(data.get("password") or ""))
    except SignInThrottled as exc:
        return (jsonify(error={"status": 429, "message": str(exc), "retry_after_s": exc.wait_s}), 429,
                {"Retry-After": str(exc.wait_s)})
    if user is None:
        return jsonify(error={"status": 401, "message": "the user name or password is not right"}), 401
    start_session(user)
    return jsonify(_session_state())


@blueprint.delete("/session")
def sign_out():
    end_session()
    return jsonify(signed_in=False)


@blueprint.get("/materials")
def materials():
    query, page_number, include_retired = queries.parse_page_arguments(request.args)
    per_page_text = request.args.get("per_page", str(current_app.config["OLIBRA_PAGE_SIZE"]))
    if not per_page_text.isdigit() or not 1 <= int(per_page_text) <= queries.MAX_PAGE_SIZE:
        raise OlibraError(f"per_page {per_page_text[:20]!r} must be a whole number from 1 to {queries.MAX_PAGE_SIZE}")
    page = queries.search_materials(db_session(), query, page=page_number, per_page=int(per_page_text),
                                    include_retired=include_retired, **queries.parse_catalogue_filters(request.args))
    return jsonify(materials=[queries.material_json(m) for m in page.items], total=page.total,
                   page=page.page, per_page=page.per_page, pages=page.pages)


@blueprint.get("/materials/<int:material_id>")
def material(material_id: int):
    session = db_session()
    found = session.get(Material, material_id, options=(
        selectinload(Material.synonyms), selectinload(Material.provenance),
        selectinload(Material.odors).selectinload(MaterialOdor.descriptor)))
    if found is None:
        abort(404, description=f"there is no material #{material_id}")
    data = queries.material_json(found, detail=True)
    data["computed_records"] = [
        {"kind": r.kind, "engine": r.engine_name, "engine_version": r.engine_version, "state": r.state,
         "computed_at": r.computed_at.isoformat() if r.computed_at else None, "summary": r.summary}
        for r in queries.record_views(session, found)]
    return jsonify(data)


@blueprint.post("/materials")
def add_material():
    data = json_body(MATERIAL_FIELDS)
    try:
        with write_transaction() as session:
            draft, existing = curation.check_new_material(session, material_input(data))
            if existing is not None:
                body = queries.material_json(existing, detail=True)
                message = (f"already present as #{existing.id} {existing.preferred_name} "
                           f"(InChIKey {existing.inchikey})")
                return jsonify(error={"status": 409, "message": message}, existing=body), 409
            outcome = curation.add_material(session, draft, actor=current_user.username)
            body = queries.material_json(outcome.material, detail=True)
    except curation.FieldErrors as exc:
        return jsonify(error={"status": 400, "message": str(exc), "fields": exc.errors}), 400
    body["compute_job"] = queue_new_materials([body["id"]])
    return jsonify(body), 201


@blueprint.post("/import")
def import_file():
    upload = request.files.get("file")
    if upload is None:
        raise OlibraError("send the file as multipart/form-data in a field named 'file'")
    report = run_import(upload.filename or "", upload.read(),
                        keep_good=request.form.get("keep_good", "") in ("1", "true", "yes", "on"),
                        structure_source=request.form.get("structure_source", "").strip(),
                        actor=current_user.username)
    body = {"committed": report.committed, "summary": report.summary(),
            "added": report.count("added"), "present": report.count("present"),
            "rejected": report.count("rejected"),
            "rows": [{"row": r.row, "name": r.name, "status": r.status, "message": r.message,
                      "material_id": r.material_id} for r in report.rows]}
    return jsonify(body), 200 if report.committed else 422


@blueprint.get("/vocabulary")
def vocabulary():
    return jsonify(terms=[{"term": d.term, "family": d.family, "description": d.description, "materials": n}
                          for d, n in queries.vocabulary_with_counts(db_session())])


@blueprint.post("/vocabulary")
def add_term():
    data = json_body({"term": TEXT, "family": OPTIONAL_TEXT, "description": OPTIONAL_TEXT})
    term = data.get("term")
    if not isinstance(term, str) or not term.strip():
        raise OlibraError("'term' is required (a non-empty string)")
    with write_transaction() as session:
        existed = term.strip().lower() in curation.vocabulary(session)
        descriptor = curation.add_descriptor(session, term, family=data.get("family"),
                                             description=data.get("description"), actor=current_user.username)
        body = {"term": descriptor.term, "family": descriptor.family, "description": descriptor.description}
    return jsonify(body), 200 if existed else 201


@blueprint.get("/jobs")
def jobs():
    recent = db_session().scalars(select(BackgroundJob).order_by(BackgroundJob.id.desc()).limit(50)).all()
    return jsonify(jobs=[queries.job_json(j) for j in recent], records=record_counts())


@blueprint.post("/jobs/recompute")
def recompute():
    data = json_body({"kinds": TEXT, "engine": TEXT})
    job_id = start(str(data.get("kinds", "all")), str(data.get("engine", "mmff")))
    with web_state().bookkeeping() as session:  # the request's own session predates the new row
        return jsonify(queries.job_json(session.get(BackgroundJob, job_id))), 202


@blueprint.get("/jobs/<int:job_id>")
def job(job_id: int):
    session = db_session()
    found = session.get(BackgroundJob, job_id)
    if found is None:
        abort(404, description=f"there is no job #{job_id}")
    return jsonify(queries.job_json(found))
