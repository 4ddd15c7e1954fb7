#!/usr/bin/env bash
# The test command of the README: sets up everything the suite needs, then runs it.
#   - a virtual environment with the pinned requirements (.venv);
#   - the pyzdcf oracle in its own environment (.zdcf-venv; it needs numpy < 2);
#   - PostgreSQL: used if one answers on $PGHOST:$PGPORT, started if installed but
#     down, otherwise the script stops with a clear message.
# Extra arguments go to pytest.
set -euo pipefail
cd "$(dirname "$0")/.."

PGHOST=${PGHOST:-127.0.0.1}
PGPORT=${PGPORT:-5432}
export DATABASE_URL=${DATABASE_URL:-postgres://postgres@${PGHOST}:${PGPORT}/postgres}

if [ ! -x .venv/bin/python ]; then
  python3 -m venv .venv
fi
if ! cmp -s requirements.txt .venv/.requirements-installed 2>/dev/null; then
  .venv/bin/pip install -q --upgrade pip
  .venv/bin/pip install -q -r requirements.txt
  cp requirements.txt .venv/.requirements-installed
fi

pg_up() { .venv/bin/python - "$DATABASE_URL" <<'PY'
import sys, psycopg
try:
    psycopg.connect(sys.argv[1], connect_timeout=3).close()
except Exception as exc:
    print(f"PostgreSQL not answering: {exc}", file=sys.stderr)
    sys.exit(1)
PY
}

if ! pg_up 2>/dev/null; then
  if command -v pg_ctlcluster >/dev/null 2>&1 && [ -d /etc/postgresql ]; then
    ver=$(ls /etc/postgresql | sort -V | tail -n 1)
    echo "PostgreSQL is down; starting cluster $ver/main"
    pg_ctlcluster --skip-systemctl-redirect "$ver" main start || true
    for _ in $(seq 1 30); do pg_up 2>/dev/null && break; sleep 1; done
  fi
  if ! pg_up; then
    echo "ERROR: the tests need PostgreSQL at $DATABASE_URL and none answers or can be" >&2
    echo "started here. Install it (apt-get install postgresql) or set DATABASE_URL." >&2
    exit 2
  fi
fi

bash tests/oracles/make_zdcf_env.sh || echo "warning: pyzdcf oracle environment not built; its tests will be skipped"

# The browser test drives Debian's chromium with its chromium-driver (never a
# downloaded browser). Installed once, when missing, as root with apt-get; any
# failure only warns: tests/web/test_browser.py then skips and says why.
if [ ! -x /usr/bin/chromium ] || [ ! -x /usr/bin/chromedriver ]; then
  if [ "$(id -u)" -eq 0 ] && command -v apt-get >/dev/null 2>&1; then
    echo "Installing chromium and chromium-driver for the browser test"
    if ! { DEBIAN_FRONTEND=noninteractive apt-get update -qq &&
           DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium chromium-driver; } >/dev/null; then
      echo "warning: chromium/chromium-driver could not be installed; the browser test will be skipped"
    fi
  else
    echo "warning: /usr/bin/chromium or /usr/bin/chromedriver missing (install the Debian packages" \
         "chromium and chromium-driver as root); the browser test will be skipped"
  fi
fi

# The compose-file check validates docker-compose.yml with a Compose client
# (Debian's docker-compose; no Docker engine is needed). Installed once, when
# missing, as root with apt-get; any failure only warns and the check skips.
if ! docker compose version >/dev/null 2>&1 && ! command -v docker-compose >/dev/null 2>&1; then
  if [ "$(id -u)" -eq 0 ] && command -v apt-get >/dev/null 2>&1; then
    echo "Installing docker-compose for the compose-file check"
    if ! { DEBIAN_FRONTEND=noninteractive apt-get update -qq &&
           DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends docker-compose; } >/dev/null; then
      echo "warning: docker-compose could not be installed; the compose validation test will be skipped"
    fi
  else
    echo "warning: no Docker Compose client (Debian package docker-compose, as root); the compose validation test will be skipped"
  fi
fi

exec .venv/bin/pytest "$@"
