#!/usr/bin/env bash
# End-to-end: `collshift split` on the bundled synthetic record (and the same record as raw binary
# and as a two-shot .npy): both eras' lines against the true values in the record's metadata, the
# JSON of the stable interface, the CSV tables, the gate sweep, shots, exit codes.
. "$(dirname "$0")/lib.bash"
R="$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv"
S="$CS_SOURCE_DIR/spectra/synthetic_broad_narrow_spectrum.csv"

# usage errors: exit 2
expect_code 2 "$CS_BIN" split;                                  expect_in "$TMP/err" "no record given"
expect_code 2 "$CS_BIN" split "$R" --gate "middle=1us:2us";     expect_in "$TMP/err" "expected early="
expect_code 2 "$CS_BIN" split "$R" --gate "early=peak-2w";      expect_in "$TMP/err" "--gate 'early=peak-2w'"
expect_code 2 "$CS_BIN" split "$R" --tail-model "decay+lorentz"; expect_in "$TMP/err" "--tail-model 'decay+lorentz'"
expect_code 2 "$CS_BIN" split "$R" --sweep "late-start=1w:6w";  expect_in "$TMP/err" "expected FROM:TO:N"
expect_code 2 "$CS_BIN" split "$R" --whole-block 0;             expect_in "$TMP/err" "--whole-block '0'"
expect_code 2 "$CS_BIN" split "$R" --whole-block 2x;            expect_in "$TMP/err" "expected auto or a whole number"
expect_code 2 "$CS_BIN" split "$R" --pad 0;                     expect_in "$TMP/err" "--pad '0'"
expect_code 2 "$CS_BIN" split "$R" --noise loud;                expect_in "$TMP/err" "--noise 'loud'"
expect_code 2 "$CS_BIN" split "$R" --sweep-table "$TMP/x.csv";  expect_in "$TMP/err" "needs --sweep"
expect_code 2 "$CS_BIN" split "$R" --bogus;                     expect_in "$TMP/err" "unknown option '--bogus'"
# data errors: exit 3
expect_code 3 "$CS_BIN" split "$S";                             expect_in "$TMP/err" "not a time record"
expect_code 3 "$CS_BIN" split "$TMP/missing.csv"

# the demo record. Its true values are in its metadata (scripts/make_demo_files.py): a sech burst
# of time constant 40 ns at LO + 70 MHz and a tail at LO + 205 MHz whose intensity decays at
# 2 pi x 1.5 MHz (a Lorentzian of FWHM 1.5 MHz). Handbook: sech(t/tau) transforms to
# pi tau sech(pi^2 tau nu), so the burst's power spectrum has FWHM 2 ln(1 + sqrt 2)/(pi^2 tau).
expect_code 0 "$CS_BIN" split "$R" --json "$TMP/s.json" --table "$TMP/s.csv" \
    --sweep "late-start=1w:4w:4,early-width=2w:6w:5" --sweep-table "$TMP/sw.csv"
expect_in "$TMP/out" "burst era: gate early"
expect_in "$TMP/out" "(gate-aware fit)"
expect_in "$TMP/out" "era shift (burst - tail)"
expect_in "$TMP/out" "errors added in quadrature"
expect_in "$TMP/out" "gate sweep"
python3 - "$TMP/s.json" "$R" <<'PY' && ok || bad "split JSON content"
import json, math, re, sys
d = json.load(open(sys.argv[1]))
meta = {}
for line in open(sys.argv[2]):
    m = re.match(r"#\s*(\w+)\s*=\s*([-+0-9.eE]+)\s*(\w*)", line)
    if m:
        meta[m.group(1)] = (float(m.group(2)), m.group(3))
scale = {"GHz": 1e9, "MHz": 1e6, "ns": 1e-9}
val = lambda k: meta[k][0] * scale[meta[k][1]]
lo, ref = val("lo"), val("reference")
b, t = d["burst"], d["tail"]
for era in (b, t):
    for k in ("center_hz", "center_hz_err", "fwhm_hz", "fwhm_hz_err", "area", "area_err", "fit",
              "shift_hz", "shift_hz_err"):
        assert k in era and era[k] is not None, k
for k in ("era_shift_hz", "era_shift_hz_err", "gates", "burst_detect"):
    assert k in d, k
def within(x, e, truth, k=5):
    assert abs(x - truth) <= k * e, (x, e, truth, (x - truth) / e)
within(b["center_hz"], b["center_hz_err"], lo + val("true_burst_offset"))
within(t["center_hz"], t["center_hz_err"], lo + val("true_tail_offset"))
within(t["fwhm_hz"], t["fwhm_hz_err"], val("true_tail_fwhm"))
within(b["fwhm_hz"], b["fwhm_hz_err"], 2 * math.log(1 + math.sqrt(2)) / (math.pi ** 2 * val("true_burst_tau")))
# shifts: centre - reference; era shift burst - tail with errors in quadrature
assert abs(b["shift_hz"] - (b["center_hz"] - ref)) < 1.0 and abs(t["shift_hz"] - (t["center_hz"] - ref)) < 1.0
assert abs(d["era_shift_hz"] - (b["center_hz"] - t["center_hz"])) < 1.0
assert abs(d["era_shift_hz_err"] - math.hypot(b["center_hz_err"], t["center_hz_err"])) < 1e-6 * d["era_shift_hz_err"]
within(d["era_shift_hz"], d["era_shift_hz_err"], val("true_burst_offset") - val("true_tail_offset"))
# every choice that shaped the answer
s = d["settings"]
for k in ("gate_early", "gate_late", "early_window", "late_window", "whole_window", "pad", "burst_model",
          "tail_model", "whole_model", "whole_block", "baseline", "noise", "sweep", "agree_nsigma"):
    assert k in s, k
assert s["late_window"] == "rect" and s["pad"] == 2 and s["burst_model"] == "burst" and s["tail_model"] == "decay"
g = {x["era"]: x for x in d["gates"]}
assert g["burst"]["spec"] == "early=peak-2w:4w:hann" and g["tail"]["spec"] == "late=end+3w:rest:rect"
assert g["tail"]["window"] == "rect" and g["burst"]["start_s"] < g["tail"]["start_s"]
assert b["method"] == "gate-aware" and b["fit"]["method"] == "gate-aware" and "fit_range" in b["fit"]
assert d["burst_detect"]["found"]
sh = d["shots"][0]
assert abs(sh["lo_hz"] - lo) < 1 and abs(sh["reference_hz"] - ref) < 1 and sh["reference_from"] == "metadata"
assert sh["whole_record"]["fit"]["model"] == "sech2+lorentz"
fr = sh["whole_record"]["fit"]["fit_range"]
assert s["whole_block"] == "auto" and fr["block_bins"] >= 2, fr
# the automatic blocks are at most 1/12 of the narrowest fitted line
narrow = min(c["fwhm_hz"] for c in sh["whole_record"]["fit"]["components"])
assert narrow >= 12 * fr["block_hz"] * (1 - 1e-9), (narrow, fr)
assert abs(fr["block_hz"] - fr["block_bins"] * fr["df_hz"]) <= 1e-9 * fr["block_hz"]
assert set(sh["agreement"]["tail"]) >= {"whole_record", "pencil"}
for e in ("burst", "tail"):
    z = sh["agreement"][e]["whole_record"]
    assert z["z_center"] is not None and z["z_center"] < 3, (e, z)
sw = sh["sweep"]
assert len(sw["rows"]) == 9 and sum(r["step"] == "late_start" for r in sw["rows"]) == 4
PY
python3 - "$TMP/s.csv" "$TMP/sw.csv" <<'PY' && ok || bad "split CSV tables"
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1])))
assert [r["era"] for r in rows] == ["burst", "tail"], rows
need = ["file", "shot", "era", "status", "center_hz", "center_hz_err", "fwhm_hz", "fwhm_hz_err", "area", "area_err",
        "shift_hz", "shift_hz_err", "era_shift_hz", "era_shift_hz_err", "z_whole_center", "z_pencil_fwhm"]
for c in need:
    assert c in rows[0], c
assert all(r["status"] == "ok" and float(r["center_hz_err"]) > 0 for r in rows)
sw = list(csv.DictReader(open(sys.argv[2])))
assert len(sw) == 9 and sw[0]["step"] == "late_start" and sw[-1]["step"] == "early_width", [r["step"] for r in sw]
for c in ("value", "value_unit", "gate_start_s", "center_hz", "center_hz_err", "fwhm_hz", "fwhm_hz_err",
          "dev_center_sigma", "dev_fwhm_sigma"):
    assert c in sw[0], c
assert sw[0]["value_unit"] == "w"
PY

# JSON to standard output, and an explicit reference and gates
expect_code 0 "$CS_BIN" split "$R" --quiet --json - --ref 384230.4844685GHz --gate "late=1.6us:rest:rect" \
    --gate "early=peak-1.5w:3w" --whole-model none --no-pencil
python3 - "$TMP/out" <<'PY' && ok || bad "split explicit gates"
import json, sys
d = json.load(open(sys.argv[1]))
g = {x["era"]: x for x in d["gates"]}
assert g["tail"]["spec"] == "late=1.6us:rest:rect" and abs(g["tail"]["start_s"] - 1.6e-6) < 1e-12
assert g["burst"]["spec"] == "early=peak-1.5w:3w" and g["burst"]["window"] == "hann"
assert d["settings"]["ref_hz"] == 384230.4844685e9 and d["settings"]["whole_model"] == "none"
assert "pencil" not in d["shots"][0]["agreement"]["tail"] or d["settings"]["pencil"] is False
PY

# the record as two shots: raw interleaved float64 I/Q, and a 2-D .npy (shots x samples) where the
# second shot is the first with its noise sign-flipped (same lines, different noise)
python3 - "$R" "$TMP/r.cf64" "$TMP/r2.npy" <<'PY'
import struct, sys
rows = [l.strip().split(",") for l in open(sys.argv[1]) if l[0].isdigit()]
iq = [(float(r[1]), float(r[2])) for r in rows]
open(sys.argv[2], "wb").write(b"".join(struct.pack("<2d", i, q) for i, q in iq))
hdr = "{'descr': '<c16', 'fortran_order': False, 'shape': (2, %d), }" % len(iq)
hdr += " " * ((64 - (10 + len(hdr) + 1) % 64) % 64) + "\n"
shot2 = [(-i, -q) for i, q in iq]     # the same record with the sign of everything flipped
data = b"".join(struct.pack("<2d", i, q) for i, q in iq + shot2)
open(sys.argv[3], "wb").write(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(hdr)) + hdr.encode() + data)
PY
expect_code 0 "$CS_BIN" split "$TMP/r.cf64" --raw cf64 --sample-rate 500MHz --quiet --json "$TMP/raw.json"
expect_code 0 "$CS_BIN" split "$TMP/r2.npy" --sample-rate 500MHz --lo 384230.2344685GHz --power-average \
    --json "$TMP/npy.json" --table "$TMP/npy.csv"
expect_in "$TMP/out" "shots combined"
expect_in "$TMP/out" "power average of 2 shots"
python3 - "$TMP/raw.json" "$TMP/npy.json" "$TMP/npy.csv" <<'PY' && ok || bad "raw and multi-shot split"
import csv, json, sys
r = json.load(open(sys.argv[1]))
# no metadata in a raw file: no LO (offset axis) and no reference (no shift)
assert abs(r["tail"]["center_hz"] - 205e6) < 5 * r["tail"]["center_hz_err"], r["tail"]["center_hz"]
assert r["tail"]["shift_hz"] is None and r["shots"][0]["reference_from"] == "none"
n = json.load(open(sys.argv[2]))
c = n["combined"]
assert c["tail"]["center_hz"]["n"] == 2 and c["era_shift_hz"]["dof"] == 1
# a sign flip is a phase of pi: both shots give the same lines, so chi2 about the mean is ~0
assert c["tail"]["center_hz"]["chi2_dof"] < 1e-3, c["tail"]["center_hz"]
assert abs(n["tail"]["center_hz"] - 384230.2344685e9 - 205e6) < 5 * n["tail"]["center_hz_err"] * 2 ** 0.5
pa = n["power_average"]
assert pa["burst"]["method"] == "plain profiles on the gated PSD" and pa["power_average_of_shots"] == 2
assert pa["tail"]["model"] == "lorentz" and pa["tail"]["status"] == "ok"
rows = list(csv.DictReader(open(sys.argv[3])))
assert [r["kind"] for r in rows] == ["shot"] * 4 + ["weighted_mean"] * 2 + ["power_average"] * 2, [r["kind"] for r in rows]
PY

# a record that is pure noise, and one whose tail is below the noise: exit 1 and a clear message
python3 - "$TMP/noise.csv" "$TMP/faint.csv" <<'PY'
import cmath, math, random, sys
random.seed(5)
for path, tail in ((sys.argv[1], None), (sys.argv[2], 1e-4)):
    out = ["# sample_rate = 500 MHz", "time_us,i,q"]
    for k in range(4096):
        t = k * 2e-9
        z = complex(random.gauss(0, 0.01), random.gauss(0, 0.01))
        if tail is not None:
            z += cmath.exp(2j * math.pi * 70e6 * t) / math.cosh((t - 1e-6) / 40e-9)
            if t > 1.25e-6:
                z += tail * math.exp(-math.pi * 1.5e6 * (t - 1.25e-6)) * cmath.exp(2j * math.pi * 205e6 * t)
        out.append("%.6f,%.8f,%.8f" % (t * 1e6, z.real, z.imag))
    open(path, "w").write("\n".join(out) + "\n")
PY
expect_code 1 "$CS_BIN" split "$TMP/noise.csv" --json "$TMP/n.json"
expect_in "$TMP/err" "no burst"
expect_code 1 "$CS_BIN" split "$TMP/faint.csv" --json "$TMP/f.json"
expect_in "$TMP/err" "tail era"
python3 - "$TMP/n.json" "$TMP/f.json" <<'PY' && ok || bad "failed eras carry no numbers"
import json, sys
n = json.load(open(sys.argv[1]))
assert n["status"] == "no burst" and n["burst"]["center_hz"] is None and n["tail"]["fwhm_hz"] is None
f = json.load(open(sys.argv[2]))
assert f["burst"]["status"] == "ok" and f["tail"]["status"] != "ok" and f["tail"]["center_hz"] is None
assert f["era_shift_hz"] is None
PY
finish
