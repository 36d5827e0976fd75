#!/usr/bin/env bash
# Replica throughput: single-row REST scoring with the prediction log on, into one PostgreSQL, from one replica and
# then from two replicas side by side (each its own wrk), in one run. Everything on 127.0.0.1, bounded in time.
# On a 2-core machine the replicas, PostgreSQL and wrk share the same two cores, so this measures the overhead of
# sharing the store, not the scaling a second machine would give.
# Usage: bench/load/replicas.sh [SECONDS]   (default 10; uses SCORER_TEST_POSTGRES when set, else starts a server)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-10}
source bench/load/common.sh
dotnet build -c Release src/Scorer.Server -v q -nologo >/dev/null
if [ -z "${SCORER_TEST_POSTGRES:-}" ]; then
  pg=$(mktemp -d /tmp/scorer-bench-pg.XXXXXX)
  SCORER_TEST_POSTGRES=$(scripts/postgres.sh start "$pg" | tail -n 1)
  trap 'cleanup; scripts/postgres.sh stop "$pg" >/dev/null 2>&1 || true; rm -rf "$pg"' EXIT
fi

mkdir -p "$dir/models" && cp examples/pump-bearings/model.json "$dir/models/"
schema="bench_$(date +%s)"
replica() { # http-port grpc-port
  Scorer__Store__Schema=$schema Scorer__LogLevel=Warning Scorer__SeedDemoModels=false dotnet src/Scorer.Server/bin/Release/net10.0/Scorer.Server.dll \
    --models "$dir/models" --store-kind postgres --store-connection "$SCORER_TEST_POSTGRES" --http "127.0.0.1:$1" --grpc "127.0.0.1:$2" > "$dir/replica-$1.log" 2>&1 &
  pids+=($!)
  wait_for "http://127.0.0.1:$1/readyz"
}

load() { # port seconds output
  wrk -t1 -c32 -d"$2s" --latency -s bench/load/score.lua "http://127.0.0.1:$1/v1/models/pump-bearing-failure/score" > "$3"
}

rps() { awk '/Requests\/sec/ {print $2}' "$1"; }

replica 18080 18081
load 18080 5 /dev/null # warm-up
load 18080 "$seconds" "$dir/one.txt"
replica 18090 18091
load 18090 5 /dev/null # warm-up
load 18080 "$seconds" "$dir/two-a.txt" & a=$!
load 18090 "$seconds" "$dir/two-b.txt" & b=$!
wait "$a" "$b"

one=$(rps "$dir/one.txt"); ta=$(rps "$dir/two-a.txt"); tb=$(rps "$dir/two-b.txt")
echo "| replicas sharing one PostgreSQL (log on) | requests/s | ratio to one |"
echo "| --- | ---: | ---: |"
printf '| one | %s | 1.00 |\n' "$one"
awk -v a="$ta" -v b="$tb" -v one="$one" 'BEGIN { printf "| two (%s + %s) | %.0f | %.2f |\n", a, b, a + b, (a + b) / one }'
