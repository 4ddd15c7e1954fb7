"""Uploads: multipart POST, records with provenance, the original bytes, retraction."""

from __future__ import annotations

from typing import Any

from django.conf import settings
from django.http import HttpResponse
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import mixins, serializers, status, viewsets
from rest_framework.decorators import action
from rest_framework.parsers import FormParser, JSONParser
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import UploadFilter
from api.parsers import CompleteMultiPartParser
from api.permissions import ContributorsUpload
from api.serializers import ColumnsMappingField, UploadSerializer
from api.throttles import ReadThrottle, WriteScopedThrottle
from lcstore import timing
from lcstore.ingest.readers import FORMATS
from lcstore.models import Upload
from lcstore.queries import embargo_filter
from lcstore.science.times import TIME_FORMATS, TIME_REFERENCES, TIME_SCALES
from lcstore.services import (
    UploadConflict,
    UploadForbidden,
    UploadParams,
    upload_create,
    upload_retract,
)

__all__ = ["UploadViewSet"]


class UploadInput(serializers.Serializer):
    file = serializers.FileField()
    source = serializers.SlugField(required=False, allow_blank=True)
    band = serializers.SlugField(required=False, allow_blank=True)
    instrument = serializers.SlugField()
    format = serializers.ChoiceField(choices=FORMATS, required=False)
    columns = ColumnsMappingField(required=False, allow_blank=True)
    value_unit = serializers.CharField(required=False, allow_blank=True, max_length=80)
    time_format = serializers.ChoiceField(choices=TIME_FORMATS, required=False)
    time_scale = serializers.ChoiceField(choices=TIME_SCALES, required=False)
    time_reference = serializers.ChoiceField(choices=TIME_REFERENCES, required=False)
    met_epoch = serializers.FloatField(required=False)
    reduction = serializers.CharField(required=False, allow_blank=True, max_length=10000)
    reference = serializers.CharField(required=False, allow_blank=True, max_length=10000)
    embargo_until = serializers.DateTimeField(required=False)
    supersedes = serializers.IntegerField(required=False, min_value=1)

    def validate_met_epoch(self, value: float) -> float:
        if value != value or value in (float("inf"), float("-inf")):
            raise serializers.ValidationError("met_epoch must be a finite MJD")
        return value


class RetractInput(serializers.Serializer):
    reason = serializers.CharField(max_length=10000)


class UploadViewSet(mixins.ListModelMixin, mixins.RetrieveModelMixin, viewsets.GenericViewSet):
    serializer_class = UploadSerializer
    permission_classes = [ContributorsUpload]
    filterset_class = UploadFilter
    parser_classes = [CompleteMultiPartParser, FormParser]
    throttle_classes = [ReadThrottle, WriteScopedThrottle]
    throttle_scope = "uploads"

    def get_queryset(self):  # type: ignore[no-untyped-def]
        qs = (
            Upload.objects.select_related(
                "uploader", "file", "source", "band", "instrument", "retracted_by"
            )
            .prefetch_related("sources", "superseded_by")
            .defer("file__content")
        )
        return qs.filter(embargo_filter(self.request.user))

    @extend_schema(
        request={"multipart/form-data": UploadInput},
        responses={201: UploadSerializer},
        parameters=[
            OpenApiParameter(
                "Server-Timing",
                str,
                OpenApiParameter.HEADER,
                response=[201],
                description="W3C Server Timing: milliseconds of each stage (body, head, lock, "
                "copy, store, answer) and the total",
            )
        ],
    )
    def create(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        # The answer says where the time went (Server-Timing, lcstore/timing.py): body
        # (received and parsed), head, lock, copy, store (lcstore.services.upload_create),
        # answer.
        with timing.recording() as marks:
            response = self._create(request)
            timing.mark("answer")
        response["Server-Timing"] = timing.header(marks)
        return response

    def _create(self, request: Request) -> Response:
        limit = settings.LCSTORE_MAX_UPLOAD_MB * 1024 * 1024
        try:
            declared = int(request.META.get("CONTENT_LENGTH") or 0)
        except ValueError:
            declared = 0
        if declared > limit + 64 * 1024:
            return Response(
                {
                    "detail": f"the upload exceeds the size limit of "
                    f"{settings.LCSTORE_MAX_UPLOAD_MB} MB"
                },
                status=status.HTTP_413_REQUEST_ENTITY_TOO_LARGE,
            )
        inp = UploadInput(data=request.data)
        inp.is_valid(raise_exception=True)
        d = inp.validated_data
        f = d["file"]
        if f.size > limit:
            return Response(
                {
                    "detail": f"the file is {f.size} bytes, over the size limit of "
                    f"{settings.LCSTORE_MAX_UPLOAD_MB} MB"
                },
                status=status.HTTP_413_REQUEST_ENTITY_TOO_LARGE,
            )
        data = f.read()
        timing.mark("body")
        params = UploadParams(
            instrument=d["instrument"],
            source=d.get("source") or None,
            band=d.get("band") or None,
            format=d.get("format"),
            columns=d.get("columns"),
            value_unit=d.get("value_unit") or None,
            time_format=d.get("time_format"),
            time_scale=d.get("time_scale"),
            time_reference=d.get("time_reference"),
            met_epoch=d.get("met_epoch"),
            reduction=d.get("reduction", ""),
            reference=d.get("reference", ""),
            embargo_until=d.get("embargo_until"),
            supersedes=d.get("supersedes"),
        )
        try:
            upload = upload_create(
                uploader=request.user,
                data=data,
                file_name=f.name or "upload",
                params=params,
                max_rows=settings.LCSTORE_MAX_ROWS,
                max_columns=settings.LCSTORE_MAX_COLUMNS,
            )
        except UploadConflict as exc:
            return Response(
                {"detail": str(exc), "sources": exc.source_slugs}
                | ({"existing_upload": exc.existing.pk} if exc.visible else {}),
                status=status.HTTP_409_CONFLICT,
            )
        except UploadForbidden as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_403_FORBIDDEN)
        upload = self.get_queryset().get(pk=upload.pk)
        body = UploadSerializer(upload, context={"request": request}).data
        return Response(
            body,
            status=status.HTTP_201_CREATED,
            headers={"Location": f"/api/v1/uploads/{upload.pk}/"},
        )

    @extend_schema(responses={(200, "application/octet-stream"): bytes})
    @action(detail=True, methods=["get"])
    def file(self, request: Request, pk: str | None = None) -> HttpResponse:
        upload = self.get_object()
        stored = type(upload.file).objects.get(pk=upload.file_id)
        response = HttpResponse(stored.original(), content_type="application/octet-stream")
        safe_name = "".join(c for c in upload.file_name if c.isalnum() or c in "._-") or "upload"
        response["Content-Disposition"] = f'attachment; filename="{safe_name}"'
        response["X-Content-SHA256"] = stored.sha256
        return response

    @extend_schema(request=RetractInput, responses={200: UploadSerializer})
    @action(
        detail=True,
        methods=["post"],
        parser_classes=[JSONParser, FormParser, CompleteMultiPartParser],
    )
    def retract(self, request: Request, pk: str | None = None) -> Response:
        upload = self.get_object()
        inp = RetractInput(data=request.data)
        inp.is_valid(raise_exception=True)
        try:
            upload_retract(upload=upload, user=request.user, reason=inp.validated_data["reason"])
        except UploadForbidden as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_403_FORBIDDEN)
        upload = self.get_queryset().get(pk=upload.pk)
        return Response(UploadSerializer(upload, context={"request": request}).data)
