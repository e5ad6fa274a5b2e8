from django.apps import AppConfig


class FrontConfig(AppConfig):
    name = "front"
    verbose_name = "Pages and workflows"
