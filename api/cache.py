"""Caching of computed answers keyed by the data they were computed from.

Django's cache framework: local memory by default, Redis when ``REDIS_URL`` is
set (settings). The key holds the source's data version, the catalogue
version, the path, the normalised query and the negotiated format, so a new
upload, a retraction or a curated change is a new key, never a stale hit.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable

from django.conf import settings
from django.core.cache import cache
from django.http import HttpResponse, HttpResponseBase

from lcstore.models import Source
from lcstore.versions import answer_version

__all__ = ["cached_answer"]


def _key(request, source: Source, fmt: str, version: str) -> str:  # type: ignore[no-untyped-def]
    query = "&".join(sorted(f"{k}={v}" for k, v in request.query_params.lists() for v in v))
    raw = f"{request.path}|{fmt}|{query}|{version}"
    return "lcstore:answer:" + hashlib.sha256(raw.encode()).hexdigest()


def cached_answer(
    request,
    source: Source,
    fmt: str,
    build: Callable[[], HttpResponseBase],  # type: ignore[no-untyped-def]
) -> HttpResponseBase:
    """Serve a cached body when the data is unchanged; else build, and keep small bodies."""
    if not getattr(settings, "LCSTORE_CACHE_ANSWERS", True):
        return build()
    version = answer_version(source)  # data and catalogue versions, one query
    if version is None:
        return build()
    key = _key(request, source, fmt, version)
    hit = cache.get(key)
    if hit is not None:
        body, ctype = hit
        response = HttpResponse(body, content_type=ctype)
        response["X-Lcstore-Cache"] = "hit"
        return response
    response = build()
    if isinstance(response, HttpResponse) and response.status_code == 200:
        if len(response.content) <= settings.LCSTORE_CACHE_MAX_BYTES:
            cache.set(
                key, (response.content, response["Content-Type"]), settings.LCSTORE_CACHE_SECONDS
            )
        response["X-Lcstore-Cache"] = "miss"
    return response
