#!/usr/bin/env bash
# gRPC dense-stream load test: 1,000-row messages on one ScoreDenseStream against a bare echo stream, in one run.
# The server runs on core 0, the load client (bench/Scorer.Bench --grpc-dense) on core 1; 127.0.0.1 only, bounded.
# Usage: bench/load/grpc.sh [SECONDS]   (default 10)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-10}
dir=$(mktemp -d)
pids=()
cleanup() { for p in "${pids[@]}"; do kill "$p" 2>/dev/null || true; done; rm -rf "$dir"; }
trap cleanup EXIT
dotnet build -c Release bench/Scorer.LoadBaseline -v q -nologo >/dev/null
dotnet build -c Release bench/Scorer.Bench -v q -nologo >/dev/null
dotnet build -c Release src/Scorer.Server -v q -nologo >/dev/null
client="dotnet bench/Scorer.Bench/bin/Release/net10.0/Scorer.Bench.dll --grpc-dense http://127.0.0.1:18081"
stop_last() { kill "${pids[-1]}"; wait "${pids[-1]}" 2>/dev/null || true; unset 'pids[-1]'; }
measure() { # name
  taskset -c 1 $client 5 > /dev/null   # warm-up
  printf '| %s | %s |\n' "$1" "$(taskset -c 1 $client "$seconds")"
}
run_server() { # log-enabled
  rm -rf "$dir/models" "$dir/data"
  mkdir -p "$dir/models" && cp examples/pump-bearings/model.json "$dir/models/"
  Scorer__Log__Enabled=$1 Scorer__LogLevel=Warning taskset -c 0 dotnet src/Scorer.Server/bin/Release/net10.0/Scorer.Server.dll \
    --models "$dir/models" --store "$dir/data/scorer.db" --http 127.0.0.1:18080 --grpc 127.0.0.1:18081 > "$dir/server.log" 2>&1 &
  pids+=($!)
  for _ in $(seq 100); do curl -sf http://127.0.0.1:18080/readyz >/dev/null 2>&1 && return 0; sleep 0.1; done
}

echo "| stream | rows/s |"
echo "| --- | --- |"
Kestrel__EndpointDefaults__Protocols=Http2 ASPNETCORE_URLS=http://127.0.0.1:18081 taskset -c 0 \
  dotnet bench/Scorer.LoadBaseline/bin/Release/net10.0/Scorer.LoadBaseline.dll > "$dir/baseline.log" 2>&1 &
pids+=($!)
sleep 2
measure "bare echo stream"
stop_last
run_server false
measure "Scorer ScoreDenseStream, prediction log off"
stop_last
run_server true
measure "Scorer ScoreDenseStream, prediction log on (SQLite)"
stop_last
