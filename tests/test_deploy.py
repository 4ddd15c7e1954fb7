"""Production settings pass ``manage.py check --deploy`` (anchor: Django deployment checklist).

The checklist is docs.djangoproject.com/en/5.2/howto/deployment/checklist/; its
automated part is ``check --deploy`` (Django's ``security.*`` checks) plus
lcstore's own checks in lcstore/checks.py (E001 demo SECRET_KEY, W002 SQLite).
"""

from __future__ import annotations

import os
import runpy
import secrets
from io import StringIO
from pathlib import Path

import pytest
from django.core.management import call_command
from django.core.management.base import SystemCheckError
from django.test import override_settings

ROOT = Path(__file__).resolve().parent.parent
STRONG_KEY = secrets.token_urlsafe(50)

# What the production block of lcstore/settings.py sets with LCSTORE_HTTPS=1 and a
# SECRET_KEY / ALLOWED_HOSTS from the environment.
PRODUCTION = dict(
    DEBUG=False,
    SECRET_KEY=STRONG_KEY,
    ALLOWED_HOSTS=["lcstore.example.org"],
    SECURE_SSL_REDIRECT=True,
    SECURE_HSTS_SECONDS=31_536_000,
    SECURE_HSTS_INCLUDE_SUBDOMAINS=True,
    SECURE_HSTS_PRELOAD=True,
    SESSION_COOKIE_SECURE=True,
    CSRF_COOKIE_SECURE=True,
)

# The documented production environment (lcstore/settings.py, production block).
PRODUCTION_ENV = {
    "SECRET_KEY": STRONG_KEY,
    "ALLOWED_HOSTS": "lcstore.example.org",
    "DATABASE_URL": "postgres://lcstore@db.example.org:5432/lcstore",
    "LCSTORE_BEHIND_TLS_PROXY": "1",
}


def _check(fail_level: str = "WARNING") -> str:
    out = StringIO()
    call_command("check", "--deploy", "--fail-level", fail_level, stdout=out, stderr=out)
    return out.getvalue()


def test_production_settings_pass_the_deploy_check():
    with override_settings(**PRODUCTION):
        assert "no issues" in _check()


def test_the_suite_settings_are_not_production_ones():
    """Guards the check itself: without the production settings it does complain."""
    with pytest.raises(SystemCheckError) as err:
        _check()
    for check_id in ("security.W004", "security.W008", "security.W012", "security.W016"):
        assert check_id in str(err.value)


def test_the_demo_secret_key_is_refused_with_debug_off():
    from django.conf import settings

    with override_settings(**(PRODUCTION | {"SECRET_KEY": settings.LCSTORE_DEMO_SECRET_KEY})):
        with pytest.raises(SystemCheckError, match=r"lcstore\.E001"):
            _check("ERROR")


def test_the_demo_secret_key_may_be_allowed_explicitly():
    from django.conf import settings

    key = settings.LCSTORE_DEMO_SECRET_KEY
    with override_settings(
        **(PRODUCTION | {"SECRET_KEY": key, "LCSTORE_ALLOW_INSECURE_KEY": True})
    ):
        # Django's own W009 (weak key) still warns; lcstore's error is gone.
        assert "lcstore.E001" not in _check("ERROR")


def _settings_from(env: dict[str, str], monkeypatch: pytest.MonkeyPatch) -> dict[str, object]:
    """lcstore/settings.py executed afresh under ``env`` (its variables; the rest unset)."""
    for name in list(os.environ):
        if name.startswith(("LCSTORE_", "SECRET_KEY", "ALLOWED_HOSTS", "DEBUG")):
            monkeypatch.delenv(name)
    for name, value in env.items():
        monkeypatch.setenv(name, value)
    return runpy.run_path(str(ROOT / "lcstore" / "settings.py"))


@pytest.mark.parametrize("switch", ["LCSTORE_BEHIND_TLS_PROXY", "LCSTORE_HTTPS"])
def test_the_documented_environment_gives_the_production_settings(monkeypatch, switch):
    env = {k: v for k, v in PRODUCTION_ENV.items() if k != "LCSTORE_BEHIND_TLS_PROXY"}
    s = _settings_from(env | {switch: "1"}, monkeypatch)
    assert {k: s[k] for k in PRODUCTION} == PRODUCTION
    assert s["DATABASES"]["default"]["ENGINE"] == "django.db.backends.postgresql"
    proxy = ("HTTP_X_FORWARDED_PROTO", "https")
    assert s.get("SECURE_PROXY_SSL_HEADER") == (proxy if "PROXY" in switch else None)


def test_without_the_environment_plain_http_still_works(monkeypatch):
    """The demo and the suite: no redirect to HTTPS, no HSTS, cookies over HTTP."""
    s = _settings_from({}, monkeypatch)
    assert s["SECURE_SSL_REDIRECT"] is False and s["SECURE_HSTS_SECONDS"] == 0
    assert s["SESSION_COOKIE_SECURE"] is False and s["CSRF_COOKIE_SECURE"] is False
    assert s["SECRET_KEY"] == s["LCSTORE_DEMO_SECRET_KEY"]
