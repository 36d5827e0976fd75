#!/usr/bin/env bash
# Fitting benchmark: `scorer fit` against R's read.csv + glm on the same seeded CSV, in the same run.
# Usage: bench/fit/run.sh [ROWS]   (default 1000000; needs R: apt-get install r-base-core)
set -euo pipefail
cd "$(dirname "$0")/../.."
rows=${1:-1000000}
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
dotnet build -c Release bench/Scorer.Bench -v q -nologo >/dev/null
dotnet build -c Release src/Scorer.Cli -v q -nologo >/dev/null
dotnet bench/Scorer.Bench/bin/Release/net10.0/Scorer.Bench.dll --fit-data "$dir/data.csv" "$rows"
echo "data: $rows rows, $(du -h "$dir/data.csv" | cut -f1)"

numeric=$(seq -s, 0 13 | sed 's/\([0-9]\+\)/x\1/g')
start=$(date +%s.%N)
dotnet src/Scorer.Cli/bin/Release/net10.0/scorer.dll fit --data "$dir/data.csv" --outcome y --numeric "$numeric" \
  --categorical grade --transform x0=log,x1=log --interaction x2:x3 --model bench --new-version 1 --output "$dir/model.json" --quiet \
  > "$dir/scorer.txt"; head -1 "$dir/scorer.txt"; tail -3 "$dir/scorer.txt"
end=$(date +%s.%N)
echo "scorer fit, end to end (process start to exit): $(echo "$end - $start" | bc) s"

Rscript - "$dir/data.csv" <<'R'
args <- commandArgs(trailingOnly = TRUE)
t0 <- proc.time()[["elapsed"]]
d <- read.csv(args[1], colClasses = c(rep("numeric", 14), "character", "integer"))
t1 <- proc.time()[["elapsed"]]
f <- as.formula(paste("y ~", paste(c("log(x0)", "log(x1)", paste0("x", 2:13), "grade", "x2:x3"), collapse = " + ")))
fit <- glm(f, data = d, family = binomial, control = glm.control(epsilon = 1e-10))
t2 <- proc.time()[["elapsed"]]
cat(sprintf("R: read %.2f s, fit %.2f s (%d iterations, %d terms), total %.2f s\n", t1 - t0, t2 - t1, fit$iter, length(coef(fit)), t2 - t0))
R
