"""Background computations through Django's tasks interface (the django-tasks backport).

A job row is the durable record (state, progress, result, error); the task
only carries the job id, so any number of worker processes or machines
(``manage.py db_worker``) can share the queue, and a job that crashed is
marked failed and can be queued again.

A worker that is killed (out of memory, SIGKILL, a machine lost) cannot write
anything, so its job would stay ``running`` for ever. :func:`jobs_sweep_stale`
finds such jobs and fails them with :data:`STALE_ERROR`, after which the
ordinary retry (``POST jobs/<id>/retry/``) queues them again. How a dead run is
told from a live one:

- On PostgreSQL, exactly: a run holds a session-level advisory lock on its job
  for as long as it lasts, and PostgreSQL releases it when the worker's
  connection ends (the process died; for a machine that vanished, once the
  server notices the dead connection). A ``running`` job whose lock is free has
  no worker. This needs sessions that belong to one worker (a direct
  connection, or a pooler in session mode; not transaction pooling).
- Elsewhere (the embedded SQLite demo), by age: a job that started more than
  ``LCSTORE_JOB_STALE_SECONDS`` ago (default 3600) counts as stopped.

``older_than`` forces the age rule on PostgreSQL too (``manage.py jobs_sweep
--older-than``: a worker that hangs while its session stays open). A run that
was failed by the sweep and is still going somehow writes nothing more: every
write of a run names its attempt number and the ``running`` state.

The sweep runs from ``manage.py jobs_sweep``, before each job a worker starts,
and when the jobs API shows or retries a job.
"""

from __future__ import annotations

import datetime as dt
import time
import traceback
import uuid
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from django.conf import settings
from django.db import connection, transaction
from django.utils import timezone
from django_tasks import task

from lcstore.analysis import LagParams, correlation_summary, lags_summary
from lcstore.curves import CurveRequestError
from lcstore.models import Job, JobState

__all__ = [
    "JOB_KINDS",
    "STALE_ERROR",
    "job_enqueue",
    "job_run",
    "job_stale_seconds",
    "jobs_sweep_stale",
]

JOB_KINDS = ("lags", "correlation")
STALE_ERROR = "worker stopped while running; retry"
DEFAULT_STALE_SECONDS = 3600
LOCK_TRIES = 20


def job_stale_seconds() -> int:
    """Age after which a running job counts as stopped where no lock can tell (seconds)."""
    return int(getattr(settings, "LCSTORE_JOB_STALE_SECONDS", DEFAULT_STALE_SECONDS))


def _lock_key(job_id: Any) -> tuple[int, int]:
    """Two signed 32-bit keys from the job's UUID (the two-key space, apart from checksum locks)."""
    b = uuid.UUID(str(job_id)).bytes
    return int.from_bytes(b[:4], "big", signed=True), int.from_bytes(b[4:8], "big", signed=True)


def _locks() -> bool:
    return connection.vendor == "postgresql"


def _try_lock(job_id: Any) -> bool:
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_try_advisory_lock(%s, %s)", list(_lock_key(job_id)))
        return bool(cursor.fetchone()[0])


def _unlock(job_id: Any) -> None:
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_advisory_unlock(%s, %s)", list(_lock_key(job_id)))


@contextmanager
def _run_lock(job_id: Any) -> Iterator[bool]:
    """Hold the job's session lock while the body runs; False if another session holds it."""
    if not _locks():
        yield True
        return
    # A sweep holds the lock for an instant while it looks; a live run holds it throughout.
    for _ in range(LOCK_TRIES):
        if _try_lock(job_id):
            break
        time.sleep(0.1)
    else:
        yield False
        return
    try:
        yield True
    finally:
        try:
            _unlock(job_id)
        except Exception:  # a broken connection released it already
            pass


def _progress(job_id: Any, attempt: int) -> Any:
    def report(fraction: float) -> None:
        Job.objects.filter(pk=job_id, state=JobState.RUNNING, attempts=attempt).update(
            progress=round(float(fraction), 4)
        )

    return report


def _finish(job_id: Any, attempt: int, **fields: Any) -> None:
    """The run's last write; nothing if the job was swept (or retried) meanwhile."""
    Job.objects.filter(pk=job_id, state=JobState.RUNNING, attempts=attempt).update(
        finished_at=timezone.now(), **fields
    )


def job_run(job_id: str) -> None:
    """Run one job to completion; every outcome is written to its row."""
    job = Job.objects.select_related("owner", "source").get(pk=job_id)
    if job.state == JobState.DONE:
        return
    with _run_lock(job.pk) as held:
        if not held:
            Job.objects.filter(pk=job.pk, state=JobState.QUEUED).update(
                state=JobState.FAILED,
                error="an earlier run of this job is still going in another worker; "
                "retry when it has stopped",
                finished_at=timezone.now(),
            )
            return
        _run(job)


def _run(job: Job) -> None:
    attempt = job.attempts + 1
    Job.objects.filter(pk=job.pk).update(
        state=JobState.RUNNING,
        started_at=timezone.now(),
        attempts=attempt,
        error="",
        progress=0.0,
        finished_at=None,
    )
    p = dict(job.parameters)
    as_of_text = p.pop("as_of", None)
    as_of = dt.datetime.fromisoformat(as_of_text) if as_of_text else None
    try:
        if job.kind == "lags":
            x, y = p.pop("x"), p.pop("y")
            result = lags_summary(
                source=job.source,
                user=job.owner,
                x=x,
                y=y,
                params=LagParams(**p),
                as_of=as_of,
                progress=_progress(job.pk, attempt),
            )
        elif job.kind == "correlation":
            result = correlation_summary(source=job.source, user=job.owner, as_of=as_of, **p)
        else:
            raise CurveRequestError(f"unknown job kind {job.kind!r}")
    except CurveRequestError as exc:
        _finish(job.pk, attempt, state=JobState.FAILED, error=str(exc))
        return
    except Exception as exc:  # a crash is recorded, never lost; the job can be retried
        _finish(
            job.pk,
            attempt,
            state=JobState.FAILED,
            error=f"{type(exc).__name__}: {exc}\n{traceback.format_exc(limit=5)}",
        )
        return
    _finish(job.pk, attempt, state=JobState.DONE, result=result, progress=1.0)


def jobs_sweep_stale(
    *, older_than: dt.timedelta | None = None, ids: Iterable[Any] | None = None
) -> list[str]:
    """Fail the ``running`` jobs whose worker stopped; answer their ids.

    On PostgreSQL a job is stale when its run lock is free, or, with
    ``older_than``, when it started longer ago than that. Elsewhere only the age
    counts (``older_than``, default :func:`job_stale_seconds`). ``ids`` limits
    the sweep to those jobs.
    """
    locks = _locks()
    if older_than is None and not locks:
        older_than = dt.timedelta(seconds=job_stale_seconds())
    now = timezone.now()
    qs = Job.objects.filter(state=JobState.RUNNING)
    if ids is not None:
        qs = qs.filter(pk__in=list(ids))
    swept: list[str] = []
    for pk, attempts, started_at in qs.values_list("pk", "attempts", "started_at"):
        too_old = older_than is not None and (started_at is None or started_at < now - older_than)
        how = ""
        if too_old:
            how = f"it started more than {older_than.total_seconds():g} s ago"
        elif locks and _try_lock(pk):
            _unlock(pk)
            how = "its database session has ended"
        if not how:
            continue
        # Only the run that was seen: a run that finished or restarted meanwhile is left alone.
        n = Job.objects.filter(pk=pk, state=JobState.RUNNING, attempts=attempts).update(
            state=JobState.FAILED, error=f"{STALE_ERROR} ({how})", finished_at=now
        )
        if n:
            swept.append(str(pk))
    return swept


@task()
def run_job_task(job_id: str) -> None:
    jobs_sweep_stale()
    job_run(job_id)


def job_enqueue(job: Job) -> Job:
    """Queue the job after the surrounding transaction commits."""

    def send() -> None:
        res = run_job_task.enqueue(str(job.pk))
        Job.objects.filter(pk=job.pk).update(task_id=str(res.id)[:64])

    transaction.on_commit(send)
    return job
