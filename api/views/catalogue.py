"""Curated catalogue resources: declarative viewsets (curators write, readers read).

Sources, instruments and bands enter conversions: an update goes through
:func:`lcstore.rederive.curated_change_apply`, which re-derives the uploads that
depend on the change in the same transaction. The answer carries the ids of the
new uploads in the ``X-Lcstore-Rederived`` header (empty when none); a change
that would leave some upload unconvertible is refused with 409 and changes nothing.
"""

from __future__ import annotations

from typing import Any

from django.db.models import ProtectedError
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import (
    OpenApiParameter,
    OpenApiResponse,
    extend_schema,
    extend_schema_view,
    inline_serializer,
)
from rest_framework import serializers, status, viewsets
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import (
    BandFilter,
    CalibrationOffsetFilter,
    InstrumentFilter,
    SourceFilter,
)
from api.permissions import CuratorsWrite
from api.serializers import (
    BandSerializer,
    CalibrationOffsetSerializer,
    HostFluxSerializer,
    InstrumentSerializer,
    SourceSerializer,
)
from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source
from lcstore.queries import source_summaries
from lcstore.rederive import RederivationRefused, curated_change_apply

__all__ = [
    "BandViewSet",
    "CalibrationOffsetViewSet",
    "HostFluxViewSet",
    "InstrumentViewSet",
    "REDERIVED_HEADER",
    "SourceViewSet",
]

REDERIVED_HEADER = "X-Lcstore-Rederived"


class _Curated(viewsets.ModelViewSet):
    permission_classes = [CuratorsWrite]
    http_method_names = ["get", "post", "patch", "put", "delete", "head", "options"]

    def destroy(self, request, *args, **kwargs):  # type: ignore[no-untyped-def]
        try:
            return super().destroy(request, *args, **kwargs)
        except ProtectedError:
            return Response(
                {"detail": "this record is referenced by stored points or uploads and is kept"},
                status=status.HTTP_409_CONFLICT,
            )


_REFUSED = inline_serializer(
    "RederivationRefused",
    fields={
        "detail": serializers.CharField(),
        "uploads": serializers.ListField(child=serializers.IntegerField()),
    },
)


def _rederiving_updates(serializer: type[serializers.Serializer]) -> Any:
    """Schema of PUT/PATCH of a record that enters conversions: the header and the 409."""
    schema = extend_schema(
        description="Curators change the record; the uploads whose points depend on the "
        "changed fields are re-derived from their kept files in the same transaction.",
        parameters=[
            OpenApiParameter(
                REDERIVED_HEADER,
                OpenApiTypes.STR,
                location=OpenApiParameter.HEADER,
                response=[200],
                description="comma list of the ids of the uploads re-derived by this change "
                "(empty when none)",
            )
        ],
        responses={
            200: serializer,
            409: OpenApiResponse(
                _REFUSED,
                description="refused: some dependent upload cannot be converted with the new "
                "metadata (their ids in uploads); nothing was changed",
            ),
        },
    )
    return extend_schema_view(update=schema, partial_update=schema)


class _CuratedConversions(_Curated):
    # A curated record that enters conversions: updates re-derive what depends on them.

    def update(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        self.rederived: list[Any] = []
        try:
            response = super().update(request, *args, **kwargs)
        except RederivationRefused as exc:
            return Response(
                {"detail": exc.message, "uploads": exc.upload_ids},
                status=status.HTTP_409_CONFLICT,
            )
        response[REDERIVED_HEADER] = ",".join(str(u.pk) for u in self.rederived)
        return response

    def perform_update(self, serializer: Any) -> None:
        obj, self.rederived = curated_change_apply(
            instance=serializer.instance,
            changes=dict(serializer.validated_data),
            user=self.request.user,
        )
        serializer.instance = obj


@_rederiving_updates(SourceSerializer)
class SourceViewSet(_CuratedConversions):
    queryset = Source.objects.all()
    serializer_class = SourceSerializer
    filterset_class = SourceFilter
    lookup_field = "slug"

    def list(self, request, *args, **kwargs):  # type: ignore[no-untyped-def]
        qs = self.filter_queryset(self.get_queryset())
        page = self.paginate_queryset(qs)
        items = list(page if page is not None else qs)
        context = self.get_serializer_context()
        context["summaries"] = source_summaries(source_ids=[s.pk for s in items], user=request.user)
        data = SourceSerializer(items, many=True, context=context).data
        return self.get_paginated_response(data) if page is not None else Response(data)


@_rederiving_updates(InstrumentSerializer)
class InstrumentViewSet(_CuratedConversions):
    queryset = Instrument.objects.all()
    serializer_class = InstrumentSerializer
    filterset_class = InstrumentFilter
    lookup_field = "slug"


@_rederiving_updates(BandSerializer)
class BandViewSet(_CuratedConversions):
    queryset = Band.objects.all()
    serializer_class = BandSerializer
    filterset_class = BandFilter
    lookup_field = "slug"


class CalibrationOffsetViewSet(_Curated):
    queryset = CalibrationOffset.objects.select_related("instrument", "band")
    serializer_class = CalibrationOffsetSerializer
    filterset_class = CalibrationOffsetFilter


class HostFluxViewSet(_Curated):
    queryset = HostFlux.objects.select_related("source", "band").order_by(
        "source__slug", "band__slug", "id"
    )
    serializer_class = HostFluxSerializer
    filterset_fields = ["source__slug", "band__slug"]
