# Shared by the load tests (sourced): a temporary folder, the processes started (stopped on exit, by PID), and the
# Scorer server on core 0 with the pump demo model. Expects the repository root as the current folder.
dir=$(mktemp -d)
pids=()
cleanup() { for p in "${pids[@]}"; do kill "$p" 2>/dev/null || true; done; rm -rf "$dir"; }
trap cleanup EXIT

wait_for() { for _ in $(seq 100); do curl -sf "$1" >/dev/null 2>&1 && return 0; sleep 0.1; done; echo "no answer from $1" >&2; return 1; }

run_server() { # log-enabled (true|false) [direct-rest (true|false), default true]
  rm -rf "$dir/models" "$dir/data"
  mkdir -p "$dir/models" && cp examples/pump-bearings/model.json "$dir/models/"
  Scorer__PredictionLog__Enabled=$1 Scorer__DirectRestScoring=${2:-true} Scorer__LogLevel=Warning taskset -c 0 dotnet src/Scorer.Server/bin/Release/net10.0/Scorer.Server.dll \
    --models "$dir/models" --store "$dir/data/scorer.db" --http 127.0.0.1:18080 --grpc 127.0.0.1:18081 > "$dir/server.log" 2>&1 &
  pids+=($!)
  wait_for http://127.0.0.1:18080/readyz
}

stop_last() { kill "${pids[-1]}"; wait "${pids[-1]}" 2>/dev/null || true; unset 'pids[-1]'; }
