"""Who may do what (DESIGN.md §4). Object-level rules are here, not in the views."""

from __future__ import annotations

from typing import Any

from django.conf import settings
from rest_framework.permissions import SAFE_METHODS, BasePermission

from lcstore import roles
from lcstore.queries import upload_visible_to

__all__ = ["CuratorsWrite", "ContributorsUpload", "ReadAccess"]


def _may_read(request: Any) -> bool:
    if request.user and request.user.is_authenticated:
        return True
    return bool(getattr(settings, "LCSTORE_PUBLIC_READ", False))


class ReadAccess(BasePermission):
    """Any signed-in account reads; anonymous only when public read is on. No writes."""

    message = "sign in (Authorization: Token <key>) to read this store"

    def has_permission(self, request: Any, view: Any) -> bool:
        return request.method in SAFE_METHODS and _may_read(request)


class CuratorsWrite(ReadAccess):
    """Reads as :class:`ReadAccess`; writes by curators (and superusers) only."""

    def has_permission(self, request: Any, view: Any) -> bool:
        if request.method in SAFE_METHODS:
            return _may_read(request)
        self.message = "only curators may change curated records"
        return roles.is_curator(request.user)


class ContributorsUpload(ReadAccess):
    """Reads as :class:`ReadAccess`; uploads by contributors; embargoed uploads hidden."""

    def has_permission(self, request: Any, view: Any) -> bool:
        if request.method in SAFE_METHODS:
            return _may_read(request)
        if not (request.user and request.user.is_authenticated):
            return False
        self.message = "only contributors may upload or retract"
        return roles.is_contributor(request.user)

    def has_object_permission(self, request: Any, view: Any, obj: Any) -> bool:
        return upload_visible_to(obj, request.user)
