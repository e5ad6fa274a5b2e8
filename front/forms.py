"""Forms of the fleet pages: the rental desk, the unit list filters and the CSV upload.

The desk forms only check what was typed; the fleet rules themselves live in
``fleet/services.py`` and the views turn a ``ServiceError`` into a form error.
"""

import datetime as dt

from django import forms
from django.conf import settings
from django.contrib.auth.validators import UnicodeUsernameValidator
from django.forms.renderers import Jinja2
from django.utils import timezone

from reports import formatting as fmt
from scheduling.loader import active_policy
from scheduling.models import UnitForecast

from . import selectors
from .workflows import OVERRIDE_STATUSES, checkout_forecast_note, checkout_reason_needed
from fleet.models import AMBIENT_MAX_C, AMBIENT_MIN_C, EARLIEST_DATE, Role, Unit
from fleet.roles import ROLE_LABELS, ROLES

FUTURE_SLACK = dt.timedelta(minutes=5)


SCANNER_ATTRS = {
    "autocomplete": "off",
    "autocapitalize": "characters",
    "spellcheck": "false",
    "class": "tag-input",
    "placeholder": "scan or type",
}


def ambient_field(label, **kwargs):
    return forms.FloatField(
        label=label,
        min_value=AMBIENT_MIN_C,
        max_value=AMBIENT_MAX_C,
        error_messages={
            "invalid": "Enter the temperature as a number of degrees Celsius, such as 24 or 31.5.",
            "min_value": f"That is colder than {AMBIENT_MIN_C:g} °C; check the reading.",
            "max_value": f"That is hotter than {AMBIENT_MAX_C:g} °C; check the reading.",
        },
        widget=forms.NumberInput(attrs={"step": "any", "inputmode": "decimal"}),
        **kwargs,
    )


def hours_field(label, help_text):
    return forms.FloatField(
        label=label,
        required=False,
        min_value=0,
        help_text=help_text,
        error_messages={
            "invalid": "Enter hours as a number, such as 6 or 12.5.",
            "min_value": "Hours cannot be negative.",
        },
        widget=forms.NumberInput(attrs={"step": "any", "min": "0", "inputmode": "decimal"}),
    )


def moment_field(label):
    return forms.DateTimeField(
        label=label,
        required=False,
        help_text="Leave empty for now.",
        input_formats=["%Y-%m-%dT%H:%M", "%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M", "%Y-%m-%d %H:%M:%S"],
        widget=forms.DateTimeInput(attrs={"type": "datetime-local"}, format="%Y-%m-%dT%H:%M"),
        error_messages={"invalid": "Enter a date and time, such as 2024-05-17 09:30."},
    )


#: The app's forms draw their labels, widgets and errors with Django's own
#: Jinja2 form renderer and its widget templates: the same HTML as Django's
#: template renderer (a test holds every form's fields equal under both),
#: about 1 ms less for the desk's six fields.  One instance, so its compiled
#: templates are kept; the admin keeps Django's renderer (its widgets have no
#: Jinja2 templates).
FORM_RENDERER = Jinja2()


class PlainForm(forms.Form):
    """Labels without a trailing colon; drawn by ``FORM_RENDERER``."""

    default_renderer = FORM_RENDERER

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("label_suffix", "")
        super().__init__(*args, **kwargs)


class DeskForm(PlainForm):
    """Shared parts of the two desk forms: the tag lookup and where the cursor goes."""

    asset_tag = forms.CharField(
        label="Asset tag", max_length=40, widget=forms.TextInput(attrs=SCANNER_ATTRS),
        error_messages={"required": "Scan or type the unit's asset tag."},
    )

    moment_name = None  # "out_at" or "in_at"

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.unit = None

    def clean_asset_tag(self):
        tag = selectors.normalise_tag(self.cleaned_data["asset_tag"])
        if not tag:
            raise forms.ValidationError("Scan or type the unit's asset tag.")
        unit = selectors.unit_by_tag(tag, related=False)
        if unit is None:
            raise forms.ValidationError(f"No unit has the asset tag {tag}. Check the label and try again.")
        self.unit = unit
        return unit.asset_tag

    def clean_moment(self, name):
        value = self.cleaned_data.get(name)
        if value is not None and value > timezone.now() + FUTURE_SLACK:
            raise forms.ValidationError("That time is in the future; leave it empty for now.")
        if value is not None and value.date() < EARLIEST_DATE:
            raise forms.ValidationError(f"That date is before {EARLIEST_DATE.year}; check the year.")
        return value

    def focus(self):
        """Put the cursor where the next keystroke belongs (no script needed):
        the first field with an error, else the tag box when it is empty,
        else the first empty field after it."""
        target = None
        if self.is_bound and self.errors:
            target = next((name for name in self.fields if name in self.errors), "asset_tag")
        elif not self.is_bound and self.initial.get("asset_tag"):
            target = next(
                (name for name, f in self.fields.items()
                 if name != "asset_tag" and f.required and self.initial.get(name) in (None, "")),
                None,
            )
            if target is None:
                target = next(name for name in self.fields if name != "asset_tag")
        else:
            target = "asset_tag"
        for name, field in self.fields.items():
            field.widget.attrs.pop("autofocus", None)
        self.fields[target].widget.attrs["autofocus"] = True
        return target


class CheckOutForm(DeskForm):
    job_ref = forms.CharField(label="Job reference", max_length=40,
                              error_messages={"required": "Give the job reference for this hire."},
                              widget=forms.TextInput(attrs={"autocomplete": "off"}))
    expected_ambient_c = ambient_field("Expected venue ambient (°C)", initial=25)
    out_at = moment_field("Checked out at")
    override_reason = forms.CharField(
        label="Reason for sending it out against the forecast", required=False, max_length=500,
        help_text="Recorded with your name and the time, and shown on the unit's page.",
        widget=forms.TextInput(attrs={"autocomplete": "off", "class": "wide"}),
    )

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.forecast = None
        self.needs_confirmation = False
        self.note = self.stop = ""
        self.policy = active_policy()
        if not self.is_bound and self.initial.get("asset_tag"):
            # a tag from the scan box: say at once what the forecast says, and ask for a reason up front if needed
            unit = selectors.unit_by_tag(self.initial["asset_tag"])
            if unit is not None and unit.status == Unit.Status.AVAILABLE:
                self._weigh(selectors.forecast_for(unit.pk))

    def rule_words(self):
        """The rule, for the page's help text, with the house policy's figures."""
        return (f"A reason is asked for only when the unit's forecast cannot be worked out, or when its chance of "
                f"a fault within {self.policy.horizon_days} days has reached the house limit of "
                f"{fmt.percent(self.policy.risk_limit)}. A unit whose recap is due or overdue but below that limit "
                "may go out: the page shows its forecast, and the workshop sees it when it comes back.")

    def _weigh(self, forecast):
        self.forecast = forecast
        why = checkout_reason_needed(forecast, self.policy)
        self.needs_confirmation = bool(why)
        self.note = checkout_forecast_note(forecast, self.policy)
        if not why:
            self.stop = ""
        elif forecast.status == UnitForecast.Status.INVALID:
            said = "; ".join(forecast.reasons or []) or "its figures are not usable"
            self.stop = (f"Its forecast cannot be worked out: {said}. Check with the workshop; to send it out "
                         "anyway, give the reason below.")
        else:
            self.stop = (f"Recap {forecast.get_status_display().lower()} and {why}: it should stay in for the "
                         "workshop. To send it out anyway, ask the workshop and give the reason below.")

    def clean_out_at(self):
        return self.clean_moment("out_at")

    def clean(self):
        cleaned = super().clean()
        if self.unit is None:
            return cleaned
        if self.unit.status == Unit.Status.OUT:
            self.add_error(None, f"{self.unit.asset_tag} is already out; check it in first.")
            return cleaned
        if self.unit.status != Unit.Status.AVAILABLE:
            # Held, on the bench or retired: no reason to ask for, it cannot go out.
            why = f" ({self.unit.hold_reason})" if self.unit.status == Unit.Status.HOLD and self.unit.hold_reason else ""
            self.add_error(None, f"{self.unit.asset_tag} is {self.unit.get_status_display().lower()}{why}, "
                                 "not available for hire; the workshop must release it first.")
            return cleaned
        forecast = selectors.forecast_for(self.unit.pk)
        self._weigh(forecast)
        if forecast is None or forecast.status not in OVERRIDE_STATUSES or not self.needs_confirmation:
            return cleaned
        if not (cleaned.get("override_reason") or "").strip():
            if forecast.status == UnitForecast.Status.INVALID:
                message = (f"{self.unit.asset_tag} cannot be forecast: "
                           f"{'; '.join(forecast.reasons or []) or 'its figures are not usable'}. Check with the "
                           "workshop; to send it out anyway, give the reason (it is recorded with your name).")
            else:
                message = (f"{self.unit.asset_tag} is {forecast.get_status_display().lower()} for a recap and "
                           f"{checkout_reason_needed(forecast, self.policy)}: it should stay in for the workshop. "
                           "To send it out anyway, give the reason; it is recorded with your name.")
            self.add_error("override_reason", message)
        return cleaned


class CheckInForm(DeskForm):
    venue_ambient_c = ambient_field("Venue ambient (°C)")
    powered_hours = hours_field("Hours powered", "An estimate, if the unit has no hour meter.")
    meter_reading_h = hours_field("Hour meter now", "The reading on the unit's hour meter, if it has one.")
    reported_faults = forms.CharField(
        label="Reported faults", required=False, max_length=2000,
        help_text="Anything the hirer or the desk noticed. Any fault holds the unit for the bench.",
        widget=forms.Textarea(attrs={"rows": 3}),
    )
    in_at = moment_field("Checked in at")

    def clean_in_at(self):
        return self.clean_moment("in_at")

    def clean(self):
        cleaned = super().clean()
        hours_ok = "powered_hours" not in self.errors and "meter_reading_h" not in self.errors
        if hours_ok and cleaned.get("powered_hours") is None and cleaned.get("meter_reading_h") is None:
            self.add_error(None, "Give the hours powered or the hour-meter reading.")
        return cleaned


class UnitFilterForm(PlainForm):
    """The search and filters of the unit list (GET)."""

    q = forms.CharField(label="Search", required=False,
                        widget=forms.TextInput(attrs={"placeholder": "tag, serial, maker or model",
                                                      "type": "search"}))
    status = forms.ChoiceField(label="Unit status", required=False,
                               choices=[("", "Any")] + list(Unit.Status.choices))
    forecast = forms.ChoiceField(label="Forecast", required=False,
                                 choices=[("", "Any")] + list(selectors.FORECAST_FILTERS))
    gear_model = forms.ModelChoiceField(label="Gear model", required=False, queryset=None, empty_label="Any")
    location = forms.ModelChoiceField(label="Home location", required=False, queryset=None, empty_label="Any")

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["gear_model"].queryset = selectors.gear_model_choices()
        self.fields["location"].queryset = selectors.location_choices()


class WorkshopFilterForm(PlainForm):
    """The filters of the workshop's triage list (GET)."""

    gear_model = forms.ModelChoiceField(label="Gear model", required=False, queryset=None, empty_label="Any")
    location = forms.ModelChoiceField(label="Home location", required=False, queryset=None, empty_label="Any")
    role = forms.ChoiceField(label="Part to work on", required=False,
                             choices=[("", "Any role")] + [(v, label) for v, label in Role.choices])

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["gear_model"].queryset = selectors.gear_model_choices()
        self.fields["location"].queryset = selectors.location_choices()


class MultipleFileInput(forms.ClearableFileInput):
    allow_multiple_selected = True


class MultipleFileField(forms.FileField):
    """A file field that takes several files at once (a list in cleaned_data)."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("widget", MultipleFileInput(attrs={"accept": ".csv,text/csv"}))
        super().__init__(*args, **kwargs)

    def clean(self, data, initial=None):
        single = super().clean
        if isinstance(data, (list, tuple)):
            if not data and self.required:
                raise forms.ValidationError(self.error_messages["required"], code="required")
            return [single(d, initial) for d in data]
        return [single(data, initial)] if data else []


class CsvUploadForm(PlainForm):
    files = MultipleFileField(
        label="CSV files",
        help_text="Choose one file or several; hold Ctrl (or Cmd) to pick more than one.",
        error_messages={"required": "Choose at least one CSV file."},
    )

    def clean_files(self):
        files = self.cleaned_data["files"]
        limit = settings.RECAP_UPLOAD_MAX_BYTES
        for f in files:
            if f.size > limit:
                raise forms.ValidationError(
                    f"{f.name} is {f.size / 1e6:.1f} MB; the largest file this page takes is {limit / 1e6:.0f} MB. "
                    f"Import larger files on the server with: python manage.py import_fleet FILE..."
                )
            if not f.name.lower().endswith(".csv"):
                raise forms.ValidationError(f"{f.name} is not a .csv file.")
        return files


class PersonForm(PlainForm):
    """A login and its roles, as a manager keeps them (``fleet.people``)."""

    username = forms.CharField(label="Username", max_length=150, validators=[UnicodeUsernameValidator()],
                               help_text="Letters, digits and @ . + - _ only; the person signs in with it.")
    first_name = forms.CharField(label="First name", max_length=150, required=False)
    last_name = forms.CharField(label="Last name", max_length=150, required=False)
    email = forms.EmailField(label="E-mail", required=False)
    roles = forms.MultipleChoiceField(label="Roles", required=False, widget=forms.CheckboxSelectMultiple,
                                      choices=[(r, ROLE_LABELS[r]) for r in ROLES],
                                      help_text="A manager also sees every other role's pages and the admin.")
    is_active = forms.BooleanField(label="May sign in", required=False, initial=True)
    password1 = forms.CharField(label="Password", required=False, strip=False,
                                widget=forms.PasswordInput(attrs={"autocomplete": "new-password"}))
    password2 = forms.CharField(label="Password again", required=False, strip=False,
                                widget=forms.PasswordInput(attrs={"autocomplete": "new-password"}))

    def __init__(self, *args, person=None, **kwargs):
        super().__init__(*args, **kwargs)
        self.person = person
        if person is not None:
            del self.fields["username"]
            self.fields["password1"].label = "New password"
            self.fields["password1"].help_text = "Leave empty to keep the present one."
        else:
            self.fields["password1"].required = True
            self.fields["password2"].required = True

    def clean(self):
        cleaned = super().clean()
        p1, p2 = cleaned.get("password1"), cleaned.get("password2")
        if p1 and p1 != p2:
            self.add_error("password2", "The two passwords differ.")
        return cleaned
