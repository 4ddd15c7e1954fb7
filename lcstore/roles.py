"""The two roles of DESIGN.md §4, as Django groups, and helpers to ask about them.

A request asks about the roles of its user several times (the embargo rule of
every selector, permissions); the group names are read once per user object
and kept on it. The user object of a request lives as long as the request
(authentication loads it anew each time), so a change of groups counts from
the next request on; code that changes groups of a user object it goes on
using calls :func:`forget`.
"""

from __future__ import annotations

from typing import Any

__all__ = ["CONTRIBUTORS", "CURATORS", "forget", "is_contributor", "is_curator"]

CONTRIBUTORS = "contributors"
CURATORS = "curators"

_MEMO = "_lcstore_group_names"


def _group_names(user: Any) -> frozenset[str]:
    names = getattr(user, _MEMO, None)
    if names is None:
        names = frozenset(user.groups.values_list("name", flat=True))
        try:
            setattr(user, _MEMO, names)
        except AttributeError:  # an object that takes no attributes: ask every time
            pass
    return names


def _in_group(user: Any, name: str) -> bool:
    if not getattr(user, "is_authenticated", False):
        return False
    return bool(user.is_superuser or name in _group_names(user))


def forget(user: Any) -> None:
    """Drop the remembered group names of this user object (after changing its groups)."""
    if hasattr(user, _MEMO):
        delattr(user, _MEMO)


def is_curator(user: Any) -> bool:
    """Curators (and superusers) write curated records and may retract any upload."""
    return _in_group(user, CURATORS)


def is_contributor(user: Any) -> bool:
    """Contributors upload; curators and superusers may too."""
    return _in_group(user, CONTRIBUTORS) or is_curator(user)
