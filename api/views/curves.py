"""Light-curve resource: validate the query, one service call, render."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
from astropy.table import Table
from django.conf import settings
from django.http import HttpResponse, HttpResponseBase, StreamingHttpResponse
from django.shortcuts import get_object_or_404
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import serializers
from rest_framework.renderers import JSONRenderer
from rest_framework.request import Request
from rest_framework.response import Response
from rest_framework.views import APIView

from api.cache import cached_answer
from api.permissions import ReadAccess
from api.renderers import (
    CSVRenderer,
    ECSVRenderer,
    PNGRenderer,
    SVGRenderer,
    VOTableRenderer,
    csv_stream,
    json_safe,
    table_bytes,
)
from lcstore.curves import (
    SQL_COPY,
    CurveRequest,
    CurveRequestError,
    Lightcurve,
    lightcurve_build,
    lightcurve_raw_csv,
    parse_units,
    pull_path,
)
from lcstore.models import Source
from lcstore.science.dust import LAWS
from lcstore.science.times import mjd_tdb_to

__all__ = ["ComputedView", "LightcurveView", "comma_list"]

UNBINNED = ["band", "time", "value", "error", "upper_limit", "instrument", "upload"]
BINNED = ["band", "time", "time_lo", "time_hi", "value", "error", "upper_limit", "n"]

TIME_META = {
    "TIMESYS": "TDB",
    "TREFPOS": "BARYCENTER",
    "TIMEUNIT": "d",
    "MJDREF": 0.0,
}


def comma_list(value: str | None) -> list[str] | None:
    if value is None or not value.strip():
        return None
    return [v.strip() for v in value.split(",") if v.strip()]


class ComputedView(APIView):
    """Base of computed resources: table formats negotiated, errors always JSON."""

    permission_classes = [ReadAccess]
    renderer_classes = [JSONRenderer, CSVRenderer, ECSVRenderer, VOTableRenderer]

    def handle_exception(self, exc: Exception) -> Response:
        if isinstance(exc, CurveRequestError):
            exc = serializers.ValidationError({"detail": str(exc)})
        response = super().handle_exception(exc)
        self.request.accepted_renderer = JSONRenderer()
        self.request.accepted_media_type = "application/json"
        return response

    def source(self, slug: str) -> Source:
        return get_object_or_404(Source, slug=slug)

    @property
    def out_format(self) -> str:
        renderer = getattr(self.request, "accepted_renderer", None)
        return getattr(renderer, "format", "json") or "json"


class LightcurveQuery(serializers.Serializer):
    bands = serializers.CharField(required=False, help_text="comma list of band slugs")
    instruments = serializers.CharField(required=False, help_text="comma list of instrument slugs")
    unit = serializers.CharField(
        required=False,
        help_text="astropy unit string, nufnu, ABmag, mag, or a comma list with one per band",
    )
    bin = serializers.CharField(
        required=False, help_text="1d, 6h, 30min, 3600s, a number of days, or blocks"
    )
    origin = serializers.FloatField(required=False, default=0.0, help_text="MJD of a bin edge")
    p0 = serializers.FloatField(required=False, default=0.05, min_value=1e-12, max_value=1.0)
    start = serializers.FloatField(required=False, help_text="MJD TDB")
    end = serializers.FloatField(required=False, help_text="MJD TDB")
    time_format = serializers.ChoiceField(choices=["mjd", "jd", "isot"], default="mjd")
    upper_limits = serializers.ChoiceField(choices=["include", "exclude"], default="include")
    deredden = serializers.BooleanField(default=False)
    extinction_law = serializers.ChoiceField(choices=list(LAWS), default="ccm89")
    r_v = serializers.FloatField(default=3.1, min_value=1.0, max_value=10.0)
    host = serializers.BooleanField(default=False, help_text="subtract the curated host flux")
    as_of = serializers.DateTimeField(required=False, help_text="ISO 8601 instant")

    def validate(self, attrs: dict[str, Any]) -> dict[str, Any]:
        for key in ("origin", "start", "end"):
            v = attrs.get(key)
            if v is not None and not np.isfinite(v):
                raise serializers.ValidationError({key: "must be a finite number"})
        if attrs.get("start") is not None and attrs.get("end") is not None:
            if attrs["start"] > attrs["end"]:
                raise serializers.ValidationError({"end": "end must not precede start"})
        return attrs


def _curve_request(q: dict[str, Any]) -> CurveRequest:
    bands = comma_list(q.get("bands"))
    return CurveRequest(
        bands=bands,
        instruments=comma_list(q.get("instruments")),
        units=parse_units(q.get("unit"), len(bands) if bands else None),
        bin=(q.get("bin") or "").strip() or None,
        origin=q["origin"],
        p0=q["p0"],
        start=q.get("start"),
        end=q.get("end"),
        upper_limits=q["upper_limits"],
        deredden=q["deredden"],
        extinction_law=q["extinction_law"],
        r_v=q["r_v"],
        host=q["host"],
        as_of=q.get("as_of"),
        max_bins=settings.LCSTORE_MAX_BINS,
    )


def _times(t: np.ndarray, fmt: str) -> np.ndarray:
    return t if fmt == "mjd" else mjd_tdb_to(t, fmt)


def _blocks(lc: Lightcurve, time_format: str) -> list[dict[str, np.ndarray]]:
    out = []
    for c in lc.curves:
        block: dict[str, np.ndarray] = {
            "band": np.full(len(c), c.band.slug, dtype=object),
            "time": _times(c.time, time_format),
            "value": c.value,
            "error": c.error,
            "upper_limit": c.upper_limit,
        }
        if lc.binned:
            block["time_lo"] = _times(c.time_lo, time_format)
            block["time_hi"] = _times(c.time_hi, time_format)
            block["n"] = c.n
        else:
            block["instrument"] = c.instrument
            block["upload"] = c.upload
        out.append(block)
    return out


def _time_description(fmt: str) -> str:
    return {
        "mjd": "MJD (TDB) at the solar-system barycentre (BJD_TDB - 2400000.5)",
        "jd": "BJD_TDB: Julian date (TDB) at the solar-system barycentre",
        "isot": "ISO 8601 date-time in TDB at the solar-system barycentre",
    }[fmt]


def _band_meta(c: Any) -> dict[str, Any]:
    b = c.band
    return {
        "slug": b.slug,
        "name": b.name,
        "kind": b.kind,
        "unit": c.unit_label,
        "wavelength_eff": b.wavelength_eff,
        "mag_system": b.mag_system,
        "zero_point_jy": b.zero_point_jy,
        "energy_min_kev": b.energy_min_kev,
        "energy_max_kev": b.energy_max_kev,
        "pivot_energy_kev": b.spec().pivot_kev,
        "photon_index": b.photon_index,
        "n_rows": len(c),
        "steps": c.steps,
    }


def _provenance(lc: Lightcurve) -> list[dict[str, Any]]:
    return [
        {
            "upload": u.pk,
            "uploader": u.uploader.username,
            "created_at": u.created_at.isoformat(),
            "file_name": u.file_name,
            "sha256": u.file_id,
            "instrument": u.instrument.slug,
            "band": u.band.slug if u.band else None,
            "reduction": u.reduction,
            "reference": u.reference,
            "status": u.status,
        }
        for u in lc.uploads
    ]


def _ucd(kind: str, unit: str) -> str:
    if "mag" in unit.lower():
        return "phot.mag"
    return {
        "flux_density": "phot.flux.density",
        "energy_flux": "phot.flux",
        "photon_flux": "phot.flux",
        "count_rate": "phot.count",
    }.get(kind, "phot.flux")


def lightcurve_table(lc: Lightcurve, time_format: str) -> Table:
    """The answer as an astropy Table with units, descriptions, UCDs and time metadata."""
    cols = BINNED if lc.binned else UNBINNED
    blocks = _blocks(lc, time_format)
    data = {k: (np.concatenate([b[k] for b in blocks]) if blocks else np.zeros(0)) for k in cols}
    t = Table()
    for k in cols:
        arr = data[k]
        if k in ("band", "instrument"):
            arr = arr.astype(str)
        t[k] = arr
    units = {c.unit_label for c in lc.curves}
    kinds = {c.band.kind for c in lc.curves}
    uniform = units.pop() if len(units) == 1 else None
    descr = {
        "band": ("band slug", "instr.bandpass"),
        "time": (
            _time_description(time_format) + (" (bin centre)" if lc.binned else ""),
            "time.epoch",
        ),
        "time_lo": ("bin start, " + _time_description(time_format), "time.start"),
        "time_hi": ("bin end, " + _time_description(time_format), "time.end"),
        "value": (
            "flux (or magnitude) in the unit of the column or of meta band_units",
            _ucd(kinds.pop() if len(kinds) == 1 else "", uniform or ""),
        ),
        "error": ("1-sigma uncertainty of value", "stat.error"),
        "upper_limit": ("true: value is an upper limit", "meta.code"),
        "instrument": ("instrument slug", "instr"),
        "upload": ("id of the upload the point came from", "meta.id"),
        "n": ("number of points averaged in the bin", "meta.number"),
    }
    for k in cols:
        t[k].description = descr[k][0]
        if descr[k][1]:
            t[k].meta["ucd"] = descr[k][1]
    if time_format in ("mjd", "jd"):
        for k in ("time", "time_lo", "time_hi"):
            if k in t.colnames:
                t[k].unit = "d"
    if uniform and uniform != "mag":
        from astropy import units as u

        try:
            unit = u.Unit(uniform)
            t["value"].unit = unit
            t["error"].unit = unit
        except ValueError:
            pass
    t.meta.update(TIME_META)
    if time_format == "jd":
        t.meta["MJDREF"] = -2400000.5
        t.meta["JDREF"] = 0.0
    t.meta["time_format"] = time_format
    t.meta["source"] = lc.source.slug
    t.meta["band_units"] = {c.band.slug: c.unit_label for c in lc.curves}
    t.meta["binned"] = lc.binned
    t.meta["uploads"] = [u.pk for u in lc.uploads]
    return t


@extend_schema(
    parameters=[
        LightcurveQuery,
        OpenApiParameter("format", OpenApiTypes.STR, enum=["json", "csv", "ecsv", "votable"]),
    ],
    responses={200: OpenApiTypes.OBJECT},
    description="Points or bins of one source, merged over instruments, in the unit asked.",
)
class LightcurveView(ComputedView):
    throttle_scope = "heavy"
    renderer_classes = [*ComputedView.renderer_classes, PNGRenderer, SVGRenderer]

    def get(self, request: Request, slug: str) -> Any:
        source = self.source(slug)
        q = LightcurveQuery(data=request.query_params)
        q.is_valid(raise_exception=True)
        params = q.validated_data
        fmt = self.out_format
        curve_request = _curve_request(params)

        def build() -> HttpResponseBase:
            if pull_path(curve_request, fmt=fmt, time_format=params["time_format"]) == SQL_COPY:
                chunks = lightcurve_raw_csv(source=source, user=request.user, request=curve_request)
                return csv_response(StreamingHttpResponse(chunks), source)
            lc = lightcurve_build(source=source, user=request.user, request=curve_request)
            return render_lightcurve(lc, params, fmt)

        return cached_answer(request, source, fmt, build)


def csv_response(response: HttpResponseBase, source: Source) -> HttpResponseBase:
    """The headers of every CSV light-curve answer."""
    response["Content-Type"] = "text/csv; charset=utf-8"
    response["Content-Disposition"] = f'inline; filename="{source.slug}-lightcurve.csv"'
    return response


def render_lightcurve(lc: Lightcurve, params: dict[str, Any], fmt: str) -> HttpResponseBase:
    """The answer in the negotiated format; raw CSV streams, everything else is one body."""
    tf = params["time_format"]
    source = lc.source
    if fmt == "csv":
        header = BINNED if lc.binned else UNBINNED
        chunks = csv_stream(header, _blocks(lc, tf))
        if lc.binned:
            return csv_response(HttpResponse(b"".join(chunks)), source)
        return csv_response(StreamingHttpResponse(chunks), source)
    if fmt in ("ecsv", "votable"):
        body = table_bytes(lightcurve_table(lc, tf), fmt)
        ctype = "text/x-ecsv" if fmt == "ecsv" else "application/x-votable+xml"
        return HttpResponse(body, content_type=ctype)
    if fmt in ("png", "svg"):
        return plot_response(lc, tf, fmt)
    cols = BINNED if lc.binned else UNBINNED
    rows: list[dict[str, Any]] = []
    for block in _blocks(lc, tf):
        lists = {k: json_safe(np.asarray(block[k])) for k in cols}
        rows.extend(
            dict(zip(cols, vals, strict=True)) for vals in zip(*lists.values(), strict=True)
        )
    body = {
        "source": {
            "slug": source.slug,
            "name": source.name,
            "ra": source.ra,
            "dec": source.dec,
            "redshift": source.redshift,
            "ebv": source.ebv,
        },
        "time": {
            "format": tf,
            "scale": "tdb",
            "reference": "BARYCENTER",
            "description": _time_description(tf),
        },
        "binned": lc.binned,
        "bin": params.get("bin"),
        "as_of": params["as_of"].isoformat() if params.get("as_of") else None,
        "bands": [_band_meta(c) for c in lc.curves],
        "provenance": {"uploads": _provenance(lc)},
        "columns": cols,
        "n_rows": len(rows),
        "rows": rows,
    }
    return HttpResponse(json.dumps(body, allow_nan=False), content_type="application/json")


def plot_response(lc: Lightcurve, time_format: str, fmt: str) -> HttpResponse:
    """Stacked panels, one per band, on a shared time axis (matplotlib on the server)."""
    from lcstore.plots import lightcurve_figure

    panels = [
        {
            "band": c.band.slug,
            "unit": c.unit_label,
            "time": c.time,
            "value": c.value,
            "error": c.error,
            "upper_limit": c.upper_limit,
            "is_magnitude": "mag" in c.unit_label,
            "style": c.band.pk,
            **({"quantity": "νF_ν"} if c.unit == "nufnu" else {}),
        }
        for c in lc.curves
    ]
    body = lightcurve_figure(panels, time_label="MJD (TDB, barycentric)", fmt=fmt)
    ctype = "image/png" if fmt == "png" else "image/svg+xml"
    return HttpResponse(body, content_type=ctype)
