#!/usr/bin/env bash
# gRPC dense-stream load test: 1,000-row messages on one ScoreDenseStream against a bare echo stream, in one run.
# The server runs on core 0, the load client (bench/Scorer.Bench --grpc-dense) on core 1; 127.0.0.1 only, bounded.
# Usage: bench/load/grpc.sh [SECONDS]   (default 10)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-10}
source bench/load/common.sh
dotnet build -c Release bench/Scorer.LoadBaseline -v q -nologo >/dev/null
dotnet build -c Release bench/Scorer.Bench -v q -nologo >/dev/null
dotnet build -c Release src/Scorer.Server -v q -nologo >/dev/null
client="dotnet bench/Scorer.Bench/bin/Release/net10.0/Scorer.Bench.dll --grpc-dense http://127.0.0.1:18081"
measure() { # name
  taskset -c 1 $client 5 > /dev/null   # warm-up
  printf '| %s | %s |\n' "$1" "$(taskset -c 1 $client "$seconds")"
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
