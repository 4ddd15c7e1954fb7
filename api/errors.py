"""Every error is a JSON object with a human-readable ``detail`` (a string).

Upload problems add ``errors``: a list of ``{row, column, message}``. The
``not_found``/``bad_request``/``server_error`` views answer the same way for
errors Django raises before (or outside) a DRF view, under ``/api/`` only
(the root URLconf names them as ``handler404``/``handler400``/``handler500``).
"""

from __future__ import annotations

from typing import Any

from django.core.exceptions import (
    RequestDataTooBig,
    TooManyFieldsSent,
    TooManyFilesSent,
)
from django.core.exceptions import ValidationError as DjangoValidationError
from django.db import DataError
from django.http import HttpRequest, HttpResponse, JsonResponse
from django.views import defaults
from rest_framework import status
from rest_framework.exceptions import ParseError, ValidationError
from rest_framework.response import Response
from rest_framework.views import exception_handler as drf_exception_handler

from lcstore.ingest.pipeline import UploadInvalid

__all__ = [
    "bad_request",
    "exception_handler",
    "not_found",
    "problems_response",
    "server_error",
]


_NUL = "NUL (0x00)"


def _flatten(data: Any, prefix: str = "") -> list[str]:
    if isinstance(data, dict):
        out: list[str] = []
        for k, v in data.items():
            out += _flatten(v, f"{prefix}{k}: " if k != "non_field_errors" else prefix)
        return out
    if isinstance(data, list):
        return [m for item in data for m in _flatten(item, prefix)]
    return [f"{prefix}{data}"]


def problems_response(exc: UploadInvalid) -> Response:
    errors = [{"row": p.row, "column": p.column, "message": p.message} for p in exc.problems]
    body = {
        "detail": f"the upload was rejected with {exc.total} problem(s); nothing was stored",
        "n_errors": exc.total,
        "errors": errors,
    }
    if exc.total > len(errors):
        body["errors_truncated"] = True
    return Response(body, status=status.HTTP_400_BAD_REQUEST)


def exception_handler(exc: Exception, context: dict) -> Response | None:
    if isinstance(exc, UploadInvalid):
        return problems_response(exc)
    if isinstance(exc, DjangoValidationError):
        exc = ValidationError(exc.message_dict if hasattr(exc, "error_dict") else exc.messages)
    if isinstance(exc, RequestDataTooBig | TooManyFieldsSent | TooManyFilesSent):
        # Django's DATA_UPLOAD_MAX_* limits, met while DRF parses the body
        exc = ParseError(f"the request is too large: {exc}")
    if isinstance(exc, DataError) and _NUL in str(exc):
        # psycopg refuses U+0000 before sending the query (a path or lookup value such as
        # /bands/%00/); the database and the transaction are untouched.
        exc = ValidationError("text may not contain the NUL character (U+0000)")
    response = drf_exception_handler(exc, context)
    if response is None:
        return None
    data = response.data
    if isinstance(data, dict) and "detail" in data and len(data) == 1:
        if isinstance(data["detail"], list):  # ValidationError({"detail": ...}) in a view
            data["detail"] = "; ".join(_flatten(data["detail"])) or "invalid request"
        return response
    messages = _flatten(data)
    response.data = {"detail": "; ".join(messages) or "invalid request", "fields": data}
    return response


def _is_api(request: HttpRequest) -> bool:
    return request.path.startswith("/api/")


def not_found(request: HttpRequest, exception: Exception | None = None) -> HttpResponse:
    """404 for a path no route matches: JSON under /api/, Django's page elsewhere."""
    if _is_api(request):
        return JsonResponse(
            {"detail": "no such resource; the routes are listed at /api/v1/docs/"}, status=404
        )
    return defaults.page_not_found(request, exception)  # type: ignore[arg-type]


def bad_request(request: HttpRequest, exception: Exception | None = None) -> HttpResponse:
    """400 Django raises itself (request body over DATA_UPLOAD_MAX_*, a bad Host header)."""
    if _is_api(request):
        return JsonResponse(
            {"detail": "the request is malformed or too large (fields, size or header)"},
            status=400,
        )
    return defaults.bad_request(request, exception)  # type: ignore[arg-type]


def server_error(request: HttpRequest) -> HttpResponse:
    """500: JSON under /api/ (the traceback goes to the log, never to the client)."""
    if _is_api(request):
        return JsonResponse({"detail": "internal error; it has been logged"}, status=500)
    return defaults.server_error(request)
