"""Request rates (OWASP API4, unrestricted resource consumption): answered 429 + Retry-After.

Three budgets per account (per client address when anonymous), each a setting
in ``REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"]`` (see ``lcstore/settings.py``):

``read``
    every API request (:class:`ReadThrottle`, on by default for every view);
``heavy``
    computed answers and background jobs: a view sets ``throttle_scope = "heavy"``
    (:class:`ScopedThrottle`, also on by default) — every request to it counts;
``uploads``
    new uploads and retractions: :class:`WriteScopedThrottle` counts only the
    requests that write (POST, PUT, PATCH, DELETE) to a view with ``throttle_scope``.

Rates are looked up at request time, so ``override_settings`` and the test
settings change them without a restart. A rate of None switches that budget off.

Pages outside DRF (the upload form in ``web/``) charge the same ``uploads`` budget
through :func:`upload_budget_charge`: one budget per account, whichever way the file
comes in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any

from rest_framework.permissions import SAFE_METHODS
from rest_framework.settings import api_settings
from rest_framework.throttling import ScopedRateThrottle

__all__ = [
    "SCOPES",
    "BudgetSpent",
    "ReadThrottle",
    "ScopedThrottle",
    "WriteScopedThrottle",
    "upload_budget_charge",
]

SCOPES = ("read", "heavy", "uploads")


class ScopedThrottle(ScopedRateThrottle):
    """DRF's scoped throttle, with the rate table read when the request comes in."""

    @property  # type: ignore[override]
    def THROTTLE_RATES(self) -> dict[str, str | None]:  # noqa: N802 - DRF's attribute name
        return api_settings.DEFAULT_THROTTLE_RATES


class WriteScopedThrottle(ScopedThrottle):
    """As :class:`ScopedThrottle`, counting only requests that write (reads are free)."""

    def allow_request(self, request: Any, view: Any) -> bool:
        if request.method in SAFE_METHODS:
            return True
        return super().allow_request(request, view)


class ReadThrottle(ScopedThrottle):
    """The overall budget (scope ``read``) of every API request, whatever the view."""

    def allow_request(self, request: Any, view: Any) -> bool:
        self.scope = "read"
        self.rate = self.get_rate()
        self.num_requests, self.duration = self.parse_rate(self.rate)
        # SimpleRateThrottle.allow_request, skipping ScopedRateThrottle's view lookup.
        return super(ScopedRateThrottle, self).allow_request(request, view)


@dataclass(frozen=True)
class BudgetSpent:
    """A spent budget: the whole seconds to wait (the Retry-After value) and the rate."""

    retry_after_s: int
    allowed: int
    period_s: int


def upload_budget_charge(request: Any) -> BudgetSpent | None:
    """Charge one write of a page (a Django request, not a DRF view) to the ``uploads`` budget.

    The throttle, scope and cache key are those of ``POST uploads/``, so the API and the
    form draw on one budget per account. None when the request is allowed (or the
    budget is off); else what to tell the client. The wait is rounded up to whole
    seconds, as DRF's ``Throttled`` does for its Retry-After header.
    """
    throttle = WriteScopedThrottle()
    if throttle.allow_request(request, SimpleNamespace(throttle_scope="uploads")):
        return None
    wait = throttle.wait()
    seconds = float(throttle.duration) if wait is None else wait
    return BudgetSpent(
        retry_after_s=max(1, math.ceil(seconds)),
        allowed=int(throttle.num_requests),
        period_s=int(throttle.duration),
    )
