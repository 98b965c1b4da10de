"""The dashboard's forms (WTForms through Flask-WTF, so every POST form carries a CSRF token).

The forms check only what a browser can get wrong (required fields, lengths,
choices); the Vault validates meaning (units, codes, dates) and its errors come
back next to the field they name (:func:`show_error`).
"""

from __future__ import annotations

import re
from typing import Any

from flask_wtf import FlaskForm
from flask_wtf.file import FileField
from wtforms import BooleanField, HiddenField, SelectField, StringField, SubmitField, TextAreaField
from wtforms.fields.core import UnboundField
from wtforms.validators import DataRequired, Length, Optional, ValidationError

from magvault.errors import MagvaultError
from magvault.store.models import RUN_KINDS, SPECIMEN_KINDS

try:  # WTForms 3.3 declares options as SelectChoice (tuples are deprecated there)
    from wtforms import SelectChoice
except ImportError:  # older WTForms takes (value, label) tuples
    SelectChoice = None


def choices(pairs) -> list:
    """Options for a SelectField from (value, label) pairs, in the form this WTForms wants."""
    pairs = [(str(v), str(label)) for v, label in pairs]
    return [SelectChoice(v, label) for v, label in pairs] if SelectChoice else pairs


SHAPE_CHOICES = ("delimited", "sectioned", "commented", "blocks", "spreadsheet")
RUN_KIND_CHOICES = choices((k, k) for k in RUN_KINDS)


def id_prefix(prefix: str):
    """Give every field of a form an id of its own (several forms share a page, and their fields' names)."""
    def wrap(cls):
        for name in dir(cls):
            unbound = getattr(cls, name)
            if isinstance(unbound, UnboundField):
                unbound.kwargs.setdefault("id", f"{prefix}-{name}")
        return cls
    return wrap


def _required(what: str):
    return DataRequired(message=f"{what}: required")


class GetForm(FlaskForm):
    """A filter form read from the query string (GET: no CSRF token needed, nothing changes)."""

    class Meta:
        csrf = False


def _number_or_blank(label: str):
    def check(form, field):
        if field.raw_data and field.raw_data[0].strip() and field.data is None:
            raise ValidationError(f"{label}: expected a number, got {field.raw_data[0]!r}")
    return check


class LenientFloat(StringField):
    """A number that may be blank; bad text becomes an inline error, not a 500."""

    def process_formdata(self, valuelist):
        self.raw_data = valuelist
        text = (valuelist[0] if valuelist else "").strip()
        try:
            self.data = float(text.replace(",", ".")) if text else None
        except ValueError:
            self.data = None


class CollectionFilter(GetForm):
    q = StringField("Search", validators=[Optional(), Length(max=100, message="search: at most 100 characters")],
                    description="code, origin, storage, kind or superstructure")
    origin = SelectField("Origin", choices=[], validate_choice=False)
    superstructure = SelectField("Superstructure", choices=[], validate_choice=False)
    x_min = LenientFloat("x from", validators=[_number_or_blank("x from")])
    x_max = LenientFloat("x to", validators=[_number_or_blank("x to")])
    run_kind = SelectField("Has a run of kind", choices=[], validate_choice=False)
    transition = SelectField("Has a transition", choices=[], validate_choice=False)
    sort = SelectField("Sort by", choices=[], validate_choice=False)
    order = SelectField("Order", choices=choices([("asc", "ascending"), ("desc", "descending")]), validate_choice=False)
    page = StringField("Page")

    def validate_x_max(self, field):
        lo, hi = self.x_min.data, field.data
        if lo is not None and hi is not None and hi < lo:
            raise ValidationError(f"x to: {hi:g} is below x from ({lo:g}); give the range low to high")


class EventsFilter(GetForm):
    specimen = StringField("Specimen", validators=[Optional(),
                                                   Length(max=64, message="specimen: at most 64 characters")])
    user = StringField("User", validators=[Optional(), Length(max=64, message="user: at most 64 characters")])
    since = StringField("From (UTC)", validators=[Optional()], description="e.g. 2026-11-03 or 2026-11-03T10:00Z")
    until = StringField("Until (UTC)", validators=[Optional()])
    limit = StringField("Show at most")


@id_prefix("sp")
class SpecimenForm(FlaskForm):
    code = StringField("New specimen code", validators=[_required("code"), Length(max=64)],
                       description="letters, digits, . _ / -")
    kind = SelectField("Kind", choices=choices([("", "not recorded")] + [(k, k) for k in SPECIMEN_KINDS]),
                       validate_choice=False)
    mass = StringField("Mass", description="with its unit, e.g. 12.50 ± 0.02 mg or 12.5 mg")
    dims = StringField("Dimensions", description="e.g. 2.1 x 1.5 x 0.8 mm")
    origin = StringField("Origin", description="locality, core or synthesis batch")
    storage = StringField("Storage place")
    notes = TextAreaField("Notes")
    submit = SubmitField("Register specimen")


@id_prefix("pc")
class PieceForm(FlaskForm):
    parent = StringField("Cut from", validators=[_required("cut from")])
    code = StringField("New piece code", validators=[_required("code"), Length(max=64)])
    mass = StringField("Mass", description="with its unit, e.g. 3.20 ± 0.02 mg")
    dims = StringField("Dimensions", description="e.g. 1.0 x 1.0 x 0.5 mm")
    same_orientation = BooleanField("Cut keeping the parent's orientation (same axes)")
    storage = StringField("Storage place")
    notes = TextAreaField("Notes")
    submit = SubmitField("Record the piece")


@id_prefix("run")
class RunLogForm(FlaskForm):
    specimen = StringField("Specimen", validators=[_required("specimen")])
    kind = SelectField("Run kind", choices=RUN_KIND_CHOICES, validate_choice=False)
    status = SelectField("Status", choices=choices([("planned", "planned"), ("running", "running now")]),
                         validate_choice=False)
    started = StringField("Start (UTC)", description="ISO 8601, e.g. 2026-11-03T10:00; blank if not yet known")
    instrument = SelectField("Instrument", choices=[], validate_choice=False)
    operator = StringField("Operator", validators=[Optional(), Length(max=64)])
    direction = StringField("Field or beam direction", description="X, Y, Z (signed) or x,y,z in the specimen frame")
    group = StringField("Group label", description="ties runs measured together")
    notes = TextAreaField("Notes")
    submit = SubmitField("Log the run")


@id_prefix("imp")
class ImportForm(FlaskForm):
    run = SelectField("Attach to", choices=[], validate_choice=False)
    specimen = StringField("Specimen (for a new run)")
    kind = SelectField("Run kind (for a new run)", choices=RUN_KIND_CHOICES, validate_choice=False)
    file = FileField("Export file")
    shape = SelectField("File layout", choices=choices([("", "detect")] + [(s, s) for s in SHAPE_CHOICES]),
                        validate_choice=False)
    encoding = StringField("Text encoding", description="blank to detect (e.g. utf-8, latin-1)")
    instrument = SelectField("Instrument", choices=[], validate_choice=False)
    direction = StringField("Field or beam direction", description="X, Y, Z or x,y,z")
    group = StringField("Group label")
    conditions = TextAreaField("Conditions to set", description="one KEY=VALUE a line, e.g. wavelength=1.5406 A")
    mapping = StringField("Columns", description="only if the file's headers are not understood, "
                                                 "e.g. T=temperature_K, Signal=moment_A_m2")
    submit = SubmitField("Read the file and preview")


@id_prefix("chk")
class ImportConfirmForm(FlaskForm):
    token = HiddenField()
    run = HiddenField()
    specimen = HiddenField()
    kind = HiddenField()
    shape = SelectField("File layout", choices=choices([("", "detect")] + [(s, s) for s in SHAPE_CHOICES]),
                        validate_choice=False)
    encoding = HiddenField()
    instrument = HiddenField()
    direction = HiddenField()
    group = HiddenField()
    conditions = HiddenField()
    corrections = HiddenField()
    again = BooleanField("Import these bytes again as a new run (they were imported before)")
    reread = SubmitField("Read again with these columns")
    commit = SubmitField("Save the run")


@id_prefix("retract")
class RetractForm(FlaskForm):
    reason = StringField("Reason", validators=[_required("reason"),
                                               Length(min=3, max=500, message="reason: give a few words")])
    submit = SubmitField("Retract this run")


@id_prefix("supersede")
class SupersedeForm(FlaskForm):
    by = SelectField("Replaced by run", choices=[], validate_choice=False)
    reason = StringField("Reason", validators=[_required("reason"),
                                               Length(min=3, max=500, message="reason: give a few words")])
    submit = SubmitField("Mark superseded")


@id_prefix("derive")
class DeriveForm(FlaskForm):
    submit = SubmitField("Derive again")


@id_prefix("img")
class ImageForm(FlaskForm):
    specimen = HiddenField()
    run = HiddenField()
    file = FileField("Image (PNG, JPEG or TIFF)")
    pixel_size = StringField("Pixel size", description="length per pixel with its unit, e.g. 0.25 um or 12 nm")
    caption = StringField("Caption", validators=[Optional(), Length(max=500)])
    submit = SubmitField("Attach image")


@id_prefix("tr")
class TreatmentForm(FlaskForm):
    specimen = HiddenField()
    kind = StringField("Treatment", validators=[_required("treatment"), Length(max=32)],
                       description="e.g. anneal, quench, polish")
    at = StringField("When (UTC)", validators=[_required("when")], description="ISO 8601, e.g. 2026-11-03T10:00")
    conditions = TextAreaField("Conditions", description="one KEY=VALUE a line, e.g. temperature=573 K, "
                                                         "duration=2 h, atmosphere=argon")
    submit = SubmitField("Record treatment")


def lines(text: str | None) -> list[str]:
    """KEY=VALUE lines (or comma-free single line) -> list, blanks dropped."""
    return [ln.strip() for ln in re.split(r"[\r\n]+", text or "") if ln.strip()]


# The Vault's messages speak the command line's language; on a page, the form's own words fit.
_FOR_THE_PAGE = [
    (re.compile(r"pass --again to import them as a new run"), "tick “import again” to import them as a new run"),
    (re.compile(r"`magvault specimen list` shows the codes"), "the Collection page lists them"),
    (re.compile(r"`magvault runs` lists the runs"), "the specimen's page lists its runs"),
    (re.compile(r"`magvault profile list` shows the saved ones"), "none is saved under that name"),
    (re.compile(r"add it with `magvault instrument add`"), "choose one from the list"),
    (re.compile(r"attach its file with `magvault ingest FILE --run (\d+)`"),
     r"attach its export at the Bench (run \1)"),
    (re.compile(r"--set wavelength="), "the condition wavelength="),
    (re.compile(r"--map\b"), "columns"), (re.compile(r"--set\b"), "conditions"),
    (re.compile(r"--same-orientation"), "“same orientation”"), (re.compile(r"--parent\b"), "“cut from”"),
    (re.compile(r"--specimen CODE --kind RUN_KIND"), "a specimen and a run kind"),
    (re.compile(r"--run ID"), "a logged run"),
    (re.compile(r"--(specimen|kind|run|mass|direction|group|instrument|reason|measured|method|status)\b"), r"\1"),
]


def for_the_page(message: str) -> str:
    """A Vault error message in the dashboard's words (option names become field names)."""
    for pattern, replacement in _FOR_THE_PAGE:
        message = pattern.sub(replacement, message)
    return message


def show_error(form, exc: MagvaultError, aliases: dict[str, str] | None = None) -> None:
    """Put a Vault error next to the field it names, or above the form when no field matches."""
    name = (exc.field or "").strip().lstrip("-").replace("-", "_").replace(" ", "_").lower()
    name = (aliases or {}).get(name, name)
    field = getattr(form, name, None) if name else None
    message = for_the_page(exc.message)
    if field is not None and hasattr(field, "errors") and not isinstance(field, (HiddenField,)):
        field.errors = [*field.errors, message]
    else:
        form.form_errors.append(message)


def clean(value: Any) -> str | None:
    """Form text -> None when blank, else stripped."""
    if value is None:
        return None
    text = str(value).strip()
    return text or None


__all__ = ["CollectionFilter", "EventsFilter", "SpecimenForm", "PieceForm", "RunLogForm", "ImportForm",
           "ImportConfirmForm", "RetractForm", "SupersedeForm", "DeriveForm", "ImageForm", "TreatmentForm",
           "show_error", "for_the_page", "clean", "lines", "choices"]
