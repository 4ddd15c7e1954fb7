"""The two roles of DESIGN.md §4, as Django groups, and helpers to ask about them."""

from __future__ import annotations

from typing import Any

__all__ = ["CONTRIBUTORS", "CURATORS", "is_contributor", "is_curator"]

CONTRIBUTORS = "contributors"
CURATORS = "curators"


def _in_group(user: Any, name: str) -> bool:
    if not getattr(user, "is_authenticated", False):
        return False
    return bool(user.is_superuser or user.groups.filter(name=name).exists())


def is_curator(user: Any) -> bool:
    """Curators (and superusers) write curated records and may retract any upload."""
    return _in_group(user, CURATORS)


def is_contributor(user: Any) -> bool:
    """Contributors upload; curators and superusers may too."""
    return _in_group(user, CONTRIBUTORS) or is_curator(user)
