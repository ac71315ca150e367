#!/usr/bin/env bash
# Makes the peer's Python environment (pinned in requirements.txt) at $1 (default /tmp/peervenv).
# Needs Debian's SuiteSparse headers: apt-get install -y libsuitesparse-dev.
set -euo pipefail
venv=${1:-/tmp/peervenv}
here=$(cd "$(dirname "$0")" && pwd)
python3 -m venv "$venv"
"$venv/bin/pip" install --quiet setuptools wheel numpy==2.4.6 scipy==1.17.1 Cython==3.0.12
# scikit-sparse builds against the numpy and Cython above.
"$venv/bin/pip" install --quiet --no-build-isolation -r "$here/requirements.txt"
"$venv/bin/python" -c "from importlib.metadata import version as v; import sksparse.cholmod; print('peer environment: numpy', v('numpy'), 'scipy', v('scipy'), 'scikit-sparse', v('scikit-sparse'))"
