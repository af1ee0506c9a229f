#!/usr/bin/env bash
# Theoretical estimates for the Rb D2 line in a 150 nm layer at 1.1e14 cm^-3: Lorentz-Lorenz and
# cooperative Lamb shifts, self-broadening, optical depth; then the vapour density of a 180 degC
# cell. Run from the repository root after scripts/setup; writes into out/examples/ (or $OUT).
set -euo pipefail
cs=${COLLSHIFT:-$(command -v collshift || echo build/collshift)}
out=${OUT:-out/examples}
mkdir -p "$out"
"$cs" predict --line rb87-d2 --density 1.1e14cm^-3 --thickness 150nm --json "$out/predict.json"
"$cs" predict --line rb87-d2 --temperature 180degC --thickness 150nm
echo "wrote $out/predict.json"
