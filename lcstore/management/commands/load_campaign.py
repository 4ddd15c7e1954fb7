"""Load the invented demo campaign of fixtures/ through the same upload path as HTTP."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from django.contrib.auth.models import Group, User
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction
from rest_framework.authtoken.models import Token

from lcstore.models import (
    BAND_FIELDS,
    INSTRUMENT_FIELDS,
    SOURCE_FIELDS,
    Band,
    CalibrationOffset,
    Instrument,
    Source,
    Upload,
)
from lcstore.services import UploadConflict, UploadInvalid, UploadParams, upload_create


class Command(BaseCommand):
    help = "Create the demo catalogue and accounts, and upload every demo file."

    def add_arguments(self, parser: Any) -> None:
        parser.add_argument("--manifest", default=None, help="path of campaign.json")
        parser.add_argument(
            "--catalogue-only",
            action="store_true",
            help="create sources, instruments, bands, offsets and accounts; upload nothing",
        )
        parser.add_argument(
            "--sources",
            default=None,
            help="comma list of source slugs: upload only their files (and multi-source ones)",
        )

    def handle(self, *args: Any, **opts: Any) -> None:
        manifest_path = Path(
            opts["manifest"] or Path(__file__).resolve().parents[3] / "fixtures" / "campaign.json"
        )
        if not manifest_path.exists():
            raise CommandError(f"no campaign manifest at {manifest_path}")
        m = json.loads(manifest_path.read_text())
        base = manifest_path.parent
        with transaction.atomic():
            self._catalogue(m)
            users = self._people(m)
        accepted = 0
        if opts.get("catalogue_only"):
            self.stdout.write(self.style.SUCCESS("catalogue and accounts created; no uploads"))
            return
        only = set(opts["sources"].split(",")) if opts.get("sources") else None
        for up in m["uploads"]:
            if only is not None and up.get("source") and up["source"] not in only:
                continue
            path = base / up["file"]
            uploader = users[up["uploader"]]
            params = UploadParams(
                instrument=up["instrument"],
                source=up.get("source"),
                band=up.get("band"),
                format=up.get("format"),
                columns=up.get("columns"),
                value_unit=up.get("value_unit"),
                time_format=up.get("time_format"),
                time_scale=up.get("time_scale"),
                time_reference=up.get("time_reference"),
                met_epoch=up.get("met_epoch"),
                reduction=up.get("reduction", ""),
                reference=up.get("reference", ""),
            )
            try:
                u = upload_create(
                    uploader=uploader, data=path.read_bytes(), file_name=path.name, params=params
                )
            except UploadConflict as exc:
                self.stdout.write(f"  {path.name}: already loaded (upload {exc.existing.pk})")
                continue
            except UploadInvalid as exc:
                first = "; ".join(f"row {p.row} {p.column}: {p.message}" for p in exc.problems[:5])
                raise CommandError(f"{path.name} was rejected: {first}") from None
            accepted += 1
            self.stdout.write(
                f"  {path.name}: upload {u.pk}, {u.n_points} points "
                f"({u.n_upper_limits} upper limits)"
            )
        self.stdout.write(
            self.style.SUCCESS(
                f"campaign loaded: {Source.objects.count()} sources, {Upload.objects.count()} uploads "
                f"({accepted} new)"
            )
        )

    def _catalogue(self, m: dict[str, Any]) -> None:
        for s in m["sources"]:
            Source.objects.update_or_create(
                slug=s["slug"], defaults={k: s[k] for k in SOURCE_FIELDS if k in s}
            )
        for i in m["instruments"]:
            Instrument.objects.update_or_create(
                slug=i["slug"], defaults={k: i[k] for k in INSTRUMENT_FIELDS if k in i}
            )
        for b in m["bands"]:
            defaults = {k: b[k] for k in BAND_FIELDS if k in b}
            defaults["mag_system"] = defaults.get("mag_system") or ""
            Band.objects.update_or_create(slug=b["slug"], defaults=defaults)
        for o in m.get("calibration_offsets", []):
            CalibrationOffset.objects.update_or_create(
                instrument=Instrument.objects.get(slug=o["instrument"]),
                band=Band.objects.get(slug=o["band"]),
                defaults={"factor": o["factor"]},
            )

    def _people(self, m: dict[str, Any]) -> dict[str, User]:
        users = {}
        for p in m["people"]:
            user, created = User.objects.get_or_create(
                username=p["username"],
                defaults={
                    "first_name": p.get("first_name", ""),
                    "last_name": p.get("last_name", ""),
                },
            )
            if created:
                user.set_password("demo-" + p["username"])
                user.save()
            group = "curators" if p.get("role") == "curator" else "contributors"
            user.groups.add(Group.objects.get(name=group))
            Token.objects.get_or_create(user=user)
            users[p["username"]] = user
        return users
