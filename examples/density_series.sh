#!/usr/bin/env bash
# Analyse the bundled demo campaign of time records at five densities: every record split into
# its eras, straight lines of shift and FWHM against density, and the slopes beside the estimates
# for the Rb D2 line. Run from the repository root after scripts/setup; writes into out/examples/.
set -euo pipefail
cs=${COLLSHIFT:-$(command -v collshift || echo build/collshift)}
out=${OUT:-out/examples}
mkdir -p "$out"
"$cs" series spectra/campaign/records/manifest.csv --line rb87-d2 \
  --json "$out/series.json" --table "$out/series.csv"
echo "wrote $out/series.json and $out/series.csv"
