"""Curated catalogue resources: declarative viewsets (curators write, readers read)."""

from __future__ import annotations

from django.db.models import ProtectedError
from rest_framework import status, viewsets
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

__all__ = [
    "BandViewSet",
    "CalibrationOffsetViewSet",
    "HostFluxViewSet",
    "InstrumentViewSet",
    "SourceViewSet",
]


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


class SourceViewSet(_Curated):
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


class InstrumentViewSet(_Curated):
    queryset = Instrument.objects.all()
    serializer_class = InstrumentSerializer
    filterset_class = InstrumentFilter
    lookup_field = "slug"


class BandViewSet(_Curated):
    queryset = Band.objects.all()
    serializer_class = BandSerializer
    filterset_class = BandFilter
    lookup_field = "slug"


class CalibrationOffsetViewSet(_Curated):
    queryset = CalibrationOffset.objects.select_related("instrument", "band")
    serializer_class = CalibrationOffsetSerializer
    filterset_class = CalibrationOffsetFilter


class HostFluxViewSet(_Curated):
    queryset = HostFlux.objects.select_related("source", "band")
    serializer_class = HostFluxSerializer
    filterset_fields = ["source__slug", "band__slug"]
