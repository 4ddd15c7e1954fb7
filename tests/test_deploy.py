"""Production settings pass ``manage.py check --deploy`` (anchor: Django deployment checklist).

The checklist is docs.djangoproject.com/en/5.2/howto/deployment/checklist/; its
automated part is ``check --deploy`` (Django's ``security.*`` checks) plus
lcstore's own checks in lcstore/checks.py (E001 demo SECRET_KEY, W002 SQLite, W003 a
standby with a cache of each process).
"""

from __future__ import annotations

import os
import runpy
import secrets
import shutil
import subprocess
import sys
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


@pytest.mark.parametrize("redis", [False, True])
def test_a_standby_with_a_cache_of_each_process_is_warned_of(monkeypatch, redis):
    """Read-your-writes marks live in the cache (lcstore/dbrouter.py): with a standby and
    several API processes they must be shared, so a per-process cache is warned of."""
    from lcstore.checks import replica_cache_warnings

    env = PRODUCTION_ENV | {
        "DATABASE_REPLICA_URL": "postgres://lcstore@standby.example.org/lcstore"
    }
    if redis:
        env["REDIS_URL"] = "redis://cache.example.org:6379/0"
    else:
        monkeypatch.delenv("REDIS_URL", raising=False)
    s = _settings_from(env, monkeypatch)
    ids = [w.id for w in replica_cache_warnings(s["DATABASES"], s["CACHES"])]
    assert ids == ([] if redis else ["lcstore.W003"])
    replica = s["DATABASES"]["replica"]
    assert replica["OPTIONS"]["connect_timeout"] == 3
    monkeypatch.delenv("DATABASE_REPLICA_URL")
    s = _settings_from({k: v for k, v in env.items() if k != "DATABASE_REPLICA_URL"}, monkeypatch)
    assert replica_cache_warnings(s["DATABASES"], s["CACHES"]) == []


def test_without_the_environment_plain_http_still_works(monkeypatch):
    """The demo and the suite: no redirect to HTTPS, no HSTS, cookies over HTTP."""
    s = _settings_from({}, monkeypatch)
    assert s["SECURE_SSL_REDIRECT"] is False and s["SECURE_HSTS_SECONDS"] == 0
    assert s["SESSION_COOKIE_SECURE"] is False and s["CSRF_COOKIE_SECURE"] is False
    assert s["SECRET_KEY"] == s["LCSTORE_DEMO_SECRET_KEY"]


def test_a_wsgi_worker_loads_the_urlconf_and_time_tables_at_start():
    """gunicorn's workers import lcstore.wsgi before their first request; what Django does
    lazily on a first request (import the URLconf, every view, scipy.stats) is done then."""
    probe = (
        "import sys\n"
        "assert 'api.urls' not in sys.modules and 'scipy.stats' not in sys.modules\n"
        "import lcstore.wsgi\n"
        "print(sorted(m for m in ('api.urls', 'api.views.analysis', 'scipy.stats') "
        "if m in sys.modules))\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "DJANGO_SETTINGS_MODULE"}
    done = subprocess.run(
        [sys.executable, "-c", probe],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.split("\n")[-2] == "['api.urls', 'api.views.analysis', 'scipy.stats']"


# ------------------------------------------------------------------ docker-compose.yml
# What the compose file must hold (issue 6): PostgreSQL, Redis, migrations once, the API
# under gunicorn and the task worker, health checks, and an environment lcstore reads.
# The file is checked as YAML here; a Docker Compose client, where one is installed,
# validates it against the Compose specification (`docker compose config`, or Debian's
# v1 `docker-compose config`; no engine is needed for that).

COMPOSE_FILE = ROOT / "docker-compose.yml"
LONG_RUNNING = ("db", "redis", "api", "worker")


def _compose_client() -> list[str] | None:
    """The argv prefix of an installed Compose client that answers `version`, or None."""
    for argv in (["docker", "compose"], ["docker-compose"]):
        if shutil.which(argv[0]) is None:
            continue
        try:
            done = subprocess.run([*argv, "version"], capture_output=True, timeout=60)
        except (OSError, subprocess.TimeoutExpired):
            continue
        if done.returncode == 0:
            return argv
    return None


def _compose_config(env_extra: dict[str, str]) -> tuple[list[str], subprocess.CompletedProcess]:
    client = _compose_client()
    if client is None:
        pytest.skip(
            "no Docker Compose client: neither `docker compose version` nor "
            "`docker-compose version` works (apt-get install docker-compose)"
        )
    env = {k: v for k, v in os.environ.items() if k != "SECRET_KEY"} | env_extra
    done = subprocess.run(
        [*client, "-f", str(COMPOSE_FILE), "config"],
        capture_output=True,
        text=True,
        timeout=120,
        env=env,
        cwd=ROOT,
    )
    return client, done


def _command_text(service: dict) -> str:
    cmd = service.get("command", "")
    return " ".join(cmd) if isinstance(cmd, list) else str(cmd)


def _check_compose(doc: dict) -> None:
    """The services, their commands, health checks and start order."""
    services = doc["services"]
    assert set(services) == {"db", "redis", "migrate", "api", "worker"}
    assert services["db"]["image"].startswith("postgres:")
    assert services["redis"]["image"].startswith("redis:")
    assert "gunicorn" in _command_text(services["api"])
    assert "lcstore.wsgi" in _command_text(services["api"])
    assert _command_text(services["worker"]).split()[-2:] == ["manage.py", "db_worker"]
    assert "migrate" in _command_text(services["migrate"])
    for name in LONG_RUNNING:
        test = services[name].get("healthcheck", {}).get("test")
        assert test and test[0] in ("CMD", "CMD-SHELL") and len(test) > 1, name
    assert "service_healthy" == services["migrate"]["depends_on"]["db"]["condition"]
    for name in ("api", "worker"):
        deps = services[name]["depends_on"]
        assert deps["db"]["condition"] == "service_healthy", name
        assert deps["redis"]["condition"] == "service_healthy", name
        assert deps["migrate"]["condition"] == "service_completed_successfully", name
    built = [n for n, s in services.items() if "build" in s]
    assert sorted(built) == ["api", "migrate", "worker"]


def _compose_yaml() -> dict:
    import yaml

    return yaml.safe_load(COMPOSE_FILE.read_text())


class _ReadRecorder(dict):
    """A stand-in for os.environ that remembers every variable name looked up."""

    def __init__(self, env: dict[str, str]):
        super().__init__(env)
        self.read: set[str] = set()

    def __getitem__(self, key: str) -> str:
        self.read.add(key)
        return super().__getitem__(key)

    def get(self, key: str, default: object = None) -> object:  # type: ignore[override]
        self.read.add(key)
        return super().get(key, default)

    def __contains__(self, key: object) -> bool:
        self.read.add(str(key))
        return super().__contains__(key)


def _check_app_environment(doc: dict) -> None:
    """Every variable set on a lcstore container is read by lcstore/settings.py, and means
    what the other services provide (PostgreSQL's user/password/database, Redis's host)."""
    services = doc["services"]
    db_env = services["db"]["environment"]
    for name in ("api", "worker", "migrate"):
        env = {k: str(v) for k, v in services[name]["environment"].items()}
        rec = _ReadRecorder(env)
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(os, "environ", rec)
            s = runpy.run_path(str(ROOT / "lcstore" / "settings.py"))
        assert sorted(set(env) - rec.read) == [], f"{name}: set but never read by settings"
        db = s["DATABASES"]["default"]
        assert db["ENGINE"] == "django.db.backends.postgresql"
        assert (db["HOST"], db["PORT"]) == ("db", 5432)
        assert db["USER"] == db_env["POSTGRES_USER"]
        assert db["PASSWORD"] == db_env["POSTGRES_PASSWORD"]
        assert db["NAME"] == db_env["POSTGRES_DB"]
        cache = s["CACHES"]["default"]
        assert cache["BACKEND"] == "django.core.cache.backends.redis.RedisCache"
        assert cache["LOCATION"].startswith("redis://redis:6379/")
        assert s["TASKS"]["default"]["BACKEND"] == "django_tasks_db.backend.DatabaseBackend"
        assert s["DEBUG"] is False


def test_compose_file_services_and_health_checks():
    _check_compose(_compose_yaml())


def test_compose_environment_is_what_settings_read():
    _check_app_environment(_compose_yaml())


def test_the_env_recorder_sees_an_unread_variable():
    """Guards the check above: a variable settings.py never reads is reported."""
    doc = _compose_yaml()
    doc["services"]["worker"]["environment"] = dict(
        doc["services"]["worker"]["environment"], LCSTORE_NO_SUCH_SETTING="1"
    )
    with pytest.raises(AssertionError, match="LCSTORE_NO_SUCH_SETTING"):
        _check_app_environment(doc)


def test_compose_config_validates():
    """`docker compose config` (or `docker-compose config`) accepts the file; its resolved
    form passes the same checks, with SECRET_KEY taken from the caller's environment."""
    import yaml

    key = secrets.token_urlsafe(50)
    client, done = _compose_config({"SECRET_KEY": key})
    assert done.returncode == 0, f"{' '.join(client)} config failed:\n{done.stderr}"
    doc = yaml.safe_load(done.stdout)
    _check_compose(doc)
    for name in ("api", "worker", "migrate"):
        assert doc["services"][name]["environment"]["SECRET_KEY"] == key
    _check_app_environment(doc)


def test_compose_refuses_to_run_without_a_secret_key():
    client, done = _compose_config({})
    assert done.returncode != 0
    assert "SECRET_KEY" in done.stderr
