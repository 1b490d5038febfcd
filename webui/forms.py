"""The curation forms (Flask-WTF: each carries its CSRF token).

Field values are checked in the core (library.catalogue), which reports every problem at once;
the forms keep only length limits and the CSRF token."""

from __future__ import annotations

from flask_wtf import FlaskForm
from flask_wtf.file import FileField, FileRequired
from wtforms import BooleanField, HiddenField, SelectField, StringField, TextAreaField
from wtforms.validators import DataRequired, Length, Optional

from library.catalogue.models import MATERIAL_STATUSES, RESTRICTION_KINDS
from library.catalogue.observations import OBSERVATION_KINDS
from library.vibration import engines

PROVENANCE_HELP = ("from memory, demo, measured: <how>, computed: <how>, "
                   "or literature: <journal volume, page (year)>")


def split_lines(text: str | None) -> list[str]:
    """Synonyms typed one per line (or separated by '|')."""
    return [part.strip() for line in (text or "").splitlines() for part in line.split("|") if part.strip()]


class MaterialForm(FlaskForm):
    structure = TextAreaField(
        "Structure", validators=[Length(max=100_000)],
        description="SMILES, InChI or a molfile block; stereochemistry and isotopes are kept.")
    name = StringField("Preferred name", validators=[Length(max=200)])
    synonyms = TextAreaField("Synonyms", validators=[Optional(), Length(max=10_000)],
                             description="One per line.")
    cas = StringField("CAS RN", validators=[Optional(), Length(max=20)],
                      description="Checked with the check digit rule, e.g. 106-22-9.")
    family = StringField("Olfactive family", validators=[Optional(), Length(max=40)])
    odors = StringField("Odor descriptors", validators=[Optional(), Length(max=2000)],
                        description="Vocabulary terms separated by commas, each optionally term:strength "
                                    "with a strength from 0 to 1, e.g. citrus:0.8, green.")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=10_000)])
    source = StringField("Source of these values", default="from memory",
                         validators=[Optional(), Length(max=500)],
                         description=PROVENANCE_HELP)


class EditMaterialForm(FlaskForm):
    name = StringField("Preferred name", validators=[Length(max=200)])
    synonyms = TextAreaField("Synonyms", validators=[Optional(), Length(max=10_000)],
                             description="One per line.")
    cas = StringField("CAS RN", validators=[Optional(), Length(max=20)])
    family = StringField("Olfactive family", validators=[Optional(), Length(max=40)])
    odors = StringField("Odor descriptors", validators=[Optional(), Length(max=2000)],
                        description="Terms separated by commas, each optionally term:strength (0 to 1).")
    odor_source = StringField("Source of changed odor descriptors", default="from memory",
                              validators=[Optional(), Length(max=500)], description=PROVENANCE_HELP)
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=10_000)])
    source = StringField("Source of the other changed values", default="from memory",
                         validators=[Optional(), Length(max=500)], description=PROVENANCE_HELP)
    status = SelectField("Status", choices=list(MATERIAL_STATUSES))
    restricted = BooleanField("Restricted (kept out of substitute lists)")
    loaded_at = HiddenField()


class RestrictionForm(FlaskForm):
    kind = SelectField("Kind", choices=list(RESTRICTION_KINDS),
                       description="prohibited and restricted keep the material out of substitute lists.")
    authority = StringField("Authority or standard", validators=[Length(max=200)],
                            description="As text, e.g. IFRA Standards or EU Regulation (EC) No 1223/2009.")
    max_percent = StringField("Maximum level (%)", validators=[Optional(), Length(max=20)],
                              description="For restricted or allergen entries, e.g. 0.01.")
    category = StringField("Product category", validators=[Optional(), Length(max=200)])
    reference = StringField("Reference", validators=[Optional(), Length(max=500)])
    date = StringField("Date", validators=[Optional(), Length(max=20)], description="YYYY-MM-DD")
    source = StringField("Source", default="from memory", validators=[Optional(), Length(max=500)],
                         description=PROVENANCE_HELP)


class RemoveForm(FlaskForm):
    """A button that posts with the CSRF token and nothing else."""


class ImportForm(FlaskForm):
    file = FileField("File", validators=[FileRequired(message="Choose a CSV, TSV or SDF file to import.")],
                     description="CSV/TSV with a header row, or SDF; columns as in the import format.")
    keep_good = BooleanField("Keep the good rows when some rows are rejected")
    structure_source = StringField(
        "Source for rows without a structure_source", validators=[Optional(), Length(max=500)],
        description="Leave empty to reject such rows; otherwise e.g. from memory.")


class ObservationForm(FlaskForm):
    file = FileField("File", validators=[FileRequired(message="Choose a CSV file of measured values.")],
                     description="CSV: material,variable,value (one value per row), or material plus one "
                                 "column per variable (one material per row).")
    set_name = StringField("Data set name", validators=[DataRequired(message="Name the data set."),
                                                        Length(max=100)])
    kind = SelectField("Kind", choices=list(OBSERVATION_KINDS))
    source = StringField("Source", validators=[DataRequired(message="Say where the data come from."),
                                               Length(max=500)],
                         description="e.g. measured: in-house panel of 12, 2026-05 (" + PROVENANCE_HELP + ")")
    unit = StringField("Unit", validators=[Optional(), Length(max=40)], description="e.g. intensity 0-10")
    description = StringField("Description", validators=[Optional(), Length(max=500)])
    replace = BooleanField("Replace the data set of the same name")


class ComponentsForm(FlaskForm):
    components = TextAreaField("Components", validators=[Optional(), Length(max=4000)],
                               description="One material per line (name, synonym, CAS RN, InChIKey or id); "
                                           "empty: no components.")


class PresetForm(FlaskForm):
    name = StringField("Product base", validators=[DataRequired(message="Name the product base."), Length(max=60)],
                       description="A built-in name replaces that preset with your version.")
    groups = TextAreaField("Groups to avoid", validators=[DataRequired(message="List at least one group."),
                                                          Length(max=4000)],
                           description="One per line: a group name from the list below, or a SMARTS pattern.")
    why = StringField("Why", validators=[Optional(), Length(max=500)],
                      description="What the base does to those groups.")
    source = StringField("Source", validators=[Optional(), Length(max=500)],
                         description="Where the rule comes from; empty: common practice, no source.")


class VocabularyForm(FlaskForm):
    term = StringField("Term", validators=[DataRequired(message="Give the new term."), Length(max=60)])
    family = StringField("Family", validators=[Optional(), Length(max=40)])
    description = StringField("Description", validators=[Optional(), Length(max=500)])


class RecomputeForm(FlaskForm):
    kinds = SelectField("Records (all: shape and vibration)", choices=["all", "shape", "vibration"])
    engine = SelectField("Vibration engine", choices=list(engines.keys()))
