"""Curation screens for sources, instruments, bands, offsets; uploads read-only."""

from django.contrib import admin
from simple_history.admin import SimpleHistoryAdmin

from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source, Upload


@admin.register(Source)
class SourceAdmin(SimpleHistoryAdmin):
    list_display = ("slug", "name", "ra", "dec", "redshift", "ebv")
    search_fields = ("slug", "name", "aliases", "notes")
    list_filter = ("redshift",)
    prepopulated_fields = {"slug": ("name",)}


@admin.register(Instrument)
class InstrumentAdmin(SimpleHistoryAdmin):
    list_display = (
        "slug",
        "name",
        "kind",
        "site_lon",
        "site_lat",
        "site_height",
        "default_time_format",
        "default_time_scale",
        "default_time_reference",
        "met_epoch",
    )
    search_fields = ("slug", "name", "notes")
    list_filter = ("kind", "default_time_format", "default_time_scale", "default_time_reference")


@admin.register(Band)
class BandAdmin(SimpleHistoryAdmin):
    list_display = (
        "slug",
        "name",
        "kind",
        "wavelength_eff",
        "mag_system",
        "zero_point_jy",
        "energy_min_kev",
        "energy_max_kev",
        "pivot_energy_kev",
        "photon_index",
        "counts_to_energy_flux",
    )
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
