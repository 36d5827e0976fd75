#!/usr/bin/env bash
# Runs every test of the repository and ends with one line: "N passed, N failed[, N skipped]".
#   1. checks that the reference tools are installed (R with MASS and pROC, Python 3 with scikit-learn, statsmodels and
#      SciPy, Prometheus's promtool); as root it installs what is missing with apt-get;
#   2. starts a throwaway PostgreSQL 15 (scripts/postgres.sh, stopped at exit) unless SCORER_TEST_POSTGRES already
#      names one, for the store's contract tests and the replica test;
#   3. regenerates the reference values (tests/reference/*.R into tests/reference/out/, and
#      tests/reference/calibration/run.sh into tests/reference/calibration/out/);
#   4. runs `dotnet test` on the solution and counts the results from the TRX files.
# Exit status: 0 when every test passed, 1 otherwise (also when no test ran).
set -euo pipefail
cd "$(dirname "$0")/.."
export DOTNET_CLI_TELEMETRY_OPTOUT=1 DOTNET_NOLOGO=1 DOTNET_SKIP_FIRST_TIME_EXPERIENCE=1

missing=()
command -v Rscript >/dev/null 2>&1 || missing+=(r-base-core)
if ! Rscript -e 'suppressPackageStartupMessages(library(MASS))' >/dev/null 2>&1; then missing+=(r-cran-mass); fi
if ! Rscript -e 'suppressPackageStartupMessages(library(pROC))' >/dev/null 2>&1; then missing+=(r-cran-proc); fi
command -v promtool >/dev/null 2>&1 || missing+=(prometheus)
if ! /usr/bin/python3 -c 'import numpy, scipy, sklearn, statsmodels' >/dev/null 2>&1; then
  missing+=(python3-numpy python3-scipy python3-sklearn python3-statsmodels)
fi
if ! /usr/bin/python3 -c 'import yaml' >/dev/null 2>&1; then missing+=(python3-yaml); fi
command -v chromium >/dev/null 2>&1 || missing+=(chromium)
[ -x /usr/lib/postgresql/15/bin/postgres ] || missing+=(postgresql-15)
if [ ${#missing[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then
    echo "installing ${missing[*]}"
    apt-get update -q
    DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends "${missing[@]}"
  else
    echo "The tests need Debian packages: sudo apt-get install ${missing[*]}" >&2
    exit 1
  fi
fi

if [ -z "${SCORER_TEST_POSTGRES:-}" ]; then
  pgdir=$(mktemp -d /tmp/scorer-test-pg.XXXXXX)
  trap 'scripts/postgres.sh stop "$pgdir" >/dev/null 2>&1 || true; rm -rf "$pgdir"' EXIT
  echo "== PostgreSQL 15 for the store tests, in $pgdir"
  SCORER_TEST_POSTGRES=$(scripts/postgres.sh start "$pgdir" | tail -n 1)
  export SCORER_TEST_POSTGRES
fi

echo "== reference values (R $(Rscript -e 'cat(as.character(getRversion()))'))"
rm -rf tests/reference/out
Rscript tests/reference/scoring-reference.R tests/reference/out
Rscript tests/reference/fitting-reference.R tests/reference/out
tests/reference/calibration/run.sh

echo "== dotnet test"
rm -rf TestResults
set +e
dotnet test Scorer.sln -c Release --logger "trx" --results-directory TestResults "$@"
status=$?
set -e

passed=0; failed=0; skipped=0; total=0
for trx in TestResults/*.trx; do
  [ -f "$trx" ] || continue
  counters=$(grep -o '<Counters [^>]*>' "$trx" | head -n 1)
  get() { echo "$counters" | sed -n "s/.* $1=\"\([0-9]*\)\".*/\1/p"; }
  total=$((total + $(get total)))
  passed=$((passed + $(get passed)))
  failed=$((failed + $(get failed) + $(get error) + $(get timeout) + $(get aborted)))
  skipped=$((skipped + $(get notExecuted)))
done

if [ "$skipped" -gt 0 ]; then
  echo "$passed passed, $failed failed, $skipped skipped"
else
  echo "$passed passed, $failed failed"
fi

if [ "$total" -eq 0 ]; then
  echo "no test ran" >&2
  exit 1
fi
if [ "$status" -ne 0 ] || [ "$failed" -ne 0 ]; then
  exit 1
fi
