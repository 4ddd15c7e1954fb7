#!/usr/bin/env bash
# Build the separate virtual environment that holds the ZDCF test oracle.
#
# pyzdcf 1.0.3 needs numpy < 2, the project needs numpy >= 2, so the oracle
# lives in its own venv and the tests call it through a subprocess
# (tests/oracles/run_pyzdcf.py).  Idempotent: when the venv already imports
# pyzdcf, nothing is done.
#
# Usage: bash tests/oracles/make_zdcf_env.sh   # -> <repository root>/.zdcf-venv
#                                              #    (/work/main/.zdcf-venv here)
#        ZDCF_VENV=/some/dir bash tests/oracles/make_zdcf_env.sh
# The tests look for the venv in $ZDCF_VENV, then in <repository root>/.zdcf-venv.
set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)"
VENV="${ZDCF_VENV:-$ROOT/.zdcf-venv}"
PY="${PYTHON:-python3}"

if [ -x "$VENV/bin/python" ] && "$VENV/bin/python" -c "import pyzdcf" >/dev/null 2>&1; then
    echo "zdcf oracle env ready: $VENV"
    exit 0
fi

"$PY" -m venv --clear "$VENV"
"$VENV/bin/python" -m pip install --quiet --disable-pip-version-check \
    "pyzdcf==1.0.3" "numpy>=1.24,<2" "pandas>=2.0,<2.3" "scipy<1.14"
"$VENV/bin/python" -c "import pyzdcf, numpy, pandas; print('zdcf oracle env built:', '$VENV', 'numpy', numpy.__version__, 'pandas', pandas.__version__)"
