#!/usr/bin/env bash
# End-to-end: `collshift gate` on the bundled synthetic record and on the same record as raw binary
# and .npy: burst detection, automatic and explicit gates, gated spectra on disk, JSON, exit codes.
. "$(dirname "$0")/lib.bash"
R="$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv"

expect_code 2 "$CS_BIN" gate;                                   expect_in "$TMP/err" "no record given"
expect_code 2 "$CS_BIN" gate "$R" --gate "early=peak-2w";       expect_in "$TMP/err" "--gate 'early=peak-2w'"
expect_code 2 "$CS_BIN" gate "$R" --window hanning2;            expect_in "$TMP/err" "unknown window 'hanning2'"
expect_code 3 "$CS_BIN" gate "$CS_SOURCE_DIR/spectra/synthetic_broad_narrow_spectrum.csv"
expect_in "$TMP/err" "not a time record"

# automatic gates. The record's true values are in its metadata (scripts/make_demo_files.py):
# a sech burst of amplitude time constant 40 ns at 1 us, i.e. an intensity sech^2 of FWHM
# 2 ln(1+sqrt 2) x 40 ns = 70.5 ns (handbook: sech^2(x) = 1/2 at x = ln(1+sqrt 2)), offset +70 MHz
# from the LO; then a tail at +205 MHz whose intensity decays at 2 pi x 1.5 MHz = 9.42e6 s^-1.
expect_code 0 "$CS_BIN" gate "$R" --out "$TMP/g" --json "$TMP/g.json" --spectrogram "$TMP/sg.csv"
expect_in "$TMP/out" "burst: peak at"
python3 - "$TMP/g.json" "$TMP" <<'PY' && ok || bad "gate JSON content"
import json, math, sys
f = json.load(open(sys.argv[1]))["files"][0]
b = f["burst_detect"]
assert b["found"] and abs(b["peak_time_s"] - 1.0e-6) < 5e-9, b
assert abs(b["fwhm_s"] - 2 * math.log(1 + math.sqrt(2)) * 40e-9) < 0.1 * 70.5e-9, b["fwhm_s"]
assert b["onset_s"] < b["peak_time_s"] < b["end_s"] <= b["tail_start_s"]
rate = f["decay"]["exp_fit"]["rate_per_s"]; err = f["decay"]["exp_fit"]["rate_per_s_err"]
assert abs(rate - 2 * math.pi * 1.5e6) < 5 * err, (rate, err)
lo = f["lo_hz"]
g = {x["name"]: x for x in f["gates"]}
assert set(g) == {"early", "late"} and g["early"]["psd_convention"] == "two-sided"
assert abs(g["early"]["peak_hz"] - lo - 70e6) < 2 * g["early"]["df_hz"] + 1e5, g["early"]["peak_hz"] - lo
assert abs(g["late"]["peak_hz"] - lo - 205e6) < 2 * g["late"]["df_hz"] + 1e5, g["late"]["peak_hz"] - lo
for name in ("early", "late"):
    rows = [l for l in open(g[name]["output"]) if not l.startswith("#")]
    assert rows[0].strip() == "frequency_hz,psd" and len(rows) - 1 == g[name]["nfft"]
head = [l for l in open(sys.argv[2] + "/sg.csv") if not l.startswith("#")][0].strip()
assert head == "time_s,frequency_hz,psd", head
PY

# gate-aware fit of the tail through a Hann gate: unbiased by the window (true values above)
expect_code 0 "$CS_BIN" gate "$R" --gate "late=1.5us:6us:hann" --fit decay --json "$TMP/gf.json"
python3 - "$TMP/gf.json" <<'PY' && ok || bad "gate-aware decay fit"
import json, sys
f = json.load(open(sys.argv[1]))["files"][0]
fit = f["gates"][0]["fit"]; c = fit["components"][0]
assert fit["status"] == "converged" and c["profile"] == "decay", fit
assert abs(c["center_hz"] - f["lo_hz"] - 205e6) < 5 * c["center_hz_err"], c
assert abs(c["fwhm_hz"] - 1.5e6) < 5 * c["fwhm_hz_err"], c
PY
expect_code 2 "$CS_BIN" gate "$R" --fit decay+lorentz;          expect_in "$TMP/err" "cannot be mixed"

# the same record as raw interleaved float64 I/Q and as complex128 .npy
python3 - "$R" "$TMP/r.cf64" "$TMP/r.npy" <<'PY'
import struct, sys
rows = [l.strip().split(",") for l in open(sys.argv[1]) if l[0].isdigit()]
data = b"".join(struct.pack("<2d", float(r[1]), float(r[2])) for r in rows)
open(sys.argv[2], "wb").write(data)
hdr = "{'descr': '<c16', 'fortran_order': False, 'shape': (%d,), }" % len(rows)
hdr += " " * ((64 - (10 + len(hdr) + 1) % 64) % 64) + "\n"
open(sys.argv[3], "wb").write(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(hdr)) + hdr.encode() + data)
PY
expect_code 0 "$CS_BIN" gate "$TMP/r.cf64" --raw cf64 --sample-rate 500MHz --gate "late=1.5us:2us:rect" --json "$TMP/raw.json"
expect_code 0 "$CS_BIN" gate "$TMP/r.npy" --sample-rate 500MHz --gate "late=1.5us:2us:rect" --json "$TMP/npy.json"
python3 - "$TMP/raw.json" "$TMP/npy.json" <<'PY' && ok || bad "raw/npy gated peak"
import json, sys
for p in sys.argv[1:]:
    g = json.load(open(p))["files"][0]["gates"][0]
    assert abs(g["peak_hz"] - 205e6) < 2 * g["df_hz"], (p, g["peak_hz"])   # no LO given: offset axis
PY
finish
