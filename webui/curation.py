"""Curation pages: add a material, edit one, bulk import, the odor vocabulary (curators only write)."""

from __future__ import annotations

from functools import wraps
from pathlib import Path

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user
from sqlalchemy.orm import selectinload
from werkzeug.utils import secure_filename

from library.catalogue import curation, restrictions, transfer
from library.catalogue.curation import FieldErrors
from library.catalogue.edits import MaterialChanges, apply_changes, odor_text
from library.catalogue.models import Material, MaterialOdor, Restriction
from library.errors import OlibraError
from webui import begin_write, db_session, jobs, queries, write_transaction
from webui.errors import user_message
from webui.forms import (
    ComponentsForm,
    EditMaterialForm,
    ImportForm,
    MaterialForm,
    RemoveForm,
    RestrictionForm,
    VocabularyForm,
    split_lines,
)

blueprint = Blueprint("curation", __name__)

IMPORT_SUFFIXES = (".csv", ".tsv", ".txt", ".sdf", ".sd")


def curators_only(view):
    """Forms only a curator can submit are not shown to readers either (writes are refused in auth)."""
    @wraps(view)
    def guarded(*args, **kwargs):
        if not (current_user.is_authenticated and current_user.is_curator):
            abort(403, description="Only curators can add, edit or import materials; "
                                   "your account can read the catalogue.")
        return view(*args, **kwargs)
    return guarded


def material_input(values: dict) -> curation.MaterialInput:
    """The add form's or the API's values as typed (checked by curation.check_new_material)."""
    odors = values.get("odors") or ""
    if isinstance(odors, list):
        odors = "|".join(str(o) for o in odors)
    synonyms = values.get("synonyms") or []
    if isinstance(synonyms, str):
        synonyms = split_lines(synonyms)
    return curation.MaterialInput(
        structure=values.get("structure") or "", name=values.get("name") or "", synonyms=list(synonyms),
        cas=values.get("cas") or "", family=values.get("family") or "", notes=values.get("notes") or "",
        odors=odors, source=values.get("source") or "")


def show_field_errors(form, exc: FieldErrors, fields: dict[str, str] | None = None) -> None:
    """Put each of the core's field errors beside its form field (the rest above the form)."""
    for key, messages in exc.errors.items():
        target = getattr(form, (fields or {}).get(key, key), None)
        if target is None or not hasattr(target, "errors"):
            form.form_errors.extend(messages)
        else:
            target.errors = [*target.errors, *messages]


def form_checked(form) -> bool:
    """True unless the CSRF token is missing or stale; the form's length limits keep their messages.

    The form does not stop at its own field errors: the core checks every field
    again, so all problems are shown together in one pass."""
    form.validate()
    return not (getattr(form, "csrf_token", None) is not None and form.csrf_token.errors)


@blueprint.route("/materials/new", methods=["GET", "POST"])
@curators_only
def add_material():
    form = MaterialForm()
    existing = None
    status = 200
    if request.method == "POST":
        status = 400
        if form_checked(form):
            try:
                with write_transaction() as session:
                    draft, existing = curation.check_new_material(session, material_input(form.data))
                    outcome = None if existing else curation.add_material(
                        session, draft, actor=current_user.username)
                if outcome is not None and outcome.added:
                    flash(f"Added #{outcome.material.id} {outcome.material.preferred_name}.", "success")
                    jobs.queue_new_materials([outcome.material.id])
                    return redirect(url_for("browse.material", material_id=outcome.material.id))
                existing = existing or outcome.material
                status = 409
            except FieldErrors as exc:
                show_field_errors(form, exc)
            except OlibraError as exc:
                form.form_errors.append(user_message(exc))
    return render_template("curation/add.html", form=form, existing=existing), status


def _material_for_edit(material_id: int) -> Material:
    material = db_session().get(Material, material_id, options=(
        selectinload(Material.synonyms), selectinload(Material.provenance),
        selectinload(Material.odors).selectinload(MaterialOdor.descriptor)))
    if material is None:
        abort(404, description=f"There is no material #{material_id} to edit.")
    return material


class StaleEdit(OlibraError):
    def __init__(self):
        super().__init__("Someone changed this material after you opened the form. "
                         "Open the edit page again to see the current values; nothing was saved.")


def _stamp(material: Material) -> str:
    return material.updated_at.isoformat() if material.updated_at else ""


@blueprint.route("/materials/<int:material_id>/edit", methods=["GET", "POST"])
@curators_only
def edit_material(material_id: int):
    material = _material_for_edit(material_id)
    form = EditMaterialForm()
    if request.method == "GET":
        form.name.data = material.preferred_name
        form.synonyms.data = "\n".join(s.name for s in material.synonyms)
        form.cas.data = material.cas_rn or ""
        form.family.data = material.olfactive_family or ""
        form.odors.data = odor_text(material)
        form.notes.data = material.notes or ""
        form.status.data = material.status
        form.restricted.data = material.restricted
        form.loaded_at.data = _stamp(material)
        return render_template("curation/edit.html", form=form, material=material)
    if form_checked(form):
        changes = MaterialChanges(
            name=form.name.data, synonyms=split_lines(form.synonyms.data), cas=form.cas.data or "",
            family=form.family.data or "", notes=form.notes.data or "", odors=form.odors.data or "",
            odor_source=form.odor_source.data or "", source=form.source.data or "",
            status=form.status.data, restricted=form.restricted.data)
        try:
            with write_transaction() as session:
                # Read again inside the write (locked: FOR UPDATE on PostgreSQL, BEGIN IMMEDIATE on SQLite),
                # so of two simultaneous edits the second sees the first one's change.
                material = session.get(Material, material_id, with_for_update=True, populate_existing=True)
                if material is None or form.loaded_at.data != _stamp(material):
                    raise StaleEdit()
                changed = apply_changes(session, material, changes, actor=current_user.username)
        except FieldErrors as exc:
            show_field_errors(form, exc)
        except OlibraError as exc:
            form.form_errors.append(user_message(exc))
        else:
            flash(f"Saved: {', '.join(f.replace('_', ' ') for f in changed)}." if changed
                  else "Nothing changed.", "success")
            return redirect(url_for("browse.material", material_id=material_id))
        material = _material_for_edit(material_id)  # the values as stored, after the rollback
    return render_template("curation/edit.html", form=form, material=material), 400


@blueprint.route("/materials/<int:material_id>/restrictions", methods=["GET", "POST"])
@curators_only
def material_restrictions(material_id: int):
    """The material's regulatory entries, a form to record another and a button to remove each."""
    material = _material_for_edit(material_id)
    form = RestrictionForm()
    status = 200
    if request.method == "POST":
        status = 400
        if form_checked(form):
            try:
                entry = restrictions.check_entry(
                    kind=form.kind.data, authority=form.authority.data, reference=form.reference.data,
                    max_percent=form.max_percent.data, category=form.category.data, date=form.date.data,
                    source=form.source.data)
                with write_transaction() as session:
                    stored = session.get(Material, material_id, with_for_update=True)
                    if stored is None:  # removed since the page was read
                        abort(404, description=f"There is no material #{material_id} any more.")
                    added = restrictions.add_restriction(session, stored, entry, actor=current_user.username)
                    label = restrictions.tag(added)
            except OlibraError as exc:
                form.form_errors.append(user_message(exc))
            else:
                flash(f"Recorded: {label}.", "success")
                return redirect(url_for("curation.material_restrictions", material_id=material_id))
        material = _material_for_edit(material_id)
    return render_template("curation/restrictions.html", form=form, remove=RemoveForm(), material=material,
                           entries=material.restrictions, describe=restrictions.describe), status


@blueprint.post("/materials/<int:material_id>/components")
@curators_only
def material_components(material_id: int):
    """Record the components of a mixture (they replace the recorded ones); every bad key is reported."""
    from library.catalogue import mixtures

    form = ComponentsForm()
    if not form.validate():
        abort(400, description="The form expired; reload the page and try again.")
    try:
        with write_transaction() as session:
            stored = session.get(Material, material_id, with_for_update=True)
            if stored is None:
                abort(404, description=f"There is no material #{material_id} any more.")
            found = mixtures.set_components(session, stored, split_lines(form.components.data),
                                            actor=current_user.username)
    except OlibraError as exc:
        flash(f"Components not changed: {user_message(exc)}", "error")
    else:
        flash("Components: " + (", ".join(c.preferred_name for c in found) or "none") + ".", "success")
    return redirect(url_for("browse.material", material_id=material_id))


@blueprint.post("/materials/<int:material_id>/restrictions/<int:restriction_id>/remove")
@curators_only
def remove_material_restriction(material_id: int, restriction_id: int):
    if not RemoveForm().validate_on_submit():
        abort(400, description="The form's security token is missing or expired; reload the page and try again.")
    try:
        with write_transaction() as session:
            row = session.get(Restriction, restriction_id)
            if row is None or row.material_id != material_id:
                raise curation.CurationError(f"material #{material_id} has no restriction entry #{restriction_id}; "
                                             "it may have been removed already")
            _, label = restrictions.remove_restriction(session, restriction_id, actor=current_user.username)
    except OlibraError as exc:
        flash(user_message(exc), "error")
    else:
        flash(f"Removed: {label}.", "success")
    return redirect(url_for("curation.material_restrictions", material_id=material_id))


def run_import(filename: str, data: bytes, *, keep_good: bool, structure_source: str | None,
               actor: str) -> transfer.ImportReport:
    """Import an uploaded file in one transaction; stored only if no row was rejected or `keep_good`.

    The added materials' shape and vibration records are then queued as one background job."""
    suffix = Path(secure_filename(filename or "")).suffix.lower()
    if suffix not in IMPORT_SUFFIXES:
        raise transfer.ImportFileError(
            f"{filename or 'the file'!r} is not a CSV, TSV or SDF file (its name should end in "
            f"{', '.join(IMPORT_SUFFIXES)}); export your data in one of these formats and upload it again")
    rows = transfer.read_rows(f"upload{suffix}", data=data)
    staged = transfer.stage_rows(rows, default_structure_source=structure_source or None)
    session = begin_write()
    try:
        report = transfer.store_staged(session, staged, keep_good=keep_good, actor=actor)
        if report.committed:
            session.commit()
        else:
            session.rollback()
    except BaseException:
        session.rollback()
        raise
    if report.committed:
        jobs.queue_new_materials([r.material_id for r in report.rows
                                  if r.status == "added" and r.material_id is not None])
    return report


@blueprint.route("/import", methods=["GET", "POST"])
@curators_only
def import_file():
    form = ImportForm()
    report = None
    status = 200
    if request.method == "POST":
        status = 400
        if form.validate():
            upload = form.file.data
            try:
                report = run_import(upload.filename, upload.read(), keep_good=form.keep_good.data,
                                    structure_source=(form.structure_source.data or "").strip(),
                                    actor=current_user.username)
                status = 200 if report.committed else 422
            except OlibraError as exc:
                form.file.errors = [*form.file.errors, user_message(exc)]
    return render_template("curation/import.html", form=form, report=report), status


@blueprint.route("/vocabulary", methods=["GET", "POST"])
def vocabulary():
    form = VocabularyForm()
    status = 200
    if request.method == "POST":
        status = 400
        if form.validate():
            try:
                with write_transaction() as session:
                    term = form.term.data.strip().lower()
                    known = term in curation.vocabulary(session)
                    curation.add_descriptor(session, term, family=form.family.data,
                                            description=form.description.data, actor=current_user.username)
                flash(f"{term!r} was already in the vocabulary." if known
                      else f"Added {term!r} to the vocabulary.", "notice" if known else "success")
                return redirect(url_for("curation.vocabulary"))
            except OlibraError as exc:
                form.term.errors = [*form.term.errors, user_message(exc)]
    terms = queries.vocabulary_with_counts(db_session())
    return render_template("curation/vocabulary.html", form=form, terms=terms), status
