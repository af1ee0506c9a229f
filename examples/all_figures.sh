#!/usr/bin/env bash
# Every kind of figure from the command line: a spectrum with its fitted lines and residuals, a
# burst envelope and a spectrogram with the gates, shift and FWHM against density (PNG and PDF).
# Run from the repository root after scripts/setup; writes into out/examples/figures/ (or $OUT).
set -euo pipefail
cs=${COLLSHIFT:-$(command -v collshift || echo build/collshift)}
out=${OUT:-out/examples}/figures
mkdir -p "$out"
"$cs" fit spectra/synthetic_broad_narrow_spectrum.csv --model lorentz+lorentz --plot "$out/spectrum_fit.png" >/dev/null
"$cs" gate spectra/synthetic_burst_record.csv --plot-envelope "$out/envelope.png" \
  --plot-spectrogram "$out/spectrogram.png" >/dev/null
"$cs" split spectra/synthetic_burst_record.csv --plot "$out/split_envelope.png" >/dev/null
for ext in png pdf; do
  "$cs" series spectra/campaign/spectra/manifest.csv --line rb87-d2 \
    --plot-shift "$out/shift_vs_density.$ext" --plot-fwhm "$out/fwhm_vs_density.$ext" >/dev/null
done
ls -1 "$out"
