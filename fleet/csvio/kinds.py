"""One reader per kind of file: locations, temperature samples, gear models,
capacitor positions, units."""

import datetime as dt

from ..models import GearModel, Location, Position, TemperatureSample, Unit
from ..services import unit_populate, units_mark_changed
from .handlers import (
    _gear_model_label,
    _GearModelLookup,
    _Handler,
    _LocationLookup,
    _unknown_location,
    _unknown_model,
)


class _Locations(_Handler):
    kind = "locations"

    def key(self, values):
        return values["name"]

    def describe_key(self, key):
        return f"location '{key}'"

    def prepare(self, batch):
        names = [v["name"] for _, v in batch]
        self.found = {loc.name: loc for loc in Location.objects.filter(name__in=names)}

    def existing(self, values, refs):
        return self.found.get(values["name"])


class _Samples(_Handler):
    kind = "temperature_samples"
    fk_columns = {"location": "location"}
    _EPOCH = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)

    def __init__(self, *args):
        super().__init__(*args)
        self.locations = _LocationLookup()

    def key(self, values):
        return values["location"], (values["taken_at"] - self._EPOCH) // dt.timedelta(microseconds=1)

    def key_column(self):
        return "taken_at"

    def describe_key(self, key):
        moment = self._EPOCH + dt.timedelta(microseconds=key[1])
        return f"a sample of '{key[0]}' at {moment.isoformat()}"

    def prepare(self, batch):
        self.locations.load(v["location"] for _, v in batch)
        ids = {self.locations.cache[v["location"]] for _, v in batch} - {None}
        times = {v["taken_at"] for _, v in batch}
        self.found = {
            (s.location_id, s.taken_at): s
            for s in TemperatureSample.objects.filter(location_id__in=ids, taken_at__in=times)
        }

    def resolve(self, number, values):
        pk = self.locations.cache.get(values["location"])
        if pk is None:
            self.error(number, "location", _unknown_location(values["location"]))
            return None
        return {"location_id": pk}

    def existing(self, values, refs):
        return self.found.get((refs["location_id"], values["taken_at"]))


class _GearModels(_Handler):
    kind = "gear_models"

    def __init__(self, *args):
        super().__init__(*args)
        self.rise_changed = set()

    def key(self, values):
        return values["maker"], values["model_name"]

    def key_column(self):
        return "model_name"

    def describe_key(self, key):
        return f"gear model '{_gear_model_label(key)}'"

    def prepare(self, batch):
        makers = {v["maker"] for _, v in batch}
        names = {v["model_name"] for _, v in batch}
        self.found = {
            (g.maker, g.model_name): g for g in GearModel.objects.filter(maker__in=makers, model_name__in=names)
        }

    def existing(self, values, refs):
        return self.found.get((values["maker"], values["model_name"]))

    def after_write(self, created, updated, changed_fields):
        for obj, changed in zip(updated, changed_fields):
            if "internal_rise_k" in changed:
                self.rise_changed.add(obj.pk)

    def finish(self):
        if self.errors.total or not self.rise_changed:
            return
        # Every unit of these models was warmer or cooler inside than counted.
        units_mark_changed(gear_model_ids=self.rise_changed)


class _Positions(_Handler):
    kind = "positions"
    fk_columns = {"gear_model": "model_name"}

    def __init__(self, *args):
        super().__init__(*args)
        self.models = _GearModelLookup()
        self.partners = []  # (row, gear_model_id, designator, partner)
        self.models_with_new = set()
        self.changed_ratings = 0

    def key(self, values):
        return values["maker"], values["model_name"], values["designator"]

    def key_column(self):
        return "designator"

    def describe_key(self, key):
        return f"position {key[2]} of '{key[0]} {key[1]}'"

    def prepare(self, batch):
        self.models.load((v["maker"], v["model_name"]) for _, v in batch)
        ids = {self.models.cache[(v["maker"], v["model_name"])] for _, v in batch} - {None}
        designators = {v["designator"] for _, v in batch}
        self.found = {
            (p.gear_model_id, p.designator): p
            for p in Position.objects.filter(gear_model_id__in=ids, designator__in=designators)
        }

    def resolve(self, number, values):
        key = (values["maker"], values["model_name"])
        pk = self.models.cache.get(key)
        if pk is None:
            self.error(number, "model_name", _unknown_model(key))
            return None
        if values["pump_partner"]:
            if values["pump_partner"] == values["designator"]:
                self.error(number, "pump_partner", f"{values['designator']} cannot be its own pump partner.")
                return None
            self.partners.append((number, pk, key, values["pump_partner"]))
        return {"gear_model_id": pk}

    def existing(self, values, refs):
        return self.found.get((refs["gear_model_id"], values["designator"]))

    def after_write(self, created, updated, changed_fields):
        self.models_with_new.update(p.gear_model_id for p in created)
        self.changed_ratings += len(updated)

    def finish(self):
        if self.partners:
            ids = {p[1] for p in self.partners}
            names = {p[3] for p in self.partners}
            in_db = set(Position.objects.filter(gear_model_id__in=ids, designator__in=names)
                        .values_list("gear_model_id", "designator"))
            for number, pk, key, partner in self.partners:
                if (pk, partner) not in in_db and (key[0], key[1], partner) not in self.seen:
                    self.error(number, "pump_partner",
                               f"'{_gear_model_label(key)}' has no position {partner} (in this file or "
                               f"already imported) to pair with.")
        if self.errors.total:
            return
        if self.models_with_new and Unit.objects.filter(gear_model_id__in=self.models_with_new).exists():
            self.report.notes.append(
                "New positions were added to gear models that already have units; "
                "those units were not given the new positions."
            )
        if self.changed_ratings:
            self.report.notes.append(
                "Changed positions change the gear models' templates only; "
                "capacitors already fitted in units keep their ratings."
            )


class _Units(_Handler):
    kind = "units"
    fk_columns = {"gear_model": "model_name", "home_location": "home_location"}
    rebuild_fields = ("joined_on", "prior_powered_h_per_year", "prior_ambient_c", "prior_storage_c")

    def __init__(self, *args):
        super().__init__(*args)
        self.models = _GearModelLookup()
        self.locations = _LocationLookup()
        self.kept_status = self.kept_meter = 0

    def key(self, values):
        return values["asset_tag"]

    def describe_key(self, key):
        return f"asset tag {key}"

    def prepare(self, batch):
        self.models.load((v["maker"], v["model_name"]) for _, v in batch)
        self.locations.load(v["home_location"] for _, v in batch)
        tags = [v["asset_tag"] for _, v in batch]
        self.found = {u.asset_tag: u for u in Unit.objects.filter(asset_tag__in=tags).select_related("gear_model")}

    def resolve(self, number, values):
        key = (values["maker"], values["model_name"])
        model_pk = self.models.cache.get(key)
        location_pk = self.locations.cache.get(values["home_location"])
        if model_pk is None:
            self.error(number, "model_name", _unknown_model(key))
        if location_pk is None:
            self.error(number, "home_location", _unknown_location(values["home_location"]))
        if model_pk is None or location_pk is None:
            return None
        return {"gear_model_id": model_pk, "home_location_id": location_pk}

    def existing(self, values, refs):
        return self.found.get(values["asset_tag"])

    def keep_owned(self, obj, fields):
        # The unit's status (out, held, on the bench) belongs to the rental desk
        # and the workshop, and its hour meter to check-in: an older export read
        # back must not release a held unit or wind a meter back.
        if fields["status"] != obj.status:
            self.kept_status += 1
            fields["status"] = obj.status
        if obj.hour_meter_h is not None and fields["hour_meter_h"] != obj.hour_meter_h:
            self.kept_meter += 1
            fields["hour_meter_h"] = obj.hour_meter_h

    def finish(self):
        if self.errors.total:
            return
        if self.kept_status:
            self.report.notes.append(
                f"The status in the file differs for {self.kept_status} existing unit"
                f"{'s' if self.kept_status != 1 else ''}; it was left as the rental desk and the workshop set it.")
        if self.kept_meter:
            self.report.notes.append(
                f"The hour meter in the file differs for {self.kept_meter} existing unit"
                f"{'s' if self.kept_meter != 1 else ''}; readings are taken at check-in, so the register's were kept.")

    def check(self, number, obj, fields, changed):
        ok = True
        out = Unit.Status.OUT
        if obj is None:
            if fields["status"] == out:
                self.error(number, "status", "a new unit cannot be 'out': import it as available and check it "
                                             "out at the rental desk.")
                ok = False
            return ok
        if "gear_model_id" in changed:
            self.error(number, "model_name",
                       f"{obj.asset_tag} is a {obj.gear_model}; an import cannot change a unit's gear model "
                       f"(its capacitors come from it).")
            ok = False
        if "year_made" in changed:
            self.error(number, "year_made",
                       f"{obj.asset_tag} was made in {obj.year_made}; an import cannot change the year of "
                       f"manufacture (its original capacitors are dated from it).")
            ok = False
        return ok

    def after_write(self, created, updated, changed_fields):
        if created:
            if any(u.pk is None for u in created):  # a database that does not return ids from bulk inserts
                pks = dict(Unit.objects.filter(asset_tag__in=[u.asset_tag for u in created])
                           .values_list("asset_tag", "pk"))
                for u in created:
                    u.pk = pks[u.asset_tag]
            self.report.capacitors_fitted += unit_populate(units=created)
        # A new joining date or prior-use assumption changes the unit's past exposure.
        changed = [obj.pk for obj, fields in zip(updated, changed_fields) if set(fields) & set(self.rebuild_fields)]
        if changed:
            units_mark_changed(unit_ids=changed)


HANDLERS = {h.kind: h for h in (_Locations, _Samples, _GearModels, _Positions, _Units)}
