"""The base presets page: the rules of thumb `stable in base` uses (which groups each product base
usually attacks); curators edit a built-in preset, add their own and remove what they stored."""

from __future__ import annotations

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from library import functional_groups
from library.catalogue import base_preset_store
from library.errors import OlibraError
from webui import db_session, write_transaction
from webui.errors import user_message
from webui.forms import PresetForm, RemoveForm, split_lines

blueprint = Blueprint("presets", __name__)


def _page(form: PresetForm, status: int = 200):
    return render_template("presets/index.html", form=form, presets=base_preset_store.presets(db_session()),
                           remove_form=RemoveForm(), group_names=list(functional_groups.VOCABULARY)), status


@blueprint.get("/presets")
def index():
    form = PresetForm()
    chosen = request.args.get("edit", "").strip().lower()
    for preset in base_preset_store.presets(db_session()):
        if preset.name.lower() == chosen:
            form.name.data, form.groups.data, form.why.data = preset.name, "\n".join(preset.groups), preset.why
            form.source.data = preset.source
    return _page(form)


@blueprint.post("/presets")
def save():
    form = PresetForm()
    if not form.validate():
        return _page(form, 400)
    try:
        with write_transaction() as session:
            saved = base_preset_store.save_preset(session, form.name.data, split_lines(form.groups.data),
                                                  why=form.why.data, source=form.source.data,
                                                  actor=current_user.username)
    except OlibraError as exc:
        form.groups.errors = [*form.groups.errors, user_message(exc)]
        return _page(form, 400)
    flash(f"Saved base preset {saved.name!r}: avoids {', '.join(saved.groups)}.", "success")
    return redirect(url_for("presets.index"))


@blueprint.post("/presets/remove")
def remove():
    if not RemoveForm().validate():
        abort(400, description="The form expired; reload the page and try again.")
    name = request.form.get("name", "")
    try:
        with write_transaction() as session:
            restored = base_preset_store.remove_preset(session, name, actor=current_user.username)
    except OlibraError as exc:
        flash(user_message(exc), "error")
    else:
        flash(f"Removed base preset {name.strip()!r}" + ("; the built-in version is in effect again." if restored
                                                          else "."), "success")
    return redirect(url_for("presets.index"))
