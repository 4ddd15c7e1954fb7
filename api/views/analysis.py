"""Computed summaries: correlation, lags, variability, SED. Validate, one service call, render."""

from __future__ import annotations

from typing import Any

import numpy as np
from django.conf import settings
from django.http import HttpResponse, StreamingHttpResponse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import serializers
from rest_framework.request import Request
from rest_framework.response import Response

from api.renderers import PNGRenderer, SVGRenderer, csv_stream
from api.views.curves import ComputedView, comma_list
from lcstore.analysis import (
    LagParams,
    correlation_summary,
    lags_summary,
    sed_snapshot,
    variability_bands,
)

__all__ = [
    "CorrelationQuery",
    "CorrelationView",
    "LagsQuery",
    "LagsView",
    "SedView",
    "VariabilityView",
    "lag_params",
]

FORMAT_PARAM = OpenApiParameter("format", OpenApiTypes.STR, enum=["json", "csv", "png", "svg"])


def _finite(value: float | None, name: str) -> None:
    if value is not None and not np.isfinite(value):
        raise serializers.ValidationError({name: "must be a finite number"})


def _floats(values: list) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def _image(body: bytes, fmt: str) -> HttpResponse:
    return HttpResponse(body, content_type="image/png" if fmt == "png" else "image/svg+xml")


class CorrelationQuery(serializers.Serializer):
    x = serializers.SlugField(help_text="band slug of the x axis")
    y = serializers.SlugField(help_text="band slug of the y axis")
    bin = serializers.CharField(required=False, default="1d", help_text="bin width for pairing")
    max_separation = serializers.FloatField(
        required=False, min_value=0.0, help_text="pair nearest points within this many days"
    )
    n_boot = serializers.IntegerField(required=False, default=1000, min_value=0, max_value=20000)
    seed = serializers.IntegerField(required=False, default=0, min_value=0)
    as_of = serializers.DateTimeField(required=False)

    def validate(self, attrs: dict[str, Any]) -> dict[str, Any]:
        _finite(attrs.get("max_separation"), "max_separation")
        if attrs.get("bin") == "blocks":
            raise serializers.ValidationError({"bin": "pairing needs fixed-width bins"})
        return attrs


class LagsQuery(serializers.Serializer):
    x = serializers.SlugField(help_text="band slug of the driving curve")
    y = serializers.SlugField(help_text="band slug of the curve tested for a lag behind x")
    method = serializers.ChoiceField(choices=["dcf", "zdcf", "iccf"], default="dcf")
    lag_min = serializers.FloatField(required=False, help_text="days")
    lag_max = serializers.FloatField(required=False, help_text="days")
    lag_step = serializers.FloatField(required=False, min_value=1e-9, help_text="days")
    local = serializers.BooleanField(default=False, help_text="DCF with local normalisation")
    min_pairs = serializers.IntegerField(default=11, min_value=2, max_value=10000)
    bin = serializers.CharField(required=False, help_text="bin the curves first")
    n_sim = serializers.IntegerField(
        default=0, min_value=0, help_text="FR/RSS realisations for lag errors"
    )
    n_sig = serializers.IntegerField(
        default=0, min_value=0, help_text="red-noise simulations for 95/99 % levels"
    )
    psd_slope = serializers.FloatField(required=False, min_value=0.0, max_value=4.0)
    seed = serializers.IntegerField(default=0, min_value=0)
    as_of = serializers.DateTimeField(required=False)

    def validate(self, attrs: dict[str, Any]) -> dict[str, Any]:
        for k in ("lag_min", "lag_max", "lag_step"):
            _finite(attrs.get(k), k)
        if attrs.get("lag_min") is not None and attrs.get("lag_max") is not None:
            if attrs["lag_min"] >= attrs["lag_max"]:
                raise serializers.ValidationError({"lag_max": "lag_max must exceed lag_min"})
        limit = settings.LCSTORE_MAX_SIMULATIONS
        if attrs["n_sim"] + attrs["n_sig"] > limit:
            raise serializers.ValidationError(
                {"n_sim": f"at most {limit} simulations in all per request"}
            )
        return attrs


def lag_params(q: dict[str, Any]) -> LagParams:
    return LagParams(
        method=q["method"],
        lag_min=q.get("lag_min"),
        lag_max=q.get("lag_max"),
        lag_step=q.get("lag_step"),
        local=q["local"],
        min_pairs=q["min_pairs"],
        bin=q.get("bin") or None,
        n_sim=q["n_sim"],
        n_sig=q["n_sig"],
        psd_slope=q.get("psd_slope"),
        seed=q["seed"],
        max_grid=settings.LCSTORE_MAX_LAG_POINTS,
    )


def _csv(header: list[str], columns: dict[str, Any], name: str) -> StreamingHttpResponse:
    block = {h: np.array([np.nan if v is None else v for v in columns[h]]) for h in header}
    response = StreamingHttpResponse(csv_stream(header, [block]), content_type="text/csv")
    response["Content-Disposition"] = f'inline; filename="{name}.csv"'
    return response


@extend_schema(
    parameters=[CorrelationQuery, FORMAT_PARAM],
    responses={200: OpenApiTypes.OBJECT},
    description="Flux–flux correlation and log–log slope of two bands.",
)
class CorrelationView(ComputedView):
    renderer_classes = [*ComputedView.renderer_classes, PNGRenderer, SVGRenderer]
    throttle_scope = "heavy"

    def get(self, request: Request, slug: str) -> Any:
        source = self.source(slug)
        q = CorrelationQuery(data=request.query_params)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        result = correlation_summary(
            source=source,
            user=request.user,
            x=d["x"],
            y=d["y"],
            bin=d.get("bin"),
            max_separation=d.get("max_separation"),
            as_of=d.get("as_of"),
            n_boot=d["n_boot"],
            seed=d["seed"],
        )
        if self.out_format == "csv":
            return _csv(["time_x", "time_y", "x", "y"], result["pairs"], f"{slug}-pairs")
        if self.out_format in ("png", "svg"):
            from lcstore.plots import correlation_figure

            units = result["units"]
            body = correlation_figure(
                _floats(result["pairs"]["x"]),
                _floats(result["pairs"]["y"]),
                x_label=f"{d['x']} ({units[d['x']]})",
                y_label=f"{d['y']} ({units[d['y']]})",
                slope=result.get("slope_bisector"),
                intercept=result.get("intercept_bisector"),
                slope_error=result.get("slope_bisector_error"),
                fmt=self.out_format,
                title=f"{source.name}: {d['y']} against {d['x']}",
            )
            return _image(body, self.out_format)
        return Response(result)


@extend_schema(
    parameters=[LagsQuery, FORMAT_PARAM],
    responses={200: OpenApiTypes.OBJECT},
    description="Lag function of y against x; positive lag: y lags behind x.",
)
class LagsView(ComputedView):
    renderer_classes = [*ComputedView.renderer_classes, PNGRenderer, SVGRenderer]
    throttle_scope = "heavy"

    def get(self, request: Request, slug: str) -> Any:
        source = self.source(slug)
        q = LagsQuery(data=request.query_params)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        sync_limit = settings.LCSTORE_SYNC_SIMULATIONS
        if d["n_sim"] + d["n_sig"] > sync_limit:
            raise serializers.ValidationError(
                {
                    "detail": f"more than {sync_limit} simulations run as a background job: "
                    "POST /api/v1/jobs/ with kind=lags and these parameters"
                }
            )
        result = lags_summary(
            source=source,
            user=request.user,
            x=d["x"],
            y=d["y"],
            params=lag_params(d),
            as_of=d.get("as_of"),
        )
        if self.out_format == "csv":
            return _csv(["lag", "coefficient", "error", "n_pairs"], result["rows"], f"{slug}-lags")
        if self.out_format in ("png", "svg"):
            from lcstore.plots import lags_figure

            rows = result["rows"]
            sig = result.get("significance")
            levels = (
                {"95": _floats(sig["level_95"]), "99": _floats(sig["level_99"])} if sig else None
            )
            body = lags_figure(
                _floats(rows["lag"]),
                _floats(rows["coefficient"]),
                np.vstack([_floats(rows["error_lo"]), _floats(rows["error_hi"])]),
                method=result["method"],
                levels=levels,
                peak=result["peak_lag"],
                centroid=result["centroid_lag"],
                x_name=d["x"],
                y_name=d["y"],
                fmt=self.out_format,
                title=f"{source.name}: {result['method'].upper()}",
            )
            return _image(body, self.out_format)
        return Response(result)


class VariabilityQuery(serializers.Serializer):
    bands = serializers.CharField(required=False, help_text="comma list of band slugs")
    bin = serializers.CharField(required=False)
    as_of = serializers.DateTimeField(required=False)


@extend_schema(
    parameters=[VariabilityQuery],
    responses={200: OpenApiTypes.OBJECT},
    description="Per-band variability: F_var (Vaughan et al. 2003), chi-square.",
)
class VariabilityView(ComputedView):
    throttle_scope = "heavy"

    def get(self, request: Request, slug: str) -> Any:
        source = self.source(slug)
        q = VariabilityQuery(data=request.query_params)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        return Response(
            variability_bands(
                source=source,
                user=request.user,
                bands=comma_list(d.get("bands")),
                bin=d.get("bin"),
                as_of=d.get("as_of"),
            )
        )


class SedQuery(serializers.Serializer):
    at = serializers.FloatField(help_text="MJD TDB of the snapshot")
    window = serializers.FloatField(
        default=1.0,
        min_value=1e-6,
        max_value=1e5,
        help_text="days; points with |t - at| <= window/2",
    )
    bands = serializers.CharField(required=False)
    deredden = serializers.BooleanField(default=False)
    as_of = serializers.DateTimeField(required=False)

    def validate(self, attrs: dict[str, Any]) -> dict[str, Any]:
        _finite(attrs.get("at"), "at")
        return attrs


@extend_schema(
    parameters=[SedQuery],
    responses={200: OpenApiTypes.OBJECT},
    description="Quasi-simultaneous nuFnu per band around an epoch.",
)
class SedView(ComputedView):
    throttle_scope = "heavy"

    def get(self, request: Request, slug: str) -> Any:
        source = self.source(slug)
        q = SedQuery(data=request.query_params)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        return Response(
            sed_snapshot(
                source=source,
                user=request.user,
                at=d["at"],
                window=d["window"],
                bands=comma_list(d.get("bands")),
                as_of=d.get("as_of"),
                deredden=d["deredden"],
            )
        )
