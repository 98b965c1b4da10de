"""Forms of the pages that look across the collection (overlay, shifts, map, coupled, saved queries).

The page forms are read from the query string (GET: nothing changes, no CSRF
token); every choice arrives as text and is checked here against the lists the
Vault knows, so an unknown value becomes an inline message naming the field
and the page falls back to its default rather than failing.  The one form that
changes something (saving a query) is a POST with a CSRF token.
"""

from __future__ import annotations

import re
from typing import Any, Iterable

from flask_wtf import FlaskForm
from wtforms import BooleanField, HiddenField, SelectField, SelectMultipleField, StringField, SubmitField
from wtforms.validators import Length, Optional

from magvault.errors import MagvaultError

from ..forms import GetForm, LenientFloat, choices, for_the_page, id_prefix

BRANCH_CHOICES = (("heating", "heating (rising temperature)"), ("cooling", "cooling"))


def _number(label: str):
    from wtforms.validators import ValidationError

    def check(form, field):
        if field.raw_data and field.raw_data[0].strip() and field.data is None:
            raise ValidationError(f"{label}: expected a number, got {field.raw_data[0]!r}")
    return check


FILTER_FIELDS = ("q", "origin", "superstructure", "x_min", "x_max")


def _filter_fields() -> dict[str, Any]:
    """Fresh copies of the collection page's filters (each form gets its own, so ids never leak between forms)."""
    return {
        "q": StringField("Search", validators=[Optional(), Length(max=100, message="search: at most 100 characters")],
                         description="code, origin, storage, kind or superstructure"),
        "origin": SelectField("Origin", choices=[], validate_choice=False),
        "superstructure": SelectField("Superstructure", choices=[], validate_choice=False),
        "x_min": LenientFloat("x from", validators=[_number("x from")]),
        "x_max": LenientFloat("x to", validators=[_number("x to")]),
    }


def with_filters(prefix: str):
    """Add the filters to a form class, then give every field an id starting with ``prefix``."""
    def wrap(cls):
        for name, unbound in _filter_fields().items():
            setattr(cls, name, unbound)
        return id_prefix(prefix)(cls)
    return wrap


@with_filters("ov")
class OverlayForm(GetForm):
    run_kind = SelectField("Curves of", choices=[], validate_choice=False)
    kind = SelectField("Transition marked", choices=[], validate_choice=False)
    source = SelectField("Specimens", choices=[], validate_choice=False)
    root = SelectField("Lineage of", choices=[], validate_choice=False,
                       description="the specimen and every piece cut from it")
    saved = SelectField("Saved query", choices=[], validate_choice=False)
    saved_rows = SelectField("From its result", choices=choices([
        ("flagged", "the specimens it flags"), ("all", "every specimen in it")]), validate_choice=False)
    runs = SelectField("Runs", choices=[], validate_choice=False)
    branch = SelectField("Branch", choices=choices(list(BRANCH_CHOICES) + [("both", "both")]),
                         validate_choice=False)
    y = SelectField("Plot", choices=[], validate_choice=False)
    norm = SelectField("Normalise", choices=[], validate_choice=False)
    ref_T = LenientFloat("Reference temperature", validators=[_number("reference temperature")],
                         description="for “to its value at”")
    colour = SelectField("Colour by", choices=[], validate_choice=False)
    span = SelectField("Temperature range", choices=[], validate_choice=False)
    t_min = LenientFloat("From", validators=[_number("from")])
    t_max = LenientFloat("To", validators=[_number("to")])


@id_prefix("sh")
class ShiftsForm(GetForm):
    kind = SelectField("Transition", choices=[], validate_choice=False)
    against = SelectField("Compare each specimen with", choices=[], validate_choice=False)
    reference = StringField("Fixed reference", validators=[Optional(), Length(max=40)],
                            description="a temperature, e.g. 32.0 K")
    against_run = StringField("Reference run", validators=[Optional(), Length(max=12)], description="a run id")
    sigma = LenientFloat("Flag at", validators=[_number("flag at")], description="|shift| ≥ this many σ")
    by = SelectField("Group references by", choices=[], validate_choice=False)
    bins = StringField("Field bin edges", validators=[Optional(), Length(max=200)],
                       description="tesla, comma-separated (grouping by field)")
    branch = SelectField("Branch", choices=choices(BRANCH_CHOICES), validate_choice=False)
    method = SelectField("Estimates from", choices=[], validate_choice=False)


@with_filters("map")
class MapForm(GetForm):
    kinds = SelectMultipleField("Transitions", choices=[], validate_choice=False)
    branch = SelectField("Branch", choices=choices(BRANCH_CHOICES), validate_choice=False)
    layout = SelectField("Draw", choices=choices([("together", "all kinds in one plot"),
                                                  ("apart", "one panel per kind")]), validate_choice=False)


@id_prefix("cp")
class CoupledForm(GetForm):
    compare = SelectField("Compare", choices=choices([("kinds", "two transitions"),
                                                      ("run_kinds", "one transition seen by two run kinds"),
                                                      ("methods", "one transition from two methods")]),
                          validate_choice=False)
    kind = SelectField("Transition", choices=[], validate_choice=False,
                       description="for run kinds or methods")
    a = SelectField("A", choices=[], validate_choice=False)
    b = SelectField("B", choices=[], validate_choice=False)
    branch = SelectField("Branch", choices=choices(BRANCH_CHOICES), validate_choice=False)
    sigma = LenientFloat("Coincide within", validators=[_number("coincide within")],
                         description="|B − A| below this many σ")


class LoopRatiosForm(GetForm):
    psd_md = SelectField("PSD/MD limit of Hcr/Hc", choices=choices([("4", "4 (as usually recalled)"),
                                                                    ("5", "5 (as restated in some texts)")]),
                         validate_choice=False, description="Day et al. (1977); sources differ")
    colour = SelectField("Colour by", choices=choices([("state", "domain state"), ("origin", "origin")]),
                         validate_choice=False)


@id_prefix("save")
class SaveQueryForm(FlaskForm):
    page = HiddenField()
    args = HiddenField()
    name = StringField("Name", validators=[Optional(), Length(max=64, message="name: at most 64 characters")],
                       description="letters, digits, spaces; 64 characters at most")
    replace = BooleanField("Replace a saved query of the same name")
    submit = SubmitField("Save")


class DeleteSavedForm(FlaskForm):
    name = HiddenField()
    submit = SubmitField("Delete")


def check_choice(field, allowed: Iterable[Any], label: str, default: Any) -> Any:
    """The field's value when it is one of ``allowed``; else an inline error and ``default``.

    A blank value means "not given" and quietly takes the default.
    """
    allowed = list(allowed)
    value = field.data
    if value in (None, ""):
        return default
    if value in allowed:
        return value
    shown = ", ".join(str(a) for a in allowed[:12]) or "none recorded yet"
    field.errors = [*field.errors, f"{label}: {value!r} is not one of: {shown}"]
    return default


def set_choices(field, pairs) -> None:
    field.choices = choices(pairs)


def page_message(exc: MagvaultError) -> str:
    """A Vault message in the page's words (``--against-run`` becomes “reference run”)."""
    text = for_the_page(exc.message)
    for option, words in _OPTION_WORDS.items():
        text = text.replace(option, words)
    return re.sub(r"--([a-z][a-z-]*)", lambda m: m.group(1).replace("-", " "), text)


_OPTION_WORDS = {"--against-run": "reference run", "--reference KELVIN": "a fixed reference",
                 "--against MODE": "a comparison", "--reference": "fixed reference", "--against": "compare with",
                 "--sigma": "flag at", "--run-kinds": "run kinds", "--kinds": "transitions"}


__all__ = ["OverlayForm", "ShiftsForm", "MapForm", "CoupledForm", "SaveQueryForm", "FILTER_FIELDS", "with_filters",
           "check_choice", "set_choices", "page_message", "BRANCH_CHOICES"]
