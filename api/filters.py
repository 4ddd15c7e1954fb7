"""FilterSets of the catalogue lists: name/alias search and cone search for sources."""

from __future__ import annotations

import math
from typing import Any

import django_filters
import numpy as np
from django.db.models import Q, QuerySet
from rest_framework.exceptions import ValidationError

from lcstore.models import Band, CalibrationOffset, Instrument, Source, Upload

__all__ = ["BandFilter", "InstrumentFilter", "SourceFilter", "UploadFilter", "cone_filter"]


def cone_filter(qs: QuerySet[Source], ra: float, dec: float, radius: float) -> QuerySet[Source]:
    """Sources within ``radius`` degrees of (ra, dec), ICRS.

    A declination band narrows the rows in SQL; the exact great-circle distance
    (Vincenty's formula, as astropy's ``angular_separation``) decides.
    """
    from astropy.coordinates import angular_separation

    if not (0 <= ra < 360 and -90 <= dec <= 90 and 0 < radius <= 180):
        raise ValidationError(
            {"detail": "cone search needs 0 <= ra < 360, -90 <= dec <= 90, 0 < radius <= 180 (deg)"}
        )
    candidates = list(
        qs.filter(dec__gte=dec - radius, dec__lte=dec + radius).values_list("pk", "ra", "dec")
    )
    if not candidates:
        return qs.none()
    pk, r, d = (np.array(c) for c in zip(*candidates, strict=True))
    sep = np.degrees(
        angular_separation(np.radians(r), np.radians(d), math.radians(ra), math.radians(dec))
    )
    return qs.filter(pk__in=pk[sep <= radius].tolist())


class SourceFilter(django_filters.FilterSet):
    q = django_filters.CharFilter(method="filter_q", label="name, slug or alias (substring)")
    ra = django_filters.NumberFilter(method="filter_noop", label="cone centre RA, deg (ICRS)")
    dec = django_filters.NumberFilter(method="filter_noop", label="cone centre Dec, deg (ICRS)")
    radius = django_filters.NumberFilter(method="filter_noop", label="cone radius, deg")

    class Meta:
        model = Source
        fields = ["q", "ra", "dec", "radius"]

    def filter_q(self, qs: QuerySet[Source], name: str, value: str) -> QuerySet[Source]:
        value = value.strip()
        if not value:
            return qs
        # Aliases are a JSON list: match them as text, then confirm per element.
        hits = Q(name__icontains=value) | Q(slug__icontains=value)
        alias_ids = [
            s.pk
            for s in qs.filter(aliases__icontains=value).only("pk", "aliases")
            if any(value.lower() in a.lower() for a in s.aliases)
        ]
        return qs.filter(hits | Q(pk__in=alias_ids))

    def filter_noop(self, qs: QuerySet[Source], name: str, value: Any) -> QuerySet[Source]:
        return qs

    @property
    def qs(self) -> QuerySet[Source]:
        qs = super().qs
        data = self.form.cleaned_data if self.form.is_valid() else {}
        cone = [data.get(k) for k in ("ra", "dec", "radius")]
        if any(c is not None for c in cone):
            if any(c is None for c in cone):
                raise ValidationError({"detail": "cone search needs all of ra, dec and radius"})
            qs = cone_filter(qs, float(cone[0]), float(cone[1]), float(cone[2]))
        return qs


class InstrumentFilter(django_filters.FilterSet):
    class Meta:
        model = Instrument
        fields = ["kind"]


class BandFilter(django_filters.FilterSet):
    class Meta:
        model = Band
        fields = ["kind", "mag_system"]


class CalibrationOffsetFilter(django_filters.FilterSet):
    instrument = django_filters.CharFilter(field_name="instrument__slug")
    band = django_filters.CharFilter(field_name="band__slug")

    class Meta:
        model = CalibrationOffset
        fields = ["instrument", "band"]


class UploadFilter(django_filters.FilterSet):
    source = django_filters.CharFilter(field_name="sources__slug")
    band = django_filters.CharFilter(field_name="band__slug")
    instrument = django_filters.CharFilter(field_name="instrument__slug")
    uploader = django_filters.CharFilter(field_name="uploader__username")

    class Meta:
        model = Upload
        fields = ["source", "band", "instrument", "uploader", "status"]
