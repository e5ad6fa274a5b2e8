"""The columns of each kind of register file, and how a cell of each is read."""

from __future__ import annotations

from dataclasses import dataclass

from django.core.exceptions import FieldDoesNotExist

from ..models import GearModel, Location, Mount, Position, Role, TemperatureSample, Unit

IMPORT_ORDER = ("locations", "temperature_samples", "gear_models", "positions", "units")


@dataclass(frozen=True)
class Column:
    """One CSV column.  ``type`` says how a cell is read and written;
    ``field`` is the model field it fills (``None``: a lookup column such as
    ``maker``, ``location``)."""

    name: str
    type: str
    field: str | None = ""
    unit: str | None = None
    required: bool = False
    choices: type | None = None

    @property
    def model_field(self):
        return self.name if self.field == "" else self.field


def _col(name, type_, **kw):
    return Column(name, type_, **kw)


_POSITION_NUMBERS = (
    ("rated_voltage_v", "V", True), ("rated_life_h", "h", True), ("esr_ohm", "ohm", False),
    ("tan_delta", None, False), ("diameter_mm", "mm", True), ("length_mm", "mm", True),
)

COLUMNS = {
    "locations": (
        _col("name", "key", required=True),
        _col("kind", "choice", choices=Location.Kind),
        _col("profile", "choice", choices=Location.Profile),
        _col("constant_temp_c", "temp"),
        _col("monthly_temps_c", "monthly"),
        _col("notes", "notes"),
    ),
    "temperature_samples": (
        _col("location", "key", field=None, required=True),
        _col("taken_at", "datetime", required=True),
        _col("temp_c", "temp", required=True),
    ),
    "gear_models": (
        _col("maker", "key", required=True),
        _col("model_name", "key", required=True),
        _col("category", "choice", choices=GearModel.Category),
        _col("year_from", "whole", required=True),
        _col("year_to", "whole", required=True),
        _col("internal_rise_k", "number", unit="K", required=True),
        _col("powered_hours_per_day", "number", unit="h"),
        _col("mains_voltage_v", "number", unit="V"),
        _col("hazard_mains", "bool"),
        _col("hazard_tube_hv", "bool"),
        _col("hazard_smps", "bool"),
        _col("notes", "notes"),
    ),
    "positions": (
        _col("maker", "key", field=None, required=True),
        _col("model_name", "key", field=None, required=True),
        _col("designator", "key", required=True),
        _col("role", "choice", choices=Role),
        _col("capacitance", "capacitance", field="capacitance_uf", required=True),
        _col("rated_voltage_v", "number", unit="V", required=True),
        _col("rated_temp_c", "rated_temp", required=True),
        _col("rated_life_h", "number", unit="h", required=True),
        _col("esr_ohm", "number", unit="ohm"),
        _col("tan_delta", "number"),
        _col("diameter_mm", "number", unit="mm", required=True),
        _col("length_mm", "number", unit="mm", required=True),
        _col("mount", "choice", choices=Mount),
        _col("ripple_current_a", "number", unit="A"),
        _col("ripple_freq_hz", "number", unit="Hz"),
        _col("operating_voltage_v", "number", unit="V"),
        _col("pump_partner", "key"),
        _col("pump_input_v", "number", unit="V"),
        _col("pump_load_a", "number", unit="A"),
        _col("pump_freq_hz", "number", unit="Hz"),
        _col("pump_switch_ohm", "number", unit="ohm"),
        _col("pump_min_rail_v", "number", unit="V"),
        _col("coupling_load_ohm", "number", unit="ohm"),
        _col("coupling_max_corner_hz", "number", unit="Hz"),
        _col("reservoir_load_a", "number", unit="A"),
        _col("reservoir_ripple_freq_hz", "number", unit="Hz"),
        _col("reservoir_ripple_limit_v", "number", unit="V"),
    ),
    "units": (
        _col("asset_tag", "key", required=True),
        _col("serial", "key"),
        _col("maker", "key", field=None, required=True),
        _col("model_name", "key", field=None, required=True),
        _col("year_made", "whole", required=True),
        _col("joined_on", "date", required=True),
        _col("home_location", "key", field=None, required=True),
        _col("status", "choice", choices=Unit.Status),
        _col("hour_meter_h", "number", unit="h"),
        _col("prior_powered_h_per_year", "number", unit="h"),
        _col("prior_ambient_c", "temp"),
        _col("prior_storage_c", "temp"),
        _col("notes", "notes"),
    ),
}
KINDS = {kind: tuple(c.name for c in cols) for kind, cols in COLUMNS.items()}
MODELS = {
    "locations": Location, "temperature_samples": TemperatureSample, "gear_models": GearModel,
    "positions": Position, "units": Unit,
}


def _label(model, column):
    """A human name for a column's quantity: the model field's verbose name."""
    if column.model_field:
        try:
            return str(model._meta.get_field(column.model_field).verbose_name)
        except FieldDoesNotExist:
            pass
    return column.name.replace("_", " ")
