"""Forms of the bench pages: intake, readings, the recap and release.

They only read what was typed (numbers, IEC 60062 capacitance codes); whether
a reading can be right is the register's rule (``fleet.bench_services``), and
the views put its message next to the field it is about.
"""

from django import forms

from fleet import values

from .forms import PlainForm

NUMBER = {"step": "any", "inputmode": "decimal", "autocomplete": "off"}


def number(label, required=False, help_text="", **attrs):
    return forms.FloatField(
        label=label, required=required, help_text=help_text,
        error_messages={"invalid": "Enter a number, such as 4.7 or 120.", "required": "This reading is needed."},
        widget=forms.NumberInput(attrs={**NUMBER, **attrs}))


def capacitance(label, required=False, help_text="In µF, or with a unit or code: 4u7, 470 uF, 100n."):
    return forms.CharField(
        label=label, required=required, max_length=40, help_text=help_text,
        widget=forms.TextInput(attrs={"autocomplete": "off", "spellcheck": "false", "class": "short",
                                      "inputmode": "decimal"}))


def clean_capacitance(text):
    if text in (None, ""):
        return None
    try:
        return values.parse_capacitance_uf(text, bare_unit="uF")
    except ValueError as exc:
        raise forms.ValidationError(str(exc)) from None


class IntakeForm(PlainForm):
    notes = forms.CharField(label="Intake notes", required=False, max_length=2000,
                            help_text="What came in with it, what you see first.",
                            widget=forms.Textarea(attrs={"rows": 3}))


class CapacitorReadingForm(PlainForm):
    designator = forms.CharField(label="Position", max_length=12,
                                 error_messages={"required": "Say which position you measured (e.g. C4)."},
                                 widget=forms.TextInput(attrs={"list": "designators", "autocomplete": "off",
                                                               "autocapitalize": "characters", "class": "short",
                                                               "spellcheck": "false"}))
    esr_ohm = number("ESR")
    # the page says once, under the row, what each field wants (front/templates/front/bench.html)
    esr_freq_hz = number("Test frequency")
    capacitance_uf = capacitance("Capacitance", help_text="")
    leakage_ua = number("Leakage")

    prefix = "cap"

    def clean_capacitance_uf(self):
        return clean_capacitance(self.cleaned_data.get("capacitance_uf"))

    def clean_designator(self):
        return self.cleaned_data["designator"].strip().upper()

    def clean(self):
        cleaned = super().clean()
        if not self.errors and all(cleaned.get(k) is None for k in ("esr_ohm", "capacitance_uf", "leakage_ua")):
            self.add_error("esr_ohm", "Give at least one of ESR, capacitance or leakage.")
        return cleaned


class RailReadingForm(PlainForm):
    rail_name = forms.CharField(label="Rail", max_length=20, error_messages={"required": "Name the rail (e.g. -5V)."},
                                widget=forms.TextInput(attrs={"autocomplete": "off", "class": "short"}))
    rail_measured_v = number("Measured", required=True)
    rail_load_ma = number("Load")
    rail_expected_v = number("Expected")
    rail_input_v = number("Input rail")

    prefix = "rail"


class RecapChoiceForm(PlainForm):
    """Which positions a recap covers (GET)."""

    CHOICES = [("all", "All electrolytics"), ("role", "One role"), ("pick", "Pick positions")]
    choice = forms.ChoiceField(label="Replace", choices=CHOICES, initial="all", widget=forms.RadioSelect)
    role = forms.ChoiceField(label="Role", required=False, choices=[])
    pick = forms.MultipleChoiceField(label="Positions", required=False, choices=[],
                                     widget=forms.CheckboxSelectMultiple)

    def __init__(self, *args, roles=(), designators=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["role"].choices = [("", "choose a role")] + list(roles)
        self.fields["pick"].choices = [(d, d) for d in designators]


REPLACEMENT_FIELDS = (
    ("capacitance_uf", "Capacitance µF"), ("rated_voltage_v", "Rated V"), ("rated_temp_c", "°C"),
    ("rated_life_h", "Endurance h"), ("diameter_mm", "Ø mm"), ("length_mm", "L mm"),
)


class RecapForm(PlainForm):
    """One row of editable replacement ratings per chosen position, with
    optional readings of the part taken out, a note and the sign-off."""

    notes = forms.CharField(label="Notes", required=False, max_length=2000, widget=forms.Textarea(attrs={"rows": 2}))
    signed_off = forms.BooleanField(
        label="I fitted these parts with the polarity as marked, checked the work and sign it off.",
        error_messages={"required": "Sign the recap off before it is recorded."})

    def __init__(self, *args, caps=(), suggestions=None, **kwargs):
        super().__init__(*args, **kwargs)
        self.caps = list(caps)
        self.rows = []
        for cap in self.caps:
            des = cap.position.designator
            suggested = (suggestions or {}).get(des, {})
            names = []
            for field, label in REPLACEMENT_FIELDS:
                name = f"{des}__{field}"
                initial = suggested.get(field)
                if field == "capacitance_uf":
                    self.fields[name] = capacitance(f"{des} {label}", required=True)
                    self.fields[name].initial = f"{initial:g}" if initial else ""
                else:
                    self.fields[name] = number(f"{des} {label}", required=True)
                    self.fields[name].initial = f"{initial:g}" if initial is not None else None
                names.append(name)
            self.fields[f"{des}__removed_esr_ohm"] = number(f"{des} removed part's ESR (Ω)")
            self.fields[f"{des}__removed_capacitance_uf"] = capacitance(f"{des} removed part's capacitance")
            self.rows.append({"cap": cap, "names": names,
                              "removed": [f"{des}__removed_esr_ohm", f"{des}__removed_capacitance_uf"]})

    def clean(self):
        cleaned = super().clean()
        for name in list(cleaned):
            if name.endswith("capacitance_uf") and name in cleaned:
                try:
                    cleaned[name] = clean_capacitance(cleaned[name])
                except forms.ValidationError as exc:
                    self.add_error(name, exc)
        return cleaned

    def replacements(self):
        out, removed = {}, {}
        for row in self.rows:
            des = row["cap"].position.designator
            out[des] = {field: self.cleaned_data.get(f"{des}__{field}") for field, _ in REPLACEMENT_FIELDS}
            esr = self.cleaned_data.get(f"{des}__removed_esr_ohm")
            cap = self.cleaned_data.get(f"{des}__removed_capacitance_uf")
            if esr is not None or cap is not None:
                removed[des] = {"esr_ohm": esr, "capacitance_uf": cap}
        return out, removed

    def bound_rows(self):
        """Per chosen position its bound fields, each with ``short_label`` (the
        column's heading, which a tablet shows beside the field)."""
        labels = [label for _, label in REPLACEMENT_FIELDS] + ["Removed part: ESR Ω", "Removed part: capacitance"]
        rows = []
        for r in self.rows:
            bound = [self[n] for n in r["names"] + r["removed"]]
            for field, label in zip(bound, labels):
                field.short_label = label
            rows.append({"cap": r["cap"], "fields": bound[:len(r["names"])], "removed": bound[len(r["names"]):]})
        return rows


class ReleaseForm(PlainForm):
    decision = forms.ChoiceField(
        label="The unit", initial="release", widget=forms.RadioSelect,
        choices=[("release", "Release it to available"), ("hold", "Keep it held")])
    reason = forms.CharField(label="Why it stays held", required=False, max_length=300,
                             help_text="The desk reads this when it scans the unit.",
                             widget=forms.TextInput(attrs={"autocomplete": "off", "class": "wide"}))
    notes = forms.CharField(label="Notes", required=False, max_length=2000, widget=forms.Textarea(attrs={"rows": 2}))

    def clean(self):
        cleaned = super().clean()
        if cleaned.get("decision") == "hold" and not (cleaned.get("reason") or "").strip():
            self.add_error("reason", "Say why it stays held, in words the desk can read.")
        return cleaned
