#!/usr/bin/env bash
# End-to-end: `collshift fit` on the bundled synthetic spectrum and on files of every loader format.
. "$(dirname "$0")/lib.bash"
S="$CS_SOURCE_DIR/spectra/synthetic_broad_narrow_spectrum.csv"

# usage errors (exit 2)
expect_code 2 "$CS_BIN" fit "$S";                               expect_in "$TMP/err" "--model is required"
expect_code 2 "$CS_BIN" fit "$S" --model voight;                expect_in "$TMP/err" "unknown profile 'voight'"
expect_code 2 "$CS_BIN" fit "$S" --model lorentz --fix 3.center=1GHz; expect_in "$TMP/err" "3.center"
expect_code 2 "$CS_BIN" fit "$S" --model lorentz --baseline wavy; expect_in "$TMP/err" "--baseline 'wavy'"
expect_code 2 "$CS_BIN" fit "$S" --model lorentz --range 5GHz:1GHz; expect_in "$TMP/err" "--range"

# the synthetic spectrum: broad + narrow Lorentzian on a linear baseline, sigma column given.
# True values are in the file's metadata (written by scripts/make_demo_files.py).
expect_code 0 "$CS_BIN" fit "$S" --model lorentz+lorentz --json "$TMP/f.json" --table "$TMP/f.csv" --residuals "$TMP/r.csv"
expect_in "$TMP/out" "status: converged"
expect_in "$TMP/out" "errors not scaled"
python3 - "$TMP/f.json" "$TMP/f.csv" "$S" <<'PY' && ok || bad "fit JSON/CSV content"
import csv, json, re, sys
d = json.load(open(sys.argv[1]))["fits"][0]
meta = {}
for line in open(sys.argv[3]):
    m = re.match(r"#\s*(\w+)\s*=\s*([-+]?[0-9][-+0-9.eE]*)", line)
    if m: meta[m.group(1)] = float(m.group(2))
assert d["status"] == "converged" and d["errors_scaled"] is False
assert 0.7 < d["redchi2"] < 1.3, d["redchi2"]          # sigma given = true noise: chi2/dof ~ 1
comps = sorted(d["components"], key=lambda c: c["fwhm_hz"])
narrow, broad = comps
truth = {"narrow": (meta["true_narrow_center"] * 1e6, meta["true_narrow_fwhm"] * 1e6),
         "broad": (meta["true_broad_center"] * 1e6, meta["true_broad_fwhm"] * 1e6)}
for name, c in (("narrow", narrow), ("broad", broad)):
    tc, tw = truth[name]
    assert abs(c["center_hz"] - tc) < 5 * c["center_hz_err"], (name, c["center_hz"], tc, c["center_hz_err"])
    assert abs(c["fwhm_hz"] - tw) < 5 * c["fwhm_hz_err"], (name, c["fwhm_hz"], tw, c["fwhm_hz_err"])
    assert c["center_hz_err"] > 0 and c["fwhm_hz_err"] > 0 and c["area_err"] > 0
    assert "shift_hz" in c      # the file has '# reference = ...'
rows = list(csv.DictReader(open(sys.argv[2])))
assert len(rows) == 2 and {"center_hz", "center_hz_err", "fwhm_hz", "fwhm_hz_err", "area", "area_err"} <= set(rows[0])
PY
expect_in "$TMP/r.csv" "file,frequency_hz,data,model,residual"

# a Voigt reports its total FWHM and both widths; --compare gives BIC and an F-test
expect_code 0 "$CS_BIN" fit "$S" --model voigt+lorentz --compare lorentz+lorentz --json "$TMP/v.json"
python3 - "$TMP/v.json" <<'PY' && ok || bad "voigt/compare JSON"
import json, sys
d = json.load(open(sys.argv[1]))["fits"][0]
v = d["components"][0]
assert v["profile"] == "voigt" and "fwhm_g_hz" in v and "fwhm_l_hz" in v and "fwhm_ol_hz" in v
assert len(d["comparison"]) == 2 and "delta_bic" in d["comparison"][1]
PY

# --range and --exclude leave points out: the JSON says how many were used
expect_code 0 "$CS_BIN" fit "$S" --model lorentz+lorentz --range 384229.5GHz:384231.5GHz \
  --exclude 384230.6GHz:384230.7GHz --json "$TMP/rg.json"
python3 - "$TMP/rg.json" "$S" <<'PY' && ok || bad "range/exclude point count"
import json, sys
d = json.load(open(sys.argv[1]))["fits"][0]
xs = [float(l.split(",")[0]) for l in open(sys.argv[2]) if l[0].isdigit()]
want = sum(1 for x in xs if 384229.5 <= x <= 384231.5 and not (384230.6 <= x <= 384230.7))
assert d["n"] == want, (d["n"], want)
PY

# a fit that cannot converge in one iteration: exit 1, and the status says so
expect_code 1 "$CS_BIN" fit "$S" --model lorentz+lorentz --max-iter 1 --json "$TMP/n.json"
python3 -c "import json,sys; d=json.load(open(sys.argv[1]))['fits'][0]; assert d['status'] != 'converged', d['status']" "$TMP/n.json" && ok || bad "not-converged status"

# the same spectrum as .npy (N x 3 float64: frequency, y, sigma) read with --kind spectrum
python3 - "$S" "$TMP/s.npy" <<'PY'
import struct, sys
rows = [l.strip().split(",") for l in open(sys.argv[1]) if l[0].isdigit()]
hdr = "{'descr': '<f8', 'fortran_order': False, 'shape': (%d, 3), }" % len(rows)
hdr += " " * ((64 - (10 + len(hdr) + 1) % 64) % 64) + "\n"
with open(sys.argv[2], "wb") as f:
    f.write(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(hdr)) + hdr.encode())
    for r in rows:
        f.write(struct.pack("<3d", float(r[0]) * 1e9, float(r[1]), float(r[2])))
PY
expect_code 0 "$CS_BIN" fit "$TMP/s.npy" --kind spectrum --model lorentz+lorentz --weights sigma
expect_in "$TMP/out" "status: converged"

# a time record is refused with a pointer to the command that makes spectra
expect_code 3 "$CS_BIN" fit "$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv" --model lorentz
expect_in "$TMP/err" "time record"

finish
