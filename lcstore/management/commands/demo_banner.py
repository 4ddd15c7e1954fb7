"""Print a demo token and example requests that work against the loaded campaign."""

from __future__ import annotations

from typing import Any

from django.core.management.base import BaseCommand
from rest_framework.authtoken.models import Token

from lcstore.models import Band, Source, Upload


class Command(BaseCommand):
    help = "Print a token and example curl commands for the demo campaign."

    def handle(self, *args: Any, **opts: Any) -> None:
        token = (
            Token.objects.select_related("user")
            .filter(user__groups__name="contributors")
            .order_by("user__username")
            .first()
        )
        if token is None:
            self.stdout.write("no demo accounts: run manage.py load_campaign first")
            return
        src = Source.objects.order_by("slug").first()
        bands = list(Band.objects.order_by("slug").values_list("slug", flat=True))
        up = Upload.objects.order_by("id").first()
        base = "http://127.0.0.1:8000/api/v1"
        h = f'-H "Authorization: Token {token.key}"'
        self.stdout.write(self.style.SUCCESS(f"demo token of {token.user.username}: {token.key}"))
        self.stdout.write(f"""
  export TOKEN={token.key}
  curl {h} {base}/sources/
  curl {h} "{base}/sources/{src.slug if src else "SOURCE"}/lightcurve/?bands={",".join(bands[:2])}&bin=1d&format=csv"
  curl {h} "{base}/sources/{src.slug if src else "SOURCE"}/lightcurve/?unit=nufnu&bin=7d&format=ecsv"
  curl {h} {base}/uploads/{up.pk if up else 1}/
  open http://127.0.0.1:8000/api/v1/docs/ for the API reference
""")
