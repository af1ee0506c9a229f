#!/usr/bin/env bash
# Fit the broad and narrow lines of one spectrum (two Lorentzians on a linear baseline), compare
# with a single line, and draw the fit with its residuals. Run from the repository root after
# scripts/setup; writes into out/examples/ (or $OUT).
set -euo pipefail
cs=${COLLSHIFT:-$(command -v collshift || echo build/collshift)}
out=${OUT:-out/examples}
mkdir -p "$out"
"$cs" fit spectra/synthetic_broad_narrow_spectrum.csv --model lorentz+lorentz --baseline linear \
  --compare lorentz --json "$out/fit.json" --table "$out/fit.csv" --plot "$out/fit.png"
echo "wrote $out/fit.json, $out/fit.csv and $out/fit.png"
