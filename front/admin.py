"""The admin: reference data of the register, units, hires and services.

Reference data (locations, gear models and their capacitor positions,
policies) is edited here.  A unit added here gets its capacitor population,
thermal history and forecast at once, as one added by any other way; an edit
that changes what a unit's exposure is worked out from (its dates, prior use)
rebuilds its history and forecast, and a change of a model's internal rise
marks its units changed for the life engine's next refresh.  Hires and fitted
capacitors are shown read-only: they change only through the rental desk and
recorded services.  Units, hires, service records and the policy keep their
change history (django-simple-history), shown by each page's History button.
"""

from django.contrib import admin
from simple_history.admin import SimpleHistoryAdmin
from django.urls import reverse
from django.utils.html import format_html, format_html_join

from fleet.models import (
    GearModel,
    Location,
    MaintenancePolicy,
    Measurement,
    Position,
    Rental,
    ReplacedPart,
    ServiceRecord,
    TemperatureSample,
    Unit,
    UnitCapacitor,
)
from fleet.services import unit_populate, units_mark_changed
from reports.formatting import capacitance as format_capacitance

from .workflows import unit_refresh

# Lists that grow with the fleet show this many rows a page: the admin's
# change list renders about a millisecond a row.
ADMIN_ROWS = 50

# A location with more samples than this links to the sample list instead of
# showing them all inline on its page.
SAMPLE_INLINE_LIMIT = 400

RATING_COLUMNS = (
    "capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h", "esr_ohm", "tan_delta",
    "diameter_mm", "length_mm", "mount",
)


def _count(model, field):
    """A correlated count of ``model`` rows whose ``field`` is the outer row."""
    from django.db.models import Count, IntegerField, OuterRef, Subquery

    rows = model.objects.filter(**{field: OuterRef("pk")}).order_by().values(field)
    return Subquery(rows.annotate(n=Count("pk")).values("n"), output_field=IntegerField())


# --- locations -------------------------------------------------------------------

class TemperatureSampleInline(admin.TabularInline):
    model = TemperatureSample
    fields = ("taken_at", "temp_c")
    extra = 0
    classes = ["collapse"]


@admin.register(Location)
class LocationAdmin(admin.ModelAdmin):
    list_display = ("name", "kind", "profile", "constant_temp_c", "unit_count")
    list_filter = ("kind", "profile")
    search_fields = ("name", "notes")
    readonly_fields = ("sample_summary",)
    fields = ("name", "kind", "profile", "constant_temp_c", "monthly_temps_c", "notes", "sample_summary")
    inlines = [TemperatureSampleInline]

    def get_queryset(self, request):
        return super().get_queryset(request).annotate(_units=_count(Unit, "home_location"))

    @admin.display(description="units", ordering="_units")
    def unit_count(self, obj):
        return obj._units or 0

    @admin.display(description="temperature samples")
    def sample_summary(self, obj):
        if obj is None or obj.pk is None:
            return "-"
        n = obj.samples.count()
        url = reverse("admin:fleet_temperaturesample_changelist") + f"?location__id__exact={obj.pk}"
        return format_html('{} sample(s) - <a href="{}">open the sample list</a>', n, url)

    def get_inline_instances(self, request, obj=None):
        if obj is not None and obj.samples.count() > SAMPLE_INLINE_LIMIT:
            return []
        return super().get_inline_instances(request, obj)


@admin.register(TemperatureSample)
class TemperatureSampleAdmin(admin.ModelAdmin):
    list_display = ("location", "taken_at", "temp_c")
    list_filter = ("location",)
    date_hierarchy = "taken_at"
    list_select_related = ("location",)


# --- gear models and positions -------------------------------------------------------

class PositionInline(admin.TabularInline):
    model = Position
    fields = ("designator", "role", *RATING_COLUMNS[:5], "ripple_current_a", "operating_voltage_v", "mount")
    extra = 0
    show_change_link = True
    ordering = ("designator",)


@admin.register(GearModel)
class GearModelAdmin(admin.ModelAdmin):
    list_display = ("maker", "model_name", "category", "year_from", "year_to", "internal_rise_k", "hazard_list",
                    "position_count", "unit_count")
    list_filter = ("category", "hazard_mains", "hazard_tube_hv", "hazard_smps", "maker")
    search_fields = ("maker", "model_name")
    fieldsets = (
        (None, {"fields": ("maker", "model_name", "category", ("year_from", "year_to"))}),
        ("Use and heat", {"fields": ("internal_rise_k", "powered_hours_per_day")}),
        ("Hazards", {"fields": ("mains_voltage_v", "hazard_mains", "hazard_tube_hv", "hazard_smps", "hazard_notes")}),
        (None, {"fields": ("notes",)}),
    )
    inlines = [PositionInline]

    def get_queryset(self, request):
        # Two correlated counts, each by its own index, rather than one
        # join of positions x units grouped back (310 ms at 10,000 units).
        return super().get_queryset(request).annotate(_positions=_count(Position, "gear_model"),
                                                      _units=_count(Unit, "gear_model"))

    def save_model(self, request, obj, form, change):
        super().save_model(request, obj, form, change)
        if change and "internal_rise_k" in form.changed_data:
            units_mark_changed(gear_model_ids=[obj.pk])

    @admin.display(description="positions", ordering="_positions")
    def position_count(self, obj):
        return obj._positions or 0

    @admin.display(description="units", ordering="_units")
    def unit_count(self, obj):
        return obj._units or 0

    @admin.display(description="hazards")
    def hazard_list(self, obj):
        words = [w for flag, w in ((obj.hazard_mains, "mains"), (obj.hazard_tube_hv, "tube HV"),
                                   (obj.hazard_smps, "switch-mode")) if flag]
        return ", ".join(words) or "none"


@admin.register(Position)
class PositionAdmin(admin.ModelAdmin):
    list_per_page = ADMIN_ROWS
    list_display = ("gear_model", "designator", "role", "capacitance_uf", "rated_voltage_v", "rated_temp_c",
                    "rated_life_h")
    list_filter = ("role", "mount", "gear_model")
    search_fields = ("designator", "gear_model__maker", "gear_model__model_name")
    list_select_related = ("gear_model",)
    fieldsets = (
        (None, {"fields": ("gear_model", "designator", "role")}),
        ("Original part", {"fields": RATING_COLUMNS}),
        ("Operating point", {"fields": ("ripple_current_a", "ripple_freq_hz", "operating_voltage_v")}),
        ("Charge pump (pump roles)", {"classes": ["collapse"], "fields": (
            "pump_partner", "pump_input_v", "pump_load_a", "pump_freq_hz", "pump_switch_ohm", "pump_min_rail_v")}),
        ("Signal coupling", {"classes": ["collapse"], "fields": ("coupling_load_ohm", "coupling_max_corner_hz")}),
        ("Supply reservoir", {"classes": ["collapse"], "fields": (
            "reservoir_load_a", "reservoir_ripple_freq_hz", "reservoir_ripple_limit_v")}),
    )


# --- units -----------------------------------------------------------------------

@admin.register(Unit)
class UnitAdmin(SimpleHistoryAdmin):
    list_per_page = ADMIN_ROWS
    list_display = ("asset_tag", "gear_model", "serial", "status", "home_location", "year_made", "hour_meter_h")
    list_filter = ("status", "gear_model", "home_location")
    search_fields = ("asset_tag", "serial")
    list_select_related = ("gear_model", "home_location")
    fieldsets = (
        (None, {"fields": ("asset_tag", "serial", "gear_model", "year_made", "joined_on", "home_location",
                           "status", "hold_reason", "hour_meter_h")}),
        ("Use before it joined the fleet", {"fields": ("prior_powered_h_per_year", "prior_ambient_c",
                                                        "prior_storage_c")}),
        (None, {"fields": ("notes",)}),
        ("Fitted capacitors", {"fields": ("fitted_parts",)}),
    )
    readonly_fields = ("fitted_parts",)

    def get_readonly_fields(self, request, obj=None):
        # The model decides the capacitor population; changing it afterwards
        # would leave the fitted parts of the old model behind.
        return ("gear_model", "fitted_parts") if obj is not None else ("fitted_parts",)

    @admin.display(description="parts fitted now")
    def fitted_parts(self, obj):
        """The parts fitted now, read-only (a recap is recorded as a service):
        one plain table, where an inline of forms took a fifth of a second
        for a unit of fifty parts."""
        if obj is None or obj.pk is None:
            return "A new unit gets its model's parts when it is saved."
        rows = (UnitCapacitor.objects.filter(unit=obj).select_related("position")
                .order_by("position__designator"))
        body = format_html_join(
            "", "<tr><td>{}</td><td>{}</td><td>{} V</td><td>{} °C</td><td>{} h</td><td>{}</td><td>{}</td></tr>",
            ((c.position.designator, format_capacitance(c.capacitance_uf), f"{c.rated_voltage_v:g}",
              f"{c.rated_temp_c:g}", f"{c.rated_life_h:g}", c.installed_on, "original" if c.is_original else "replaced")
             for c in rows))
        return format_html('<table class="fitted"><thead><tr><th>designator</th><th>capacitance</th><th>rated '
                           'voltage</th><th>rated temperature</th><th>endurance</th><th>installed</th><th></th></tr>'
                           '</thead><tbody>{}</tbody></table>', body)

    #: Fields whose change rewrites the unit's past exposure.
    EXPOSURE_FIELDS = ("joined_on", "prior_powered_h_per_year", "prior_ambient_c", "prior_storage_c")

    def save_model(self, request, obj, form, change):
        super().save_model(request, obj, form, change)
        if not change:
            unit_populate(units=[obj])
        elif set(form.changed_data) & set(self.EXPOSURE_FIELDS):
            units_mark_changed(unit_ids=[obj.pk])
        else:
            return
        unit_refresh(unit_id=obj.pk)


# --- hires -----------------------------------------------------------------------

@admin.register(Rental)
class RentalAdmin(SimpleHistoryAdmin):
    """Hires are written by the rental desk; here they are for looking up."""

    list_per_page = ADMIN_ROWS
    list_display = ("unit", "job_ref", "out_at", "in_at", "powered_hours", "hours_source", "venue_ambient_c",
                    "has_faults")
    list_filter = ("hours_source", ("in_at", admin.EmptyFieldListFilter), "unit__gear_model",
                   "unit__home_location")
    search_fields = ("unit__asset_tag", "job_ref")  # see get_search_results
    search_help_text = "An asset tag, or the start of a job reference (as written, e.g. J2611-002)."
    # No date hierarchy: over hundreds of thousands of hires its year list
    # alone took seconds.  Newest first, by the index on out_at.
    ordering = ("-out_at",)
    show_full_result_count = False
    list_select_related = ("unit",)

    def get_search_results(self, request, queryset, search_term):
        """A unit's asset tag (exactly, any case) or the start of a job
        reference: both found by an index, where a substring search walked
        every hire (seconds at 10,000 units)."""
        term = search_term.strip()
        if not term:
            return queryset, False
        unit = Unit.objects.filter(asset_tag=term.upper()).values_list("pk", flat=True).first()
        if unit is not None:
            return queryset.filter(unit_id=unit), False
        return queryset.filter(job_ref__gte=term, job_ref__lt=term + "\U0010ffff"), False

    @admin.display(boolean=True, description="faults")
    def has_faults(self, obj):
        return bool(obj.reported_faults)

    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False


# --- service records ---------------------------------------------------------------

class ReplacedPartInline(admin.TabularInline):
    """Parts put in during the service; written by the recap service, shown read-only."""

    model = ReplacedPart
    fields = ("position", *RATING_COLUMNS)
    readonly_fields = fields
    extra = 0
    can_delete = False

    def has_add_permission(self, request, obj=None):
        return False

    def has_change_permission(self, request, obj=None):
        return False


class MeasurementInline(admin.TabularInline):
    model = Measurement
    fields = ("quantity", "position", "rail_name", "value", "before_work")
    extra = 0

    def get_formset(self, request, obj=None, **kwargs):
        request._recap_service_record = obj
        return super().get_formset(request, obj, **kwargs)

    def formfield_for_foreignkey(self, db_field, request, **kwargs):
        if db_field.name == "position":
            qs = Position.objects.select_related("gear_model")
            record = getattr(request, "_recap_service_record", None)
            if record is not None:
                qs = qs.filter(gear_model_id=record.unit.gear_model_id)
            kwargs["queryset"] = qs
        return super().formfield_for_foreignkey(db_field, request, **kwargs)


@admin.register(ServiceRecord)
class ServiceRecordAdmin(SimpleHistoryAdmin):
    list_per_page = ADMIN_ROWS
    list_display = ("unit", "kind", "performed_on", "who", "signed_off_by", "signed_off_at")
    list_filter = ("kind", "performed_on", ("signed_off_by", admin.EmptyFieldListFilter))
    search_fields = ("unit__asset_tag", "technician_name", "notes")
    date_hierarchy = "performed_on"
    list_select_related = ("unit", "technician", "signed_off_by")
    autocomplete_fields = ("unit",)  # shows the unit's asset tag, not its database number
    show_full_result_count = False
    inlines = [ReplacedPartInline, MeasurementInline]

    @admin.display(description="technician")
    def who(self, obj):
        return obj.technician or obj.technician_name or "-"


@admin.register(MaintenancePolicy)
class MaintenancePolicyAdmin(SimpleHistoryAdmin):
    """Changes to the policy are kept with who made them (the History button)."""

    list_display = ("name", "active", "risk_limit", "horizon_days", "damage_limit", "calendar_age_years",
                    "storage_reform_months", "watch_days")
    list_filter = ("active",)
    search_fields = ("name",)
