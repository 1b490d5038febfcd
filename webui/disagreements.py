"""The disagreements page: pairs where shape and vibration disagree, with the observed similarity,
sortable and paged, a CSV export, and a pair flag per row for curators."""

from __future__ import annotations

from urllib.parse import urlsplit

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_login import current_user

from library.catalogue import curation, observations
from library.errors import OlibraError
from library.search import disagreements
from library.search.disagreements import DIRECTIONS, sides_with_tally, tally_lines
from webui import explore, write_transaction
from webui.errors import user_message

blueprint = Blueprint("disagreements", __name__)

CSV_COLUMNS = ["direction", "basis", "a_id", "a", "b_id", "b", "gap", "shape", "vibration", "handedness",
               "within_noise", "structure", "observed", "sides_with", "flags"]
MAX_NOTE_CHARS = 1000
COLUMNS = [("direction", "Direction"), ("basis", "Basis"), ("a", "Material A"), ("b", "Material B"),
           ("gap", "Gap"), ("shape", "Shape"), ("vibration", "Vibration"), ("structure", "Structure"),
           ("observed", "Observed"), ("sides_with", "Sides with")]


@blueprint.get("/disagreements")
def index():
    error = rows = label = used = None
    tally: list[str] = []
    page = pages = 1
    sort, order = request.args.get("sort", "rank"), request.args.get("order", "asc")
    sources = []
    try:
        sources = explore.observation_sources()
        asked = explore.disagreement_request(request.args)
    except OlibraError as exc:
        asked, error = explore.DisagreementRequest(), user_message(exc)
    total = 0
    if error is None:
        try:
            found, label = explore.find_disagreements(asked)
            used = explore.thresholds_used(asked)
            ordered = explore.sort_rows(found, sort, order)
            total = len(ordered)
            tally = tally_lines(sides_with_tally([r.pair for r in ordered]))
            page, pages = explore.page_argument(request.args, total, explore.DISAGREEMENTS_PER_PAGE)
            start = (page - 1) * explore.DISAGREEMENTS_PER_PAGE
            rows = ordered[start:start + explore.DISAGREEMENTS_PER_PAGE]
        except OlibraError as exc:
            error = user_message(exc)
    return render_template(
        "disagreements/index.html", asked=asked, rows=rows, label=label, used=used, error=error, total=total, page=page,
        pages=pages, sort=sort, order=order, columns=COLUMNS, directions=DIRECTIONS, sources=sources,
        flag_kinds=observations.FLAG_KINDS, tally=tally, vibration_sides=disagreements.VIBRATION_SIDE_METRICS,
        model_caution=_model_caution(asked), default_flag_kind=disagreements.default_flag_kind, link=_link,
        here=request.full_path.rstrip("?")), 400 if error else 200


def _model_caution(asked) -> str | None:
    if asked.vibration_metric != "tunnelling":
        return None
    from library.vibration.tunnelling import MODEL_NOTE

    return f"{MODEL_NOTE[0].upper()}{MODEL_NOTE[1:]}."


def _link(endpoint: str = "disagreements.index", **changes) -> str:
    """This page's (or its CSV's) address with some arguments changed."""
    params = request.args.to_dict()
    for key, value in changes.items():
        if value is None:
            params.pop(key, None)
        else:
            params[key] = value
    return url_for(endpoint, **params)


@blueprint.get("/disagreements.csv")
def export():
    asked = explore.disagreement_request(request.args)
    found, label = explore.find_disagreements(asked)
    ordered = explore.sort_rows(found, request.args.get("sort", "rank"), request.args.get("order", "asc"))
    rows = []
    for row in ordered:
        data = explore.disagreement_row(row)
        data.update(a_id=row.a.id, a=row.a.name, b_id=row.b.id, b=row.b.name)
        rows.append(data)
    return explore.csv_response(rows, CSV_COLUMNS, "disagreements.csv",
                                caution=f"observed similarity: {label or 'none'}")


def store_flag(key_a: str, key_b: str, kind: str, note: str | None) -> dict:
    """Store one pair flag in one transaction (nothing is stored when anything is wrong); the flag as a dict."""
    note = (note or "").strip()
    if len(note) > MAX_NOTE_CHARS:
        raise explore.ArgumentError(f"the note is {len(note)} characters long; use at most {MAX_NOTE_CHARS}")
    if not key_a or not key_b:
        raise explore.ArgumentError("a flag needs both materials of the pair")
    with write_transaction() as session:
        a = curation.find_material(session, key_a)
        b = curation.find_material(session, key_b)
        flag = observations.flag_pair(session, a, b, kind=kind, note=note or None, actor=current_user.username)
        low, high = sorted((a, b), key=lambda m: m.id)
        return {"id": flag.id, "a": {"id": low.id, "name": low.preferred_name},
                "b": {"id": high.id, "name": high.preferred_name}, "kind": flag.kind, "note": flag.note,
                "created_by": flag.created_by}


def _back(allowed: tuple[str, ...] = ("/disagreements",)) -> str:
    """The page the form came from ('next'), if it is one of ours; else the disagreements page."""
    target = request.form.get("next") or ""
    parts = urlsplit(target)
    if parts.scheme or parts.netloc or not parts.path.startswith(allowed):
        return url_for("disagreements.index")
    return target


@blueprint.post("/flags/<int:flag_id>/edit")
def edit_flag(flag_id: int):
    """Change a flag's kind or note (curators; audited)."""
    try:
        with write_transaction() as session:
            flag = observations.edit_flag(session, flag_id, kind=request.form.get("kind", ""),
                                          note=request.form.get("note", ""), actor=current_user.username)
            flash(f"Flag #{flag.id} is now: {flag.kind}.", "success")
    except OlibraError as exc:
        flash(f"The flag was not changed: {user_message(exc)}", "error")
    return redirect(_back(("/disagreements", "/materials/")), code=303)


@blueprint.post("/flags/<int:flag_id>/withdraw")
def withdraw_flag(flag_id: int):
    """Withdraw a flag (curators); the history keeps what it said."""
    try:
        with write_transaction() as session:
            observations.withdraw_flag(session, flag_id, actor=current_user.username)
        flash(f"Flag #{flag_id} was withdrawn.", "success")
    except OlibraError as exc:
        flash(f"The flag was not withdrawn: {user_message(exc)}", "error")
    return redirect(_back(("/disagreements", "/materials/")), code=303)


@blueprint.post("/disagreements/flag")
def flag():
    target = _back()
    try:
        flag = store_flag(request.form.get("a", "").strip(), request.form.get("b", "").strip(),
                          request.form.get("kind", ""), request.form.get("note", ""))
        flash(f"Flagged #{flag['a']['id']} {flag['a']['name']} and #{flag['b']['id']} {flag['b']['name']}: "
              f"{flag['kind']}.", "success")
    except OlibraError as exc:
        flash(f"Nothing was flagged: {exc}", "error")
    return redirect(target, code=303)
