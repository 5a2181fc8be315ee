#!/usr/bin/env bash
# CI job for the QGIS plugin: Debian's QGIS (python3-qgis), a virtual environment that sees
# it, then only the tests marked `qgis`, run in real headless QGIS. Called by .ci/run.
#
# - QGIS already importable by /usr/bin/python3: apt is skipped.
# - apt-get failing or slower than QGIS_APT_TIMEOUT seconds (default 900): the job prints
#   "NOT RUN" and returns 0, unless CURVESCAN_QGIS_JOB=required (then it fails).
# - Once QGIS is there, every QGIS test must run and pass: CURVESCAN_REQUIRE_QGIS=1 turns a
#   skip into a failure, and pytest's exit code (also for "no tests collected") is returned.
set -euo pipefail
cd "$(dirname "$0")/.."
start=$SECONDS
say() { echo "[qgis job] $*"; }
have_qgis() { /usr/bin/python3 -c "import qgis.core, ensurepip" 2>/dev/null; }

if ! have_qgis; then
  if ! command -v apt-get >/dev/null; then
    say "NOT RUN: QGIS is not installed and there is no apt-get"
    [ "${CURVESCAN_QGIS_JOB:-}" = required ] && exit 1
    exit 0
  fi
  say "installing python3-qgis and python3-venv with apt-get (a few minutes)"
  if ! timeout "${QGIS_APT_TIMEOUT:-900}" sh -c '
      apt-get update -q -o Acquire::Retries=3 >/dev/null &&
      DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends \
        -o Acquire::Retries=3 python3-qgis python3-venv >/dev/null' || ! have_qgis; then
    say "NOT RUN: apt-get failed or took longer than ${QGIS_APT_TIMEOUT:-900} s;"
    say "the QGIS plugin is NOT tested in this run"
    [ "${CURVESCAN_QGIS_JOB:-}" = required ] && exit 1
    exit 0
  fi
  say "apt-get done in $((SECONDS - start)) s"
fi

venv="${TMPDIR:-/tmp}/curvescan-qgis-venv"
rm -rf "$venv"
/usr/bin/python3 -m venv --system-site-packages "$venv"
"$venv/bin/pip" install -q --ignore-installed -e ".[test]"
# PyQt5 must stay Debian's (a PyQt5 wheel breaks qgis.core); numpy etc. come from PyPI.
"$venv/bin/python" - <<'EOF'
import PyQt5, numpy, qgis.core
assert PyQt5.__file__.startswith("/usr/lib/python3/"), f"PyQt5 not from Debian: {PyQt5.__file__}"
print(f"[qgis job] QGIS {qgis.core.Qgis.QGIS_VERSION}; PyQt5 {PyQt5.__file__}; "
      f"numpy {numpy.__version__} {numpy.__file__}")
EOF
say "environment ready after $((SECONDS - start)) s; running the tests marked qgis"
status=0
CURVESCAN_REQUIRE_QGIS=1 "$venv/bin/python" -m pytest tests/qgis -m qgis -q -rfEsxXp \
  -p no:cacheprovider || status=$?
say "finished in $((SECONDS - start)) s with pytest exit code $status"
exit "$status"
