from django.apps import AppConfig


class AnalyticsConfig(AppConfig):
    name = "analytics"
    verbose_name = "Analysis and advice"

    def ready(self) -> None:
        from . import receivers  # noqa: F401  (connects the record_submitted receiver)
