"""Fail the jobs left ``running`` by a worker that stopped, so they can be retried.

Run it from cron or a systemd timer next to the workers (it is also run before
each job a worker starts and whenever the jobs API shows a job). See
:func:`lcstore.jobs.jobs_sweep_stale` for how a stopped worker is recognised.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser

from lcstore.jobs import STALE_ERROR, job_stale_seconds, jobs_sweep_stale


class Command(BaseCommand):
    help = f"Mark jobs whose worker stopped as failed ({STALE_ERROR!r})."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument(
            "--older-than",
            type=float,
            default=None,
            metavar="SECONDS",
            help="also fail jobs that started longer ago than this, even if their worker "
            "still holds its database session (a hung worker). Without PostgreSQL this "
            f"is the only rule; its default there is LCSTORE_JOB_STALE_SECONDS "
            f"({job_stale_seconds()} s).",
        )

    def handle(self, *args: Any, older_than: float | None, **options: Any) -> None:
        if older_than is not None and not older_than >= 0:
            raise CommandError("--older-than must be a number of seconds, zero or more")
        age = dt.timedelta(seconds=older_than) if older_than is not None else None
        swept = jobs_sweep_stale(older_than=age)
        for pk in swept:
            self.stdout.write(f"failed job {pk}: {STALE_ERROR}")
        self.stdout.write(f"{len(swept)} stale job(s) marked failed")
