"""Serializers of the catalogue and of upload records.

Writable serializers run the model's ``full_clean()`` so the admin screens and
the API enforce one set of rules.
"""

from __future__ import annotations

from typing import Any

from django.core.exceptions import ValidationError as DjangoValidationError
from rest_framework import serializers

from lcstore.ingest.columns import ColumnsMappingError, columns_mapping_parse
from lcstore.models import (
    BAND_FIELDS,
    INSTRUMENT_FIELDS,
    SOURCE_FIELDS,
    Band,
    CalibrationOffset,
    HostFlux,
    Instrument,
    Source,
    Upload,
    UploadStatus,
)

__all__ = [
    "BandSerializer",
    "CalibrationOffsetSerializer",
    "ColumnsMappingField",
    "HostFluxSerializer",
    "InstrumentSerializer",
    "SourceSerializer",
    "UploadSerializer",
]


class FullCleanMixin:
    """Validate through the model's own ``full_clean`` (model and database rules)."""

    def validate(self, attrs: dict[str, Any]) -> dict[str, Any]:
        attrs = super().validate(attrs)  # type: ignore[misc]
        model = self.Meta.model  # type: ignore[attr-defined]
        instance = self.instance or model()  # type: ignore[attr-defined]
        for key, value in attrs.items():
            setattr(instance, key, value)
        try:
            instance.full_clean(validate_unique=False)
        except DjangoValidationError as exc:
            raise serializers.ValidationError(exc.message_dict) from None
        return attrs


class ColumnsMappingField(serializers.CharField):
    """An upload's ``columns``: JSON text of role -> column name, one column per role.

    Parsed by :func:`lcstore.ingest.columns.columns_mapping_parse`, which refuses a role
    given twice (plain ``json.loads`` keeps the last); the value is the mapping, or None
    when blank. Which roles exist and which columns the file has are checked with the
    file (``resolve_columns``).
    """

    def __init__(self, **kwargs: Any):
        kwargs.setdefault("help_text", "JSON object: role -> column name")
        super().__init__(**kwargs)

    def run_validation(self, data: Any = serializers.empty) -> dict[str, str] | None:
        text = super().run_validation(data)
        if text is None or text == "":
            return None
        try:
            return columns_mapping_parse(text)
        except ColumnsMappingError as exc:
            raise serializers.ValidationError(str(exc)) from None


class SourceSerializer(FullCleanMixin, serializers.ModelSerializer):
    aliases = serializers.ListField(child=serializers.CharField(max_length=200), required=False)
    summary = serializers.SerializerMethodField(
        help_text="per band: points, upper limits and time range (MJD TDB) visible to you"
    )

    class Meta:
        model = Source
        fields = ["slug", *SOURCE_FIELDS, "summary"]

    def get_summary(self, obj: Source) -> list[dict[str, Any]]:
        summaries = self.context.get("summaries")
        if summaries is None or obj.pk not in summaries:
            from lcstore.queries import source_summaries

            request = self.context.get("request")
            user = getattr(request, "user", None)
            summaries = source_summaries(source_ids=[obj.pk], user=user)
        return summaries.get(obj.pk, [])


class InstrumentSerializer(FullCleanMixin, serializers.ModelSerializer):
    class Meta:
        model = Instrument
        fields = ["slug", *INSTRUMENT_FIELDS, "notes"]


class BandSerializer(FullCleanMixin, serializers.ModelSerializer):
    canonical_unit = serializers.SerializerMethodField()

    class Meta:
        model = Band
        fields = ["slug", *BAND_FIELDS, "canonical_unit"]

    def get_canonical_unit(self, obj: Band) -> str:
        from lcstore.science.units import canonical_unit

        return canonical_unit(obj.kind).to_string()


class CalibrationOffsetSerializer(FullCleanMixin, serializers.ModelSerializer):
    instrument = serializers.SlugRelatedField(slug_field="slug", queryset=Instrument.objects.all())
    band = serializers.SlugRelatedField(slug_field="slug", queryset=Band.objects.all())

    class Meta:
        model = CalibrationOffset
        fields = ["id", "instrument", "band", "factor", "notes"]


class HostFluxSerializer(FullCleanMixin, serializers.ModelSerializer):
    source = serializers.SlugRelatedField(slug_field="slug", queryset=Source.objects.all())
    band = serializers.SlugRelatedField(slug_field="slug", queryset=Band.objects.all())

    class Meta:
        model = HostFlux
        fields = ["id", "source", "band", "value", "error", "reference"]


class UploadSerializer(serializers.ModelSerializer):
    uploader = serializers.CharField(source="uploader.username", read_only=True)
    sha256 = serializers.CharField(source="file_id", read_only=True)
    size = serializers.IntegerField(source="file.size", read_only=True)
    source = serializers.SlugRelatedField(slug_field="slug", read_only=True)
    sources = serializers.SlugRelatedField(slug_field="slug", many=True, read_only=True)
    band = serializers.SlugRelatedField(slug_field="slug", read_only=True)
    instrument = serializers.SlugRelatedField(slug_field="slug", read_only=True)
    retracted_by = serializers.CharField(
        source="retracted_by.username", read_only=True, default=None, allow_null=True
    )
    superseded_by = serializers.SerializerMethodField()
    counts = serializers.SerializerMethodField()
    time_range = serializers.SerializerMethodField()

    class Meta:
        model = Upload
        fields = [
            "id",
            "uploader",
            "created_at",
            "file_name",
            "sha256",
            "size",
            "format",
            "source",
            "sources",
            "band",
            "instrument",
            "columns",
            "value_unit",
            "time_format",
            "time_scale",
            "time_reference",
            "met_epoch",
            "parameters",
            "reduction",
            "reference",
            "embargo_until",
            "status",
            "supersedes",
            "superseded_by",
            "superseded_at",
            "retracted_at",
            "retracted_by",
            "retraction_reason",
            "counts",
            "time_range",
            "warnings",
        ]
        read_only_fields = fields

    def to_representation(self, obj: Upload) -> dict[str, Any]:
        data = super().to_representation(obj)
        if data["status"] == UploadStatus.SUPERSEDED and data["superseded_by"] is None:
            # Every successor is embargoed from this account: for them the supersession has
            # not happened yet (lcstore.queries.uploads_visible counts these points), and
            # "superseded" with no successor would tell that an embargoed one exists.
            data["status"] = UploadStatus.ACCEPTED
            data["superseded_at"] = None
        return data

    def get_superseded_by(self, obj: Upload) -> int | None:
        """The successor, named only to accounts that may see it (embargo)."""
        from lcstore.queries import upload_visible_to

        request = self.context.get("request")
        user = getattr(request, "user", None)
        for nxt in sorted(obj.superseded_by.all(), key=lambda u: u.created_at):
            if upload_visible_to(nxt, user):
                return nxt.pk
        return None

    def get_counts(self, obj: Upload) -> dict[str, int]:
        return {
            "rows": obj.n_rows,
            "points": obj.n_points,
            "upper_limits": obj.n_upper_limits,
            "detections": obj.n_points - obj.n_upper_limits,
        }

    def get_time_range(self, obj: Upload) -> dict[str, Any]:
        return {"start": obj.time_min, "end": obj.time_max, "system": "MJD TDB, barycentric"}
