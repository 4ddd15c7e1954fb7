#!/usr/bin/env bash
# The demo command of the README: environment, database, the invented campaign,
# a token and example requests, then the service on 127.0.0.1:8000.
# Without DATABASE_URL the demo uses an embedded SQLite file under var/.
set -euo pipefail
cd "$(dirname "$0")/.."

if [ ! -x .venv/bin/python ]; then
  python3 -m venv .venv
fi
if ! cmp -s requirements.txt .venv/.requirements-installed 2>/dev/null; then
  .venv/bin/pip install -q --upgrade pip
  .venv/bin/pip install -q -r requirements.txt
  cp requirements.txt .venv/.requirements-installed
fi
mkdir -p var
export DEBUG=${DEBUG:-1}
PY=.venv/bin/python
$PY manage.py migrate --noinput
$PY manage.py load_campaign
$PY manage.py demo_banner
exec $PY manage.py runserver --noreload 127.0.0.1:8000
