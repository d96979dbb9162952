#!/usr/bin/env bash
# The package as a user installs it: build a wheel, install it with the locked
# versions into a fresh virtual environment outside the source tree, run the
# demo config from another folder and compare its tables with tests/expected/.
set -euo pipefail
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
PYTHON="${PYTHON:-python3}"
SCRATCH="$(mktemp -d)"
trap 'rm -rf "$SCRATCH"' EXIT

"$PYTHON" -m pip wheel --quiet --no-deps --wheel-dir "$SCRATCH/dist" "$ROOT"
"$PYTHON" -m venv "$SCRATCH/venv"
"$SCRATCH/venv/bin/python" -m pip install --quiet -r "$ROOT/requirements.lock"
"$SCRATCH/venv/bin/python" -m pip install --quiet --no-deps "$SCRATCH"/dist/liqpanel-*.whl

mkdir "$SCRATCH/study"
cd "$SCRATCH/study"
cp "$ROOT/config/config.yaml" config.yaml
ln -s "$ROOT/demo_data" demo_data
"$SCRATCH/venv/bin/liqpanel" --version
"$SCRATCH/venv/bin/python" -m liqpanel check-config config.yaml
"$SCRATCH/venv/bin/liqpanel" run --config config.yaml --cores 2 | tee run.log
run="$(tail -n 1 run.log | sed -n 's/^results: //p')"
test -n "$run" && test -f "$run/manifest.json"
"$SCRATCH/venv/bin/liqpanel" check-tables "$ROOT/tests/expected" "$run"
"$SCRATCH/venv/bin/liqpanel" check-versions "$run"
echo "wheel test: the installed wheel ran the demo config and its tables agree with tests/expected"
