"""The science layer imports without Django (STYLE.md: three layers, imports one way)."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_science_modules_import_without_django() -> None:
    code = (
        "import importlib, pkgutil, sys, lcstore.science as s\n"
        "for m in pkgutil.iter_modules(s.__path__):\n"
        "    importlib.import_module('lcstore.science.' + m.name)\n"
        "bad = sorted(k for k in sys.modules if k.split('.')[0] in ('django', 'rest_framework'))\n"
        "print(len(bad)); print(bad[:5])\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    ).stdout.split("\n")
    assert out[0] == "0", f"science imported Django modules: {out[1]}"
