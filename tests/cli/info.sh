#!/usr/bin/env bash
# End-to-end: `collshift info`, help, version, exit codes and error messages of the binary.
. "$(dirname "$0")/lib.bash"
S="$CS_SOURCE_DIR/spectra"

# help and version (exit 0); the README lists exactly the commands --help lists
expect_code 0 "$CS_BIN" --help;            expect_in "$TMP/out" "Exit codes:"
expect_code 0 "$CS_BIN" --version;         expect_in "$TMP/out" "collshift "
expect_code 0 "$CS_BIN" help info;         expect_in "$TMP/out" "usage: collshift info"
expect_code 0 "$CS_BIN" info --help;       expect_in "$TMP/out" "--sample-rate FREQ"
"$CS_BIN" --help | sed -n '/^Commands:/,/^$/p' | grep '^  [a-z]' >"$TMP/cmds"
[ -s "$TMP/cmds" ] && ok || bad "no command lines in --help"
while IFS= read -r line; do expect_in "$CS_SOURCE_DIR/README.md" "$line"; done <"$TMP/cmds"

# usage errors (exit 2)
expect_code 2 "$CS_BIN"
expect_code 2 "$CS_BIN" frobnicate;        expect_in "$TMP/err" "collshift: 'frobnicate' is not a command"
expect_code 2 "$CS_BIN" info;              expect_in "$TMP/err" "no file given"
expect_code 2 "$CS_BIN" info --bogus x;    expect_in "$TMP/err" "unknown option"
expect_code 2 "$CS_BIN" info --raw q12 x;  expect_in "$TMP/err" "--raw 'q12'"
expect_code 2 "$CS_BIN" info --sample-rate 5parsecs x; expect_in "$TMP/err" "--sample-rate '5parsecs'"

# the bundled synthetic spectrum: axis in GHz, 1201 points, metadata kept
expect_code 0 "$CS_BIN" info "$S/synthetic_broad_narrow_spectrum.csv" --json "$TMP/s.json"
expect_in "$TMP/out" "kind: spectrum"
expect_in "$TMP/out" "points: 1201"
expect_in "$TMP/out" "density"
python3 - "$TMP/s.json" <<'PY' && ok || bad "spectrum JSON content"
import json, sys
d = json.load(open(sys.argv[1]))
f = d["files"][0]; s = f["spectrum"]
assert f["kind"] == "spectrum" and s["n"] == 1201, f
# first row of the file: 384228.9844685000 GHz; last: 384231.9844685000 GHz
assert abs(s["freq_min_hz"] - 384228.9844685e9) < 1.0, s["freq_min_hz"]
assert abs(s["freq_max_hz"] - 384231.9844685e9) < 1.0, s["freq_max_hz"]
assert abs(s["step_hz"] - 2.5e6) < 1.0, s["step_hz"]
assert s["uniform"] and s["has_sigma"] and s["x_unit"].lower() == "ghz"
# 3.0e14 cm^-3 = 3.0e20 m^-3 (1 cm^-3 = 1e6 m^-3)
assert abs(s["metadata"]["density"]["si"] - 3.0e20) < 1e6
# robust noise of the synthetic data, generated with sigma 2.0: within 25 %
assert 1.5 < s["noise"] < 2.5, s["noise"]
PY

# the bundled synthetic record: complex I/Q, 8192 samples at 500 MHz
expect_code 0 "$CS_BIN" info "$S/synthetic_burst_record.csv" --json "$TMP/r.json"
expect_in "$TMP/out" "kind: record"
expect_in "$TMP/out" "8192 complex"
python3 - "$TMP/r.json" <<'PY' && ok || bad "record JSON content"
import json, sys
r = json.load(open(sys.argv[1]))["files"][0]["records"][0]
assert r["complex"] and r["n"] == 8192
assert abs(r["sample_rate_hz"] - 500e6) / 500e6 < 1e-6, r["sample_rate_hz"]
assert abs(r["dt_s"] - 2e-9) < 1e-15
PY

# JSON to stdout with '-'
expect_code 0 "$CS_BIN" info "$S/synthetic_broad_narrow_spectrum.csv" --json -
expect_in "$TMP/out" '"command": "info"'

# data errors (exit 3) name the file and the line, and other files are still described
printf 'frequency_hz,y\n1,2\n2,3,4\n3,4\n' >"$TMP/ragged.csv"
expect_code 3 "$CS_BIN" info "$TMP/ragged.csv" "$S/synthetic_broad_narrow_spectrum.csv"
expect_in "$TMP/err" "collshift: '$TMP/ragged.csv': line 3:"
expect_in "$TMP/out" "points: 1201"
: >"$TMP/empty.csv"
expect_code 3 "$CS_BIN" info "$TMP/empty.csv";  expect_in "$TMP/err" "$TMP/empty.csv"
expect_code 3 "$CS_BIN" info "$TMP/does-not-exist.csv"; expect_in "$TMP/err" "does-not-exist.csv"
printf '\x01\x02\x03' >"$TMP/odd.bin"
expect_code 3 "$CS_BIN" info --raw i16 --sample-rate 1MHz "$TMP/odd.bin"; expect_in "$TMP/err" "byte"

# a file name with spaces and unicode
cp "$S/synthetic_broad_narrow_spectrum.csv" "$TMP/cell B ü.csv"
expect_code 0 "$CS_BIN" info "$TMP/cell B ü.csv"; expect_in "$TMP/out" "cell B ü.csv"

finish
