#!/usr/bin/env bash
# The whole Shearbook test suite on a fresh machine: a local venv with the package and its test
# extras, Debian's chromium for the browser tests (installed with apt-get when missing), then pytest.
# Extra arguments go to pytest. "No tests collected" (pytest exit 5) is a failure, never a pass.
set -euo pipefail
cd "$(dirname "$0")/.."

python3 -m venv .venv
.venv/bin/python -m pip install --quiet --upgrade pip
.venv/bin/python -m pip install --quiet -e '.[test]'

# Debian chromium for the browser tests, poppler-utils (pdftotext, pdfinfo) to read the printed record back
if ! command -v chromium >/dev/null 2>&1 || ! command -v pdftotext >/dev/null 2>&1; then
  echo "tests/run.sh: installing Debian chromium and poppler-utils for the browser and print tests"
  if [ "$(id -u)" -eq 0 ]; then apt-get update -qq && apt-get install -y -qq chromium poppler-utils
  else sudo apt-get update -qq && sudo apt-get install -y -qq chromium poppler-utils; fi
fi

# Python's own bytecode cache, on even where the machine turns it off: the suite starts some forty Python processes
# (test workers, kernels, JupyterLab, commands), and each would compile Shearbook again (__pycache__ is ignored by git)
unset PYTHONDONTWRITEBYTECODE

set +e
# one worker per core (pytest-xdist), handed one test at a time, the slow ones first (tests/conftest.py): the
# workers finish together
.venv/bin/python -m pytest -n auto --dist load --maxschedchunk 1 "$@"
rc=$?
set -e
if [ "$rc" -eq 5 ]; then
  echo "tests/run.sh: pytest collected no tests: that is a failure" >&2
  exit 1
fi
exit "$rc"
