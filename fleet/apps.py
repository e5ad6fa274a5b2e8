from django.apps import AppConfig


class FleetConfig(AppConfig):
    name = "fleet"
    verbose_name = "Fleet register"

    def ready(self):
        from django.db.models.signals import post_migrate

        from .roles import groups_after_migrate

        post_migrate.connect(groups_after_migrate, dispatch_uid="fleet.roles.groups_after_migrate")
