"""Every error is a JSON object with a human-readable ``detail``.

Upload problems add ``errors``: a list of ``{row, column, message}``.
"""

from __future__ import annotations

from typing import Any

from django.core.exceptions import ValidationError as DjangoValidationError
from rest_framework import status
from rest_framework.exceptions import ValidationError
from rest_framework.response import Response
from rest_framework.views import exception_handler as drf_exception_handler

from lcstore.ingest.pipeline import UploadInvalid

__all__ = ["exception_handler", "problems_response"]


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
    response = drf_exception_handler(exc, context)
    if response is None:
        return None
    data = response.data
    if isinstance(data, dict) and "detail" in data and len(data) == 1:
        return response
    messages = _flatten(data)
    response.data = {"detail": "; ".join(messages) or "invalid request", "fields": data}
    return response
