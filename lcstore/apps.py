from django.apps import AppConfig


class LcstoreConfig(AppConfig):
    name = "lcstore"
    verbose_name = "Light-curve store"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        from lcstore import checks  # noqa: F401 - registers the system checks
