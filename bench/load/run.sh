#!/usr/bin/env bash
# REST load test: single-row scoring at 64 connections against a bare endpoint parsing the same JSON, in one run.
# The server runs on core 0, wrk (Debian package wrk) on core 1; everything on 127.0.0.1, bounded in time.
# Usage: bench/load/run.sh [SECONDS]   (default 10)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-10}
source bench/load/common.sh
dotnet build -c Release bench/Scorer.LoadBaseline -v q -nologo >/dev/null
dotnet build -c Release src/Scorer.Server -v q -nologo >/dev/null

measure() { # name
  # Warm up first, so that the JIT has compiled the hot paths fully before the measured run.
  taskset -c 1 wrk -t1 -c64 -d5s -s bench/load/score.lua http://127.0.0.1:18080/v1/models/pump-bearing-failure/score > /dev/null
  taskset -c 1 wrk -t1 -c64 -d"${seconds}s" --latency -s bench/load/score.lua http://127.0.0.1:18080/v1/models/pump-bearing-failure/score > "$dir/$1.txt"
  local rps p99
  rps=$(awk '/Requests\/sec/ {print $2}' "$dir/$1.txt")
  p99=$(awk '$1 == "99%" {print $2}' "$dir/$1.txt")
  printf '| %s | %s | %s |\n' "$1" "$rps" "$p99"
}

echo "| endpoint | requests/s | p99 latency |"
echo "| --- | ---: | ---: |"
ASPNETCORE_URLS=http://127.0.0.1:18080 taskset -c 0 dotnet bench/Scorer.LoadBaseline/bin/Release/net10.0/Scorer.LoadBaseline.dll > "$dir/baseline.log" 2>&1 &
pids+=($!)
for _ in $(seq 100); do curl -s -o /dev/null http://127.0.0.1:18080/ && break; sleep 0.1; done
sleep 1
curl -s -X POST -H 'content-type: application/json' -d '{"rows":[]}' http://127.0.0.1:18080/v1/models/x/score >/dev/null
measure "bare endpoint (parse JSON, constant answer)"
stop_last
run_server false
measure "Scorer, prediction log off"
stop_last
run_server true
measure "Scorer, prediction log on (SQLite)"
stop_last
run_server false false
measure "Scorer through the generic JSON transcoder, log off"
stop_last
