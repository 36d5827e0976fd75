#!/usr/bin/env bash
# Writes the calibration reference cases into tests/reference/calibration/out/ (and nowhere else):
#   out/<case>.csv    rows p,y,eta in prediction-time order (make-cases.R)
#   out/r/<case>.json the R-side statistics (make-cases.R: glm, pROC, quantile/cut)
#   out/<case>.json   the expected statistics the C# tests read (statistics.py)
# Needs the Debian packages listed in README.md. Exits non-zero if either script fails or any cross-check fails.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
out="$here/out"
mkdir -p "$out/r"
# Debian's interpreters by absolute path: the Python on PATH may be another one without sklearn/statsmodels.
/usr/bin/Rscript "$here/make-cases.R" "$out"
/usr/bin/python3 "$here/statistics.py" "$out"
