#!/usr/bin/env python3
"""Upload every demo file over HTTP with curl, as a contributor would, and print the counts.

Usage: python3 scripts/curl_campaign.py URL TOKEN [--print-only]
The catalogue (sources, instruments, bands) must exist (manage.py load_campaign creates
it; on a fresh database run it with an empty upload list, or upload into the demo and
expect 409 answers naming the earlier uploads).
"""

from __future__ import annotations

import json
import shlex
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def commands(url: str, token: str) -> list[list[str]]:
    manifest = json.loads((ROOT / "fixtures" / "campaign.json").read_text())
    out = []
    for up in manifest["uploads"]:
        cmd = [
            "curl",
            "-sS",
            "-H",
            f"Authorization: Token {token}",
            "-F",
            f"file=@{ROOT / 'fixtures' / up['file']}",
            "-F",
            f"instrument={up['instrument']}",
        ]
        for key in (
            "source",
            "band",
            "format",
            "value_unit",
            "time_format",
            "time_scale",
            "time_reference",
            "met_epoch",
            "reduction",
            "reference",
        ):
            if up.get(key) not in (None, ""):
                cmd += ["-F", f"{key}={up[key]}"]
        if up.get("columns"):
            cmd += ["-F", "columns=" + json.dumps(up["columns"])]
        cmd.append(url.rstrip("/") + "/api/v1/uploads/")
        out.append(cmd)
    return out


def main(argv: list[str]) -> int:
    url, token = argv[1], argv[2]
    for cmd in commands(url, token):
        if "--print-only" in argv:
            print(shlex.join(cmd))
            continue
        body = json.loads(subprocess.run(cmd, capture_output=True, text=True, check=True).stdout)
        name = Path(next(a for a in cmd if a.startswith("file=@")).split("@", 1)[1]).name
        if "counts" in body:
            c = body["counts"]
            print(
                f"{name}: 201 upload {body['id']}: {c['points']} points, "
                f"{c['upper_limits']} upper limits, MJD {body['time_range']['start']:.3f}-"
                f"{body['time_range']['end']:.3f}"
            )
        else:
            print(f"{name}: {json.dumps(body)[:300]}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
