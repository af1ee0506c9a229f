#!/usr/bin/env bash
# Split one time record into its burst era and tail era: automatic gates, gate-aware fits of both
# lines, their collective shift and the cross-checks; draws the envelope with the gates.
# Run from the repository root after scripts/setup; writes into out/examples/ (or $OUT).
set -euo pipefail
cs=${COLLSHIFT:-$(command -v collshift || echo build/collshift)}
out=${OUT:-out/examples}
mkdir -p "$out"
"$cs" split spectra/synthetic_burst_record.csv --json "$out/split.json" --table "$out/split.csv" \
  --plot "$out/split_envelope.png"
echo "wrote $out/split.json, $out/split.csv and $out/split_envelope.png"
