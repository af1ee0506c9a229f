#!/usr/bin/env bash
# Figures from the command line: fit --plot, gate --plot-envelope/--plot-spectrogram, split --plot,
# series --plot-shift/--plot-fwhm; PNG, SVG and PDF by extension; an unknown extension exits 3 and
# the JSON is still written.
. "$(dirname "$0")/lib.bash"
S=$CS_SOURCE_DIR/spectra

# expect_fig FILE MAGIC: exists, larger than 2 kB, starts with MAGIC (png, pdf or svg)
expect_fig() {
  local f=$1 kind=$2
  if [ ! -f "$f" ]; then bad "$f not written"; return; fi
  local size; size=$(wc -c <"$f")
  if [ "$size" -gt 2048 ]; then ok; else bad "$f: only $size bytes"; fi
  case $kind in
    png) if [ "$(head -c 4 "$f" | od -An -tx1 | tr -d ' \n')" = 89504e47 ]; then ok; else bad "$f: not a PNG"; fi ;;
    pdf) if [ "$(head -c 4 "$f")" = "%PDF" ]; then ok; else bad "$f: not a PDF"; fi ;;
    svg) if head -c 200 "$f" | grep -qE '^(<\?xml|<svg)'; then ok; else bad "$f: not an SVG"; fi ;;
  esac
}

# fit --plot
expect_code 0 "$CS_BIN" fit "$S/synthetic_broad_narrow_spectrum.csv" --model voigt+lorentz --quiet \
  --plot "$TMP/fit.png" --json "$TMP/fit.json"
expect_fig "$TMP/fit.png" png
expect_in "$TMP/fit.json" '"figures"'
expect_in "$TMP/fit.json" "$TMP/fit.png"
# several spectra: the stem goes before the extension
cp "$S/synthetic_broad_narrow_spectrum.csv" "$TMP/copy_b.csv"
expect_code 0 "$CS_BIN" fit "$S/synthetic_broad_narrow_spectrum.csv" "$TMP/copy_b.csv" --model voigt+lorentz \
  --quiet --plot "$TMP/many.svg"
expect_fig "$TMP/many_synthetic_broad_narrow_spectrum.svg" svg
expect_fig "$TMP/many_copy_b.svg" svg

# gate --plot-envelope --plot-spectrogram (spectrogram computed without --spectrogram)
expect_code 0 "$CS_BIN" gate "$S/synthetic_burst_record.csv" --quiet --plot-envelope "$TMP/env.png" \
  --plot-spectrogram "$TMP/sg.svg" --json "$TMP/gate.json"
expect_fig "$TMP/env.png" png
expect_fig "$TMP/sg.svg" svg
expect_in "$TMP/gate.json" "$TMP/sg.svg"

# split --plot
expect_code 0 "$CS_BIN" split "$S/synthetic_burst_record.csv" --quiet --plot "$TMP/split.pdf" --json "$TMP/split.json"
expect_fig "$TMP/split.pdf" pdf
expect_in "$TMP/split.json" "$TMP/split.pdf"

# series --plot-shift --plot-fwhm: FILE for the tail era, FILE_burst for the burst era
expect_code 0 "$CS_BIN" series "$S/campaign/spectra/manifest.csv" --line rb87-d2 --quiet \
  --plot-shift "$TMP/shift.png" --plot-fwhm "$TMP/fwhm.pdf" --json "$TMP/series.json"
expect_fig "$TMP/shift.png" png
expect_fig "$TMP/shift_burst.png" png
expect_fig "$TMP/fwhm.pdf" pdf
expect_fig "$TMP/fwhm_burst.pdf" pdf
expect_in "$TMP/series.json" "$TMP/fwhm_burst.pdf"

# an unknown extension: exit 3, message names the file, the JSON is still written
expect_code 3 "$CS_BIN" fit "$S/synthetic_broad_narrow_spectrum.csv" --model voigt+lorentz --quiet \
  --plot "$TMP/fit.bmp" --json "$TMP/bad.json"
expect_in "$TMP/err" "'$TMP/fit.bmp'"
if [ -s "$TMP/bad.json" ] && [ ! -e "$TMP/fit.bmp" ]; then ok; else bad "JSON missing or fit.bmp written"; fi
expect_code 3 "$CS_BIN" gate "$S/synthetic_burst_record.csv" --quiet --plot-envelope "$TMP/env.xyz" \
  --json "$TMP/bad_gate.json"
if [ -s "$TMP/bad_gate.json" ]; then ok; else bad "gate JSON missing after a failed figure"; fi
expect_code 3 "$CS_BIN" series "$S/campaign/spectra/manifest.csv" --quiet --plot-fwhm "$TMP/f.tiff" \
  --json "$TMP/bad_series.json"
if [ -s "$TMP/bad_series.json" ]; then ok; else bad "series JSON missing after a failed figure"; fi

# the options are in the usage texts
for c in "fit --plot" "gate --plot-envelope" "gate --plot-spectrogram" "split --plot" \
         "series --plot-shift" "series --plot-fwhm"; do
  set -- $c
  "$CS_BIN" "$1" --help >"$TMP/help" 2>&1
  expect_in "$TMP/help" "$2 FILE"
done
finish
