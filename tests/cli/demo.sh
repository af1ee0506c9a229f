#!/usr/bin/env bash
# `collshift demo`: the whole chain on the bundled data into a folder (report, tables, figures),
# the recovered campaign slopes against truth, the refusal to write into a used folder, and a
# smoke test of every script in examples/.
. "$(dirname "$0")/lib.bash"
export COLLSHIFT_DATA="$CS_SOURCE_DIR/spectra"

expect_code 0 "$CS_BIN" demo --out "$TMP/demo"
cp "$TMP/out" "$TMP/demo.out"
expect_in "$TMP/demo.out" "data from $CS_SOURCE_DIR/spectra (\$COLLSHIFT_DATA)"
expect_in "$TMP/demo.out" "report: $TMP/demo/report.md"
for f in report.md report.json tables/fit_parameters.csv tables/split_eras.csv tables/series_records.csv \
         tables/series_spectra.csv tables/slopes_vs_truth.csv tables/predictions.csv; do
  if [ -s "$TMP/demo/$f" ]; then ok; else bad "demo did not write $f"; fi
done
# every stage is in both the Markdown and the JSON
for stage in "Inputs" "Files" "Spectrum fit" "Model comparison" "Burst and tail eras" "Gates" \
             "Density series: records" "Density series: spectra" "Recovered slopes against the true values" \
             "Predictions" "Figures" "SHA-256"; do
  expect_in "$TMP/demo/report.md" "$stage"
done
for stage in '"inputs"' '"sha256"' "Spectrum fit" "Burst and tail eras" "Density series: records" \
             "Density series: spectra" "Predictions" "Figures"; do
  expect_in "$TMP/demo/report.json" "$stage"
done
# every figure exists and is a PNG (or, for the density plots' PDF copies, a PDF)
figs="fit_spectrum burst_envelope burst_spectrogram"
for k in records spectra; do for e in burst tail; do for q in shift fwhm; do figs="$figs ${k}_${e}_${q}"; done; done; done
for f in $figs; do
  p="$TMP/demo/figures/$f.png"
  if [ "$(head -c 8 "$p" 2>/dev/null | od -An -tx1 | tr -d ' \n')" = 89504e470d0a1a0a ]; then ok; else bad "$p is not a PNG"; fi
  expect_in "$TMP/demo/report.md" "figures/$f.png"
done
for f in $figs; do
  case "$f" in records_*|spectra_*)
    if [ "$(head -c 5 "$TMP/demo/figures/$f.pdf" 2>/dev/null)" = "%PDF-" ]; then ok; else bad "$f.pdf is not a PDF"; fi ;;
  esac
done
# the recovered slopes of both campaigns within 2 standard errors of the truth (from the report);
# issue 7 asks for 2 (spectra/README.md says how the campaign's seeds relate to that)
python3 - "$TMP/demo/report.json" <<'PY' && ok || bad "demo slopes against truth"
import json, sys
rep = json.load(open(sys.argv[1]))
rows = [r for s in rep["sections"] for it in s["items"]
        if it["type"] == "table" and (it["caption"] or "").startswith("Recovered slopes") for r in it["rows"]]
assert len(rows) == 8, rows
for r in rows:
    z = float(r[5])
    print(r)
    assert abs(z) < 2, r
assert len(rep["inputs"]) >= 20 and all(len(i["sha256"]) == 64 for i in rep["inputs"])
PY
# a used folder is refused without --force, accepted with it
expect_code 3 "$CS_BIN" demo --out "$TMP/demo"
expect_in "$TMP/err" "not empty"
expect_code 0 "$CS_BIN" demo --out "$TMP/demo" --force
# a file in the way
: >"$TMP/afile"
expect_code 3 "$CS_BIN" demo --out "$TMP/afile"
expect_code 2 "$CS_BIN" demo --bogus

# examples/: each script runs with the built binary on PATH
for s in "$CS_SOURCE_DIR"/examples/*.sh; do
  (cd "$CS_SOURCE_DIR" && PATH="$(dirname "$CS_BIN"):$PATH" OUT="$TMP/examples" bash "$s") >"$TMP/ex.out" 2>&1 \
    && ok || bad "example $(basename "$s") failed: $(tail -c 400 "$TMP/ex.out")"
done
finish
