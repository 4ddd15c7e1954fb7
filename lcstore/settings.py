"""Settings for lcstore, read from the environment.

``DATABASE_URL`` selects the database (PostgreSQL in production and in the
test suite); without it an embedded SQLite file serves the demo.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import dj_database_url
from astropy.utils import iers

# astropy must never reach for the network (REFERENCES §3): use the bundled
# Earth-rotation and leap-second tables, however old.
iers.conf.auto_download = False
iers.conf.auto_max_age = None

BASE_DIR = Path(__file__).resolve().parent.parent


def _env_bool(name: str, default: bool = False) -> bool:
    value = os.environ.get(name)
    if value is None:
        return default
    return value.strip().lower() in {"1", "true", "yes", "on"}


def _env_int(name: str, default: int) -> int:
    value = os.environ.get(name)
    return int(value) if value not in (None, "") else default


DEBUG = _env_bool("DEBUG", False)
# The fallback key only serves the local demo; production sets SECRET_KEY
# (`check --deploy` refuses the fallback: lcstore/checks.py).
LCSTORE_DEMO_SECRET_KEY = "insecure-demo-key-set-SECRET_KEY-in-production"
SECRET_KEY = os.environ.get("SECRET_KEY") or LCSTORE_DEMO_SECRET_KEY
ALLOWED_HOSTS = [
    h.strip() for h in os.environ.get("ALLOWED_HOSTS", "localhost,127.0.0.1,testserver").split(",")
]

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "rest_framework",
    "rest_framework.authtoken",
    "django_filters",
    "drf_spectacular",
    "simple_history",
    "django_tasks",
    "django_tasks_db",
    "lcstore",
    "api",
    "web",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "simple_history.middleware.HistoryRequestMiddleware",
]

ROOT_URLCONF = "lcstore.urls"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
            ],
        },
    },
]

WSGI_APPLICATION = "lcstore.wsgi.application"
ASGI_APPLICATION = "lcstore.asgi.application"

DATA_DIR = Path(os.environ.get("LCSTORE_DATA_DIR", BASE_DIR / "var"))

# The test suite always runs on PostgreSQL: under pytest, without DATABASE_URL,
# the local server of the README is used (never the embedded SQLite file).
_RUNNING_TESTS = "pytest" in sys.modules
if _RUNNING_TESTS and not os.environ.get("DATABASE_URL"):
    os.environ["DATABASE_URL"] = "postgres://postgres@127.0.0.1:5432/postgres"

if _RUNNING_TESTS:
    # Fast hashing for the accounts tests create (never used outside the suite).
    PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]

if os.environ.get("DATABASE_URL"):
    DATABASES = {"default": dj_database_url.parse(os.environ["DATABASE_URL"], conn_max_age=60)}
    # One test database per pytest process, so concurrent runs never share one.
    DATABASES["default"]["TEST"] = {
        "NAME": os.environ.get("LCSTORE_TEST_DB_NAME") or f"test_lcstore_{os.getpid()}"
    }
else:
    DATABASES = {
        "default": {
            "ENGINE": "django.db.backends.sqlite3",
            "NAME": DATA_DIR / "lcstore-demo.sqlite3",
        }
    }

# A streaming standby for reads (lcstore/dbrouter.py): reads go to it, writes, transactions
# and, for LCSTORE_REPLICA_STICKY_SECONDS after a request of theirs wrote, the reads of
# that user go to the primary. The sticky marks live in the cache: with several API
# processes set REDIS_URL so they share them. The replica's sessions are read-only, so
# a misrouted write fails loudly even when the URL names a server that accepts writes.
LCSTORE_REPLICA_STICKY_SECONDS = _env_int("LCSTORE_REPLICA_STICKY_SECONDS", 10)
LCSTORE_REPLICA_RETRY_SECONDS = _env_int("LCSTORE_REPLICA_RETRY_SECONDS", 5)
if os.environ.get("DATABASE_REPLICA_URL"):
    if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
        from django.core.exceptions import ImproperlyConfigured

        raise ImproperlyConfigured("DATABASE_REPLICA_URL needs DATABASE_URL (the primary)")
    # The router checks a kept connection before a request's first read, and a standby
    # that does not answer within connect_timeout sends reads to the primary for
    # LCSTORE_REPLICA_RETRY_SECONDS (lcstore/dbrouter.py, rule 6).
    DATABASES["replica"] = dj_database_url.parse(
        os.environ["DATABASE_REPLICA_URL"], conn_max_age=60
    )
    DATABASES["replica"].setdefault("OPTIONS", {})["options"] = (
        "-c default_transaction_read_only=on"
    )
    DATABASES["replica"]["OPTIONS"].setdefault(
        "connect_timeout", _env_int("LCSTORE_REPLICA_CONNECT_TIMEOUT", 3)
    )
    # Tests: no database of its own; it reads the primary's test database by name
    # (a physical standby carries it).
    DATABASES["replica"]["TEST"] = {"MIRROR": "default"}
    DATABASE_ROUTERS = ["lcstore.dbrouter.PrimaryReplicaRouter"]
    MIDDLEWARE.append("lcstore.dbrouter.ReplicaRoutingMiddleware")

DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
]

LANGUAGE_CODE = "en-us"
TIME_ZONE = "UTC"
USE_I18N = True
USE_TZ = True

STATIC_URL = "static/"
STATIC_ROOT = BASE_DIR / "staticfiles"

# Uploads: the whole file is read and checksummed, so let Django keep it in a
# temporary file rather than in memory past a few MB.
LCSTORE_MAX_UPLOAD_MB = _env_int("LCSTORE_MAX_UPLOAD_MB", 256)
DATA_UPLOAD_MAX_MEMORY_SIZE = 10 * 1024 * 1024
FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 1024 * 1024
LCSTORE_MAX_ROWS = _env_int("LCSTORE_MAX_ROWS", 20_000_000)
LCSTORE_MAX_COLUMNS = _env_int("LCSTORE_MAX_COLUMNS", 200)
LCSTORE_MAX_BINS = _env_int("LCSTORE_MAX_BINS", 1_000_000)
LCSTORE_MAX_LAG_POINTS = _env_int("LCSTORE_MAX_LAG_POINTS", 20_000)
LCSTORE_MAX_SIMULATIONS = _env_int("LCSTORE_MAX_SIMULATIONS", 10_000)
LCSTORE_SYNC_SIMULATIONS = _env_int("LCSTORE_SYNC_SIMULATIONS", 200)
# A running job whose worker is gone is failed by the sweep (lcstore/jobs.py): on PostgreSQL
# when its session lock is free, on SQLite once it started this many seconds ago.
LCSTORE_JOB_STALE_SECONDS = _env_int("LCSTORE_JOB_STALE_SECONDS", 3600)
LCSTORE_PUBLIC_READ = _env_bool("LCSTORE_PUBLIC_READ", False)


# Request rates (api/throttles.py; OWASP API4): "<n>/<s|min|hour|day>" per account, or
# per client address when anonymous; "off" switches a budget off. Over a budget the
# answer is 429 with Retry-After. Behind N reverse proxies set LCSTORE_NUM_PROXIES=N
# so the client address is taken from X-Forwarded-For (0: the socket's address).
def _env_rate(name: str, default: str) -> str | None:
    value = os.environ.get(name, default).strip()
    if value.lower() in {"", "off", "none"}:
        return None
    n, _, period = value.partition("/")
    if not (n.isdigit() and period[:1] in {"s", "m", "h", "d"}):
        from django.core.exceptions import ImproperlyConfigured

        raise ImproperlyConfigured(f"{name}={value!r}: expected e.g. '60/hour' or 'off'")
    return value


LCSTORE_THROTTLE_UPLOADS = _env_rate("LCSTORE_THROTTLE_UPLOADS", "60/hour")
LCSTORE_THROTTLE_HEAVY = _env_rate("LCSTORE_THROTTLE_HEAVY", "600/hour")
LCSTORE_THROTTLE_READ = _env_rate("LCSTORE_THROTTLE_READ", "10000/hour")
LCSTORE_NUM_PROXIES = _env_int("LCSTORE_NUM_PROXIES", 0)

REST_FRAMEWORK = {
    "DEFAULT_THROTTLE_CLASSES": [
        "api.throttles.ReadThrottle",
        "api.throttles.ScopedThrottle",
    ],
    "DEFAULT_THROTTLE_RATES": {
        "uploads": LCSTORE_THROTTLE_UPLOADS,
        "heavy": LCSTORE_THROTTLE_HEAVY,
        "read": LCSTORE_THROTTLE_READ,
    },
    "NUM_PROXIES": LCSTORE_NUM_PROXIES,
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.TokenAuthentication",
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["api.permissions.ReadAccess"],
    "DEFAULT_FILTER_BACKENDS": ["django_filters.rest_framework.DjangoFilterBackend"],
    "DEFAULT_PAGINATION_CLASS": "api.pagination.Pagination",
    "PAGE_SIZE": 100,
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
    "EXCEPTION_HANDLER": "api.errors.exception_handler",
    "DEFAULT_RENDERER_CLASSES": [
        "rest_framework.renderers.JSONRenderer",
        "rest_framework.renderers.BrowsableAPIRenderer",
    ],
    "URL_FORMAT_OVERRIDE": "format",
}

SPECTACULAR_SETTINGS = {
    "TITLE": "lcstore API",
    "DESCRIPTION": (
        "Multiwavelength light curves with provenance: upload photometry, pull "
        "band-merged, unit-converted, binned curves (times in BJD_TDB as MJD) and "
        "correlation, lag and variability summaries."
    ),
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
    "POSTPROCESSING_HOOKS": [
        "drf_spectacular.hooks.postprocess_schema_enums",
        "api.schema.add_parameter_examples",
    ],
}

TASKS = {
    "default": {
        "BACKEND": os.environ.get(
            "LCSTORE_TASK_BACKEND",
            "django_tasks_db.backend.DatabaseBackend"
            if os.environ.get("DATABASE_URL")
            else "django_tasks.backends.immediate.ImmediateBackend",
        )
    }
}

if os.environ.get("REDIS_URL"):
    CACHES = {
        "default": {
            "BACKEND": "django.core.cache.backends.redis.RedisCache",
            "LOCATION": os.environ["REDIS_URL"],
        }
    }
else:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}

LOGIN_URL = "/login/"

# Cached curve answers (keyed by data versions, so never stale; see api/cache.py).
LCSTORE_CACHE_ANSWERS = _env_bool("LCSTORE_CACHE_ANSWERS", True)
LCSTORE_CACHE_SECONDS = _env_int("LCSTORE_CACHE_SECONDS", 3600)
LCSTORE_CACHE_MAX_BYTES = _env_int("LCSTORE_CACHE_MAX_BYTES", 5 * 1024 * 1024)

# ============================================================== production
# Django deployment checklist (docs.djangoproject.com/en/5.2/howto/deployment/checklist/).
# `manage.py check --deploy --fail-level WARNING` is clean with this environment:
#
#   SECRET_KEY=<50 or more random characters>     (required: lcstore.E001 without it)
#   ALLOWED_HOSTS=lcstore.example.org             (the public host names, comma list)
#   DATABASE_URL=postgres://...                   (lcstore.W002 on the demo SQLite file)
#   LCSTORE_HTTPS=1                               (the site is served over HTTPS), or
#   LCSTORE_BEHIND_TLS_PROXY=1                    (TLS ends at a reverse proxy that sets
#                                                  X-Forwarded-Proto and strips it from
#                                                  clients; implies LCSTORE_HTTPS=1)
#   DEBUG unset or 0
#
# LCSTORE_HTTPS=1 gives secure session and CSRF cookies, the HTTP -> HTTPS redirect and
# HSTS for LCSTORE_HSTS_SECONDS (default one year) with includeSubDomains and preload
# (LCSTORE_HSTS_INCLUDE_SUBDOMAINS=0 / LCSTORE_HSTS_PRELOAD=0 to leave them out;
# LCSTORE_SSL_REDIRECT=0 when the proxy redirects). LCSTORE_CSRF_TRUSTED_ORIGINS
# (comma list of https://host) for the browsable API and admin behind another origin.
# LCSTORE_ALLOW_INSECURE_KEY=1 accepts the demo key (a throwaway public demo only).
# Without these variables (the demo, the test suite) plain HTTP works as before.
LCSTORE_BEHIND_TLS_PROXY = _env_bool("LCSTORE_BEHIND_TLS_PROXY", False)
LCSTORE_HTTPS = _env_bool("LCSTORE_HTTPS", False) or LCSTORE_BEHIND_TLS_PROXY
LCSTORE_ALLOW_INSECURE_KEY = _env_bool("LCSTORE_ALLOW_INSECURE_KEY", False)
if LCSTORE_BEHIND_TLS_PROXY:
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
SESSION_COOKIE_SECURE = _env_bool("LCSTORE_SECURE_COOKIES", LCSTORE_HTTPS)
CSRF_COOKIE_SECURE = SESSION_COOKIE_SECURE
SECURE_SSL_REDIRECT = LCSTORE_HTTPS and _env_bool("LCSTORE_SSL_REDIRECT", True)
SECURE_HSTS_SECONDS = _env_int("LCSTORE_HSTS_SECONDS", 31_536_000) if LCSTORE_HTTPS else 0
SECURE_HSTS_INCLUDE_SUBDOMAINS = _env_bool("LCSTORE_HSTS_INCLUDE_SUBDOMAINS", True)
SECURE_HSTS_PRELOAD = _env_bool("LCSTORE_HSTS_PRELOAD", True)
CSRF_TRUSTED_ORIGINS = [
    o.strip() for o in os.environ.get("LCSTORE_CSRF_TRUSTED_ORIGINS", "").split(",") if o.strip()
]
# Django's defaults, stated because the checklist asks for them.
SECURE_CONTENT_TYPE_NOSNIFF = True
SECURE_REFERRER_POLICY = "same-origin"
X_FRAME_OPTIONS = "DENY"
SESSION_COOKIE_HTTPONLY = True
