"""Request parsers: multipart that refuses a body cut short."""

from __future__ import annotations

from typing import Any

from rest_framework.exceptions import ParseError
from rest_framework.parsers import MultiPartParser

__all__ = ["CompleteMultiPartParser", "body_shortfall"]

_DRAIN = 64 * 1024


class _CountingStream:
    """A read-only file-like view of the request body that counts the bytes read."""

    def __init__(self, stream: Any):
        self._stream = stream
        self.n_read = 0

    def read(self, size: int = -1) -> bytes:
        chunk = self._stream.read(size)
        self.n_read += len(chunk)
        return chunk


class CompleteMultiPartParser(MultiPartParser):
    """Django's multipart parser, plus a check that the whole body arrived.

    Django's parser stops at the end of the stream without comparing what it read
    with ``Content-Length``: a client that disconnects after the file part leaves a
    request whose later fields (an ``embargo_until``, a ``reduction`` cut mid-word)
    are missing or short, and it would be stored as if complete. The WSGI stream is
    limited to ``Content-Length``, so reading fewer bytes means the body was cut.
    """

    def parse(self, stream: Any, media_type: Any = None, parser_context: Any = None) -> Any:
        parser_context = parser_context or {}
        meta = parser_context["request"].META
        try:
            expected = int(meta.get("CONTENT_LENGTH") or 0)
        except ValueError:
            raise ParseError("Content-Length is not a number") from None
        counted = _CountingStream(stream)
        result = super().parse(counted, media_type, parser_context)
        while counted.read(_DRAIN):  # an epilogue after the closing boundary, if any
            pass
        if expected and counted.n_read < expected:
            raise ParseError(
                f"the request body ended after {counted.n_read} of {expected} bytes "
                "(the client stopped sending); nothing was stored"
            )
        return result


def body_shortfall(request: Any) -> tuple[int, int] | None:
    """(bytes read, Content-Length) when a parsed Django request's body was cut, else None.

    For views that read ``request.POST``/``request.FILES`` themselves (the web upload
    form): the same check as :class:`CompleteMultiPartParser`. Django's WSGI stream is
    a ``LimitedStream`` capped at ``Content-Length``; what is left of it after the
    parser is drained, and a stream that ends early was cut by the client.
    """
    stream = getattr(request, "_stream", None)
    limit, pos = getattr(stream, "limit", None), getattr(stream, "_pos", None)
    if stream is None or limit is None or pos is None:
        return None
    while stream.read(_DRAIN):
        pass
    return (stream._pos, limit) if stream._pos < limit else None
