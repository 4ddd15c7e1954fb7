"""Server-rendered pages: source list, a page per source, an upload form.

The pages call the same services and selectors as the API; the plot is the
API's own PNG rendering, so what a person sees is what a script pulls.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import urlencode

from django.contrib.auth.decorators import login_required
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, render

from api.parsers import body_shortfall
from api.throttles import BudgetSpent, upload_budget_charge
from lcstore import roles
from lcstore.ingest.columns import columns_mapping_parse
from lcstore.ingest.pipeline import UploadInvalid
from lcstore.models import Band, Instrument, Source
from lcstore.queries import source_summaries
from lcstore.services import UploadConflict, UploadForbidden, UploadParams, upload_create

__all__ = ["source_detail", "source_list", "upload_form"]


@login_required
def source_list(request: HttpRequest) -> HttpResponse:
    sources = list(Source.objects.order_by("slug"))
    summaries = source_summaries(source_ids=[s.pk for s in sources], user=request.user)
    rows = [{"source": s, "bands": summaries.get(s.pk, [])} for s in sources]
    return render(request, "web/source_list.html", {"rows": rows})


@login_required
def source_detail(request: HttpRequest, slug: str) -> HttpResponse:
    source = get_object_or_404(Source, slug=slug)
    summary = source_summaries(source_ids=[source.pk], user=request.user)[source.pk]
    available = [b["band"] for b in summary]
    chosen = [b for b in request.GET.getlist("bands") if b in available] or available
    bin_width = request.GET.get("bin", "1d")
    unit = request.GET.get("unit", "")
    query: dict[str, Any] = {"bands": ",".join(chosen)}
    if bin_width:
        query["bin"] = bin_width
    if unit:
        query["unit"] = unit
    api = f"/api/v1/sources/{source.slug}/lightcurve/"
    links = {
        fmt: f"{api}?{urlencode(query | {'format': fmt})}"
        for fmt in ("csv", "ecsv", "votable", "json", "png", "svg")
    }
    return render(
        request,
        "web/source_detail.html",
        {
            "source": source,
            "summary": summary,
            "available": available,
            "chosen": chosen,
            "bin": bin_width,
            "unit": unit,
            "links": links,
            "api": api,
        },
    )


def _wait_words(seconds: int) -> str:
    if seconds < 90:
        return f"{seconds} second{'s' if seconds != 1 else ''}"
    minutes = -(-seconds // 60)
    if minutes < 90:
        return f"{minutes} minutes"
    return f"{-(-minutes // 60)} hours"


def _period_words(seconds: int) -> str:
    return {1: "second", 60: "minute", 3600: "hour", 86400: "day"}.get(
        seconds, f"{seconds} seconds"
    )


def _budget_message(spent: BudgetSpent) -> str:
    return (
        f"You have sent too many uploads: this account may send {spent.allowed} per "
        f"{_period_words(spent.period_s)} (the form and the API share the budget). "
        f"This file was not read and nothing was stored. "
        f"Try again in {_wait_words(spent.retry_after_s)}."
    )


@login_required
def upload_form(request: HttpRequest) -> HttpResponse:
    context: dict[str, Any] = {
        "sources": Source.objects.order_by("slug"),
        "bands": Band.objects.order_by("slug"),
        "instruments": Instrument.objects.order_by("slug"),
        "may_upload": roles.is_contributor(request.user),
        "values": request.POST if request.method == "POST" else {},
    }
    status = 200
    spent = None
    if request.method == "POST" and context["may_upload"]:
        # The API's upload budget (api/throttles.py), charged before any work, as there.
        spent = upload_budget_charge(request)
    if spent is not None:
        context["error"] = _budget_message(spent)
        response = render(request, "web/upload.html", context, status=429)
        response["Retry-After"] = str(spent.retry_after_s)
        return response
    if request.method == "POST" and context["may_upload"]:
        f = request.FILES.get("file")
        columns = request.POST.get("columns") or ""
        try:
            cut = body_shortfall(request)
            if cut is not None:
                raise ValueError(
                    f"the upload ended after {cut[0]} of {cut[1]} bytes (the connection was "
                    "cut); nothing was stored, please send it again"
                )
            if f is None:
                raise ValueError("choose a file to upload")
            mapping = columns_mapping_parse(columns)
            params = UploadParams(
                instrument=request.POST.get("instrument", ""),
                source=request.POST.get("source") or None,
                band=request.POST.get("band") or None,
                columns=mapping,
                value_unit=request.POST.get("value_unit") or None,
                time_format=request.POST.get("time_format") or None,
                time_scale=request.POST.get("time_scale") or None,
                time_reference=request.POST.get("time_reference") or None,
                reduction=request.POST.get("reduction", ""),
                reference=request.POST.get("reference", ""),
            )
            upload = upload_create(
                uploader=request.user, data=f.read(), file_name=f.name or "upload", params=params
            )
            context["accepted"] = upload
            status = 201
        except UploadInvalid as exc:
            context["problems"] = exc.problems
            context["n_problems"] = exc.total
            status = 400
        except UploadConflict as exc:
            context["error"] = str(exc)
            status = 409
        except (UploadForbidden, ValueError) as exc:
            context["error"] = str(exc)
            status = 400
    elif request.method == "POST":
        context["error"] = "only contributors may upload"
        status = 403
    return render(request, "web/upload.html", context, status=status)
