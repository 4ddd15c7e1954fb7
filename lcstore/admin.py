"""Curation screens for sources, instruments, bands, offsets; uploads read-only.

Changes to sources, instruments and bands are saved through
:func:`lcstore.rederive.curated_change_apply`, as in the API: the uploads that
depend on the change are re-derived in the same transaction, and a change that
would leave one unconvertible is refused with a message and nothing changed.
"""

from typing import Any

from django.contrib import admin, messages
from django.http import HttpResponseRedirect
from simple_history.admin import SimpleHistoryAdmin

from lcstore.models import (
    BAND_FIELDS,
    INSTRUMENT_FIELDS,
    Band,
    CalibrationOffset,
    HostFlux,
    Instrument,
    Source,
    Upload,
)
from lcstore.rederive import RederivationRefused, curated_change_apply


class CuratedConversionsAdmin(SimpleHistoryAdmin):
    """History-keeping admin whose saves of existing records re-derive dependent uploads."""

    def save_model(self, request, obj, form, change):  # type: ignore[no-untyped-def]
        if not change:
            super().save_model(request, obj, form, change)
            return
        changes = {
            f.name: getattr(obj, f.name)
            for f in obj._meta.concrete_fields
            if f.name in form.cleaned_data
        }
        _, new = curated_change_apply(instance=obj, changes=changes, user=request.user)
        if new:
            ids = ", ".join(str(u.pk) for u in new)
            self.message_user(
                request,
                f"re-derived from their kept files with the new metadata: upload(s) {ids} "
                "(each supersedes the previous one)",
                messages.INFO,
            )

    def _refused(self, request: Any, call: Any) -> Any:
        try:
            return call()
        except RederivationRefused as exc:
            self.message_user(request, exc.message, messages.ERROR)
            return HttpResponseRedirect(request.path)

    def changeform_view(self, request, object_id=None, form_url="", extra_context=None):  # type: ignore[no-untyped-def]
        return self._refused(
            request,
            lambda: super(CuratedConversionsAdmin, self).changeform_view(
                request, object_id, form_url, extra_context
            ),
        )

    def history_form_view(self, request, object_id, version_id, extra_context=None):  # type: ignore[no-untyped-def]
        return self._refused(
            request,
            lambda: super(CuratedConversionsAdmin, self).history_form_view(
                request, object_id, version_id, extra_context
            ),
        )


@admin.register(Source)
class SourceAdmin(CuratedConversionsAdmin):
    list_display = ("slug", "name", "ra", "dec", "redshift", "ebv")
    search_fields = ("slug", "name", "aliases", "notes")
    list_filter = ("redshift",)
    prepopulated_fields = {"slug": ("name",)}


@admin.register(Instrument)
class InstrumentAdmin(CuratedConversionsAdmin):
    list_display = ("slug", *INSTRUMENT_FIELDS)
    search_fields = ("slug", "name", "notes")
    list_filter = ("kind", "default_time_format", "default_time_scale", "default_time_reference")


@admin.register(Band)
class BandAdmin(CuratedConversionsAdmin):
    list_display = ("slug", *BAND_FIELDS)
    search_fields = ("slug", "name")
    list_filter = ("kind", "mag_system")


@admin.register(CalibrationOffset)
class CalibrationOffsetAdmin(SimpleHistoryAdmin):
    list_display = ("instrument", "band", "factor")
    list_filter = ("instrument", "band")
    search_fields = ("instrument__slug", "band__slug", "notes")


@admin.register(HostFlux)
class HostFluxAdmin(SimpleHistoryAdmin):
    list_display = ("source", "band", "value", "error")
    list_filter = ("band",)
    search_fields = ("source__slug", "reference")


@admin.register(Upload)
class UploadAdmin(admin.ModelAdmin):
    list_display = (
        "id",
        "file_name",
        "uploader",
        "instrument",
        "band",
        "status",
        "n_points",
        "created_at",
        "embargo_until",
    )
    list_filter = ("status", "instrument", "band", "format")
    search_fields = ("file_name", "file__sha256", "reduction", "reference", "uploader__username")
    readonly_fields = [f.name for f in Upload._meta.fields]

    def has_delete_permission(self, request, obj=None):  # type: ignore[no-untyped-def]
        # Nothing is deleted: retract instead (the API keeps who, when and why).
        return False

    def has_add_permission(self, request):  # type: ignore[no-untyped-def]
        return False
