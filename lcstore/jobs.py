"""Background computations through Django's tasks interface (the django-tasks backport).

A job row is the durable record (state, progress, result, error); the task
only carries the job id, so any number of worker processes or machines
(``manage.py db_worker``) can share the queue, and a job that crashed is
marked failed and can be queued again.
"""

from __future__ import annotations

import datetime as dt
import traceback
from typing import Any

from django.db import transaction
from django.utils import timezone
from django_tasks import task

from lcstore.analysis import LagParams, correlation_summary, lags_summary
from lcstore.curves import CurveRequestError
from lcstore.models import Job, JobState

__all__ = ["JOB_KINDS", "job_enqueue", "job_run"]

JOB_KINDS = ("lags", "correlation")


def _progress(job_id: Any) -> Any:
    def report(fraction: float) -> None:
        Job.objects.filter(pk=job_id).update(progress=round(float(fraction), 4))

    return report


def job_run(job_id: str) -> None:
    """Run one job to completion; every outcome is written to its row."""
    job = Job.objects.select_related("owner", "source").get(pk=job_id)
    if job.state == JobState.DONE:
        return
    Job.objects.filter(pk=job.pk).update(
        state=JobState.RUNNING, started_at=timezone.now(), attempts=job.attempts + 1, error=""
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
                progress=_progress(job.pk),
            )
        elif job.kind == "correlation":
            result = correlation_summary(source=job.source, user=job.owner, as_of=as_of, **p)
        else:
            raise CurveRequestError(f"unknown job kind {job.kind!r}")
    except CurveRequestError as exc:
        Job.objects.filter(pk=job.pk).update(
            state=JobState.FAILED, error=str(exc), finished_at=timezone.now()
        )
        return
    except Exception as exc:  # a crash is recorded, never lost; the job can be retried
        Job.objects.filter(pk=job.pk).update(
            state=JobState.FAILED,
            error=f"{type(exc).__name__}: {exc}\n{traceback.format_exc(limit=5)}",
            finished_at=timezone.now(),
        )
        return
    Job.objects.filter(pk=job.pk).update(
        state=JobState.DONE, result=result, progress=1.0, finished_at=timezone.now()
    )


@task()
def run_job_task(job_id: str) -> None:
    job_run(job_id)


def job_enqueue(job: Job) -> Job:
    """Queue the job after the surrounding transaction commits."""

    def send() -> None:
        res = run_job_task.enqueue(str(job.pk))
        Job.objects.filter(pk=job.pk).update(task_id=str(res.id)[:64])

    transaction.on_commit(send)
    return job
