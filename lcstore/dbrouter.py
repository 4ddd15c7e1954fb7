"""Reads to a streaming standby, writes to the primary, and read-your-writes.

Active only when ``DATABASE_REPLICA_URL`` is set (settings add the ``replica``
alias, :class:`PrimaryReplicaRouter` and :class:`ReplicaRoutingMiddleware`).
The rules, in the order they are tried:

1. writes go to ``default`` (the primary);
2. accounts, tokens and sessions are always read on the primary: who is asking
   and with which rights must never lag (a fresh token would be refused, a
   revoked curator would still be one);
3. everything inside a transaction (``atomic``) of the primary reads the
   primary: the checksum lock, ``select_for_update`` and the checks that follow
   them must see the primary's state;
4. outside a request (workers, management commands, the shell) reads go to the
   primary: a worker picks up a job created a moment ago;
5. in a request, reads go to the primary when the request is a write
   (POST/PUT/PATCH/DELETE: a conversion must use the catalogue as it is now,
   not as a lagging standby remembers it), once it has written anything, and
   for ``LCSTORE_REPLICA_STICKY_SECONDS`` after any request of the same user
   wrote (read-your-writes); all other reads go to ``replica``;
6. unless the standby does not answer: the first read a request would send it
   checks its connection (``SELECT 1`` on a kept connection, a connect with
   ``connect_timeout`` otherwise), and when that fails the
   request reads the primary, as does every request of this process for the
   next ``LCSTORE_REPLICA_RETRY_SECONDS``, after which the standby is tried
   again. A standby that goes away between two reads of one request fails that
   request; the next one is served by the primary.

Read-your-writes is kept in Django's cache keyed by user id, not in a cookie:
API clients with tokens (scripts, ``lcstore.client``) need not keep cookies,
and one mark covers every client of the user (a script uploads, the browser
shows the curve). With several API processes the cache must be shared
(``REDIS_URL``); the local-memory cache only remembers marks made in its own
process.

The decision is taken per request and never flips back from primary to
replica inside one request, so every read of a request (the data version that
keys a cached answer, the visible uploads, their points) comes from one server.
That is what keeps cached answers right: the version is read *before* the data
and from the same server, and a standby's replay only moves forward, so the
data are never older than the version they are cached under. (A request that
falls back to the primary reads everything there, so the same holds.) Reading the
version on the primary and the points on a lagging standby would cache old
points under a new key.

Raw SQL must ask for its connection: :func:`read_connection` answers the
connection of the alias the router chooses for reads now.
"""

from __future__ import annotations

import contextvars
import logging
import math
import time
from collections.abc import Callable
from typing import Any

from django.conf import settings
from django.db import DEFAULT_DB_ALIAS, DatabaseError, connections, router
from django.http import HttpRequest, HttpResponse

__all__ = [
    "REPLICA_DB_ALIAS",
    "PrimaryReplicaRouter",
    "ReplicaRoutingMiddleware",
    "read_alias",
    "read_connection",
    "sticky_key",
]

REPLICA_DB_ALIAS = "replica"
# Apps whose reads decide identity and rights: always on the primary.
PRIMARY_APPS = frozenset({"auth", "authtoken", "sessions"})
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS", "TRACE"})
DEFAULT_STICKY_SECONDS = 10
DEFAULT_RETRY_SECONDS = 5

logger = logging.getLogger(__name__)


def sticky_seconds() -> float:
    return float(getattr(settings, "LCSTORE_REPLICA_STICKY_SECONDS", DEFAULT_STICKY_SECONDS))


def retry_seconds() -> float:
    return float(getattr(settings, "LCSTORE_REPLICA_RETRY_SECONDS", DEFAULT_RETRY_SECONDS))


# Until when (time.monotonic) this process sends no read to the standby, which failed.
_standby_down_until = 0.0


def _standby_answers() -> bool:
    """Whether the standby can take a read now; a failure sends reads to the primary
    for :func:`retry_seconds` (rule 6 of the module notes)."""
    global _standby_down_until
    if time.monotonic() < _standby_down_until:
        return False
    conn = connections[REPLICA_DB_ALIAS]
    try:
        # A kept connection to a server that went away fails SELECT 1 (the backend's
        # is_usable); it is closed, and the connect below says whether the server is back.
        # (Django's CONN_HEALTH_CHECKS does this once per request only where the handler
        # resets it at the request's start, which the test client does not.)
        if conn.connection is not None and not conn.is_usable():
            conn.close()
        conn.ensure_connection()
    except DatabaseError as exc:
        _standby_down_until = time.monotonic() + retry_seconds()
        logger.warning(
            "the standby does not answer (%s); reads go to the primary for %.0f s",
            str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__,
            retry_seconds(),
        )
        return False
    return True


def sticky_key(user_id: Any) -> str:
    """Cache key of a user's read-your-writes mark (value: the instant it ends, epoch s)."""
    return f"lcstore:replica:primary-until:{user_id}"


def _sticky(user_id: Any) -> bool:
    from django.core.cache import cache

    try:
        until = cache.get(sticky_key(user_id))
    except Exception:  # cache unreachable: the primary is always right
        return True
    return until is not None and float(until) > time.time()


class _RequestState:
    """Routing state of one request."""

    def __init__(self, request: HttpRequest) -> None:
        self.request = request
        self.primary = request.method not in SAFE_METHODS
        self.wrote = False
        self._checked_user: Any = None
        self._standby_checked = False
        self._resolving = False

    def user_id(self) -> Any:
        """The account asking, once known (DRF puts token users on the request when it
        authenticates); None for anonymous requests and while the user is being read."""
        if self._resolving:
            return None
        self._resolving = True
        try:
            user = getattr(self.request, "user", None)
            if user is not None and getattr(user, "is_authenticated", False):
                return user.pk
            return None
        finally:
            self._resolving = False

    def reads_on_primary(self) -> bool:
        if self.primary or self.wrote:
            return True
        uid = self.user_id()
        if uid is not None and uid != self._checked_user:
            self._checked_user = uid
            if _sticky(uid):
                self.primary = True
        if not self.primary and not self._standby_checked:
            self._standby_checked = True
            self.primary = not _standby_answers()
        return self.primary


_state: contextvars.ContextVar[_RequestState | None] = contextvars.ContextVar(
    "lcstore_replica_routing", default=None
)


def _replica_configured() -> bool:
    return REPLICA_DB_ALIAS in connections.settings


class PrimaryReplicaRouter:
    """Django database router for one primary (``default``) and one standby (``replica``)."""

    def db_for_read(self, model: Any, **hints: Any) -> str:
        if model is not None and model._meta.app_label in PRIMARY_APPS:
            return DEFAULT_DB_ALIAS
        instance = hints.get("instance")
        if instance is not None and instance._state.db == DEFAULT_DB_ALIAS:
            return DEFAULT_DB_ALIAS  # related reads of an object the primary gave
        if connections[DEFAULT_DB_ALIAS].in_atomic_block:
            return DEFAULT_DB_ALIAS
        state = _state.get()
        if state is None or state.reads_on_primary():
            return DEFAULT_DB_ALIAS
        return REPLICA_DB_ALIAS

    def db_for_write(self, model: Any, **hints: Any) -> str:
        state = _state.get()
        if state is not None:
            state.wrote = True
        return DEFAULT_DB_ALIAS

    def allow_relation(self, obj1: Any, obj2: Any, **hints: Any) -> bool | None:
        both = {obj1._state.db, obj2._state.db}
        return True if both <= {DEFAULT_DB_ALIAS, REPLICA_DB_ALIAS} else None

    def allow_migrate(self, db: str, app_label: str, **hints: Any) -> bool | None:
        return False if db == REPLICA_DB_ALIAS else None


def read_alias() -> str:
    """The alias the routers choose for a read here and now (``default`` without a replica)."""
    return router.db_for_read(None) if _replica_configured() else DEFAULT_DB_ALIAS


def read_connection() -> Any:
    """The connection for raw-SQL reads (COPY … TO STDOUT), routed like the ORM's reads."""
    return connections[read_alias()]


class ReplicaRoutingMiddleware:
    """Holds the request's routing state and marks the user after a request that wrote."""

    def __init__(self, get_response: Callable[[HttpRequest], HttpResponse]) -> None:
        self.get_response = get_response

    def __call__(self, request: HttpRequest) -> HttpResponse:
        state = _RequestState(request)
        token = _state.set(state)
        try:
            response = self.get_response(request)
            wrote = state.wrote or (
                request.method not in SAFE_METHODS and response.status_code < 400
            )
            if wrote:
                uid = state.user_id()
                if uid is not None:
                    self._mark(uid)
            return response
        finally:
            _state.reset(token)

    @staticmethod
    def _mark(user_id: Any) -> None:
        from django.core.cache import cache

        seconds = sticky_seconds()
        if seconds <= 0:
            return
        try:
            cache.set(sticky_key(user_id), time.time() + seconds, timeout=math.ceil(seconds))
        except Exception:  # the write stands; only read-your-writes is weaker
            pass
