#!/usr/bin/env bash
# End-to-end: `collshift series` on a small campaign of spectra generated here (python3, stdlib).
. "$(dirname "$0")/lib.bash"

# Four spectra: broad (burst) + narrow (tail) Lorentzians whose centres and widths grow linearly
# with density; sigma column = the true noise; '# reference = 1 GHz' metadata.
python3 - "$TMP" <<'PY'
import math, random, sys
d = sys.argv[1]
rnd = random.Random(7)
slope_c = (-3e-6, -1e-6); slope_w = (2e-6, 0.5e-6); w0 = (200e6, 20e6); area = (5e7, 1e7)
rows = ["file,density_cm^-3"]
for k in range(4):
    N = 1e13 * (k + 1)
    name = "s%d.csv" % k
    with open(d + "/" + name, "w") as f:
        f.write("# reference = 1 GHz\nfrequency_hz,y,sigma\n")
        for i in range(2001):
            x = 0.5e9 + 0.5e6 * i
            v = 0.01
            for e in range(2):
                c = 1e9 + slope_c[e] * N; w = w0[e] + slope_w[e] * N; h = w / 2
                v += area[e] / math.pi * h / ((x - c) ** 2 + h * h)
            f.write("%.17g,%.17g,%g\n" % (x, v + rnd.gauss(0, 0.004), 0.004))
    rows.append("%s,%g" % (name, N))
open(d + "/m.csv", "w").write("\n".join(rows) + "\n")
open(d + "/m_missing.csv", "w").write("\n".join(rows) + "\nnot_there.csv,5e13\n")
open(d + "/m_bad.csv", "w").write("path,density_cm^-3\ns0.csv,1e13\n")
PY

# usage errors (exit 2)
expect_code 2 "$CS_BIN" series;                                expect_in "$TMP/err" "expected one manifest"
expect_code 2 "$CS_BIN" series "$TMP/m.csv" --threads 0;       expect_in "$TMP/err" "--threads '0'"
expect_code 2 "$CS_BIN" series "$TMP/m.csv" --wobble;          expect_in "$TMP/err" "unknown option"
expect_code 2 "$CS_BIN" series "$TMP/m.csv" --line rb99-d7;    expect_in "$TMP/err" "--line 'rb99-d7'"
expect_code 2 "$CS_BIN" series "$TMP/m.csv" --model lorenz;    expect_in "$TMP/err" "lorenz"
# a manifest that cannot be used (exit 3)
expect_code 3 "$CS_BIN" series "$TMP/nope.csv";                expect_in "$TMP/err" "nope.csv"
expect_code 3 "$CS_BIN" series "$TMP/m_bad.csv";               expect_in "$TMP/err" "line 1: the header has no 'file' column"

# the campaign: every entry measured, slopes near the truth, theory compared
expect_code 0 "$CS_BIN" series "$TMP/m.csv" --line rb87-d2 --thickness 1um --threads 2 \
  --json "$TMP/s.json" --table "$TMP/s.csv"
expect_in "$TMP/out" "Regressions against density"
expect_in "$TMP/out" "Lorentz-Lorenz"
python3 - "$TMP/s.json" "$TMP/s.csv" <<'PY' && ok || bad "series JSON/CSV content"
import csv, json, sys
d = json.load(open(sys.argv[1]))
assert len(d["entries"]) == 4 and all(e["status"] == "ok" for e in d["entries"])
e0 = d["entries"][0]
assert abs(e0["density_cm3"] - 1e13) < 1e3 and e0["burst"]["fwhm_hz"] > e0["tail"]["fwhm_hz"]
regs = d["regressions"]
keys = {"era", "quantity", "slope_hz_cm3", "slope_hz_cm3_err", "intercept_hz", "intercept_hz_err", "chi2_dof", "n"}
assert len(regs) == 4 and all(keys <= set(r) for r in regs)
assert {(r["era"], r["quantity"]) for r in regs} == {("burst", "center"), ("burst", "fwhm"), ("tail", "center"), ("tail", "fwhm")}
truth = {("burst", "center"): -3e-6, ("tail", "center"): -1e-6, ("burst", "fwhm"): 2e-6, ("tail", "fwhm"): 0.5e-6}
for r in regs:
    assert r["n"] == 4
    assert abs(r["slope_hz_cm3"] - truth[(r["era"], r["quantity"])]) < 4 * r["slope_hz_cm3_err"], r
th = d["theory"]
assert th["line"]["name"] == "rb87-d2" and th["line"]["source"]
assert "lorentz_lorenz_coefficient_hz_cm3" in th["estimates"]
names = {c["estimate"] for c in th["comparisons"]}
assert names == {"lorentz_lorenz_coefficient_hz_cm3", "slab_shift_coefficient_hz_cm3", "self_broadening_coefficient_hz_cm3"}, names
for c in th["comparisons"]:
    assert abs(c["ratio"] * c["theory_hz_cm3"] - c["slope_hz_cm3"]) < 1e-9 * abs(c["slope_hz_cm3"])
rows = list(csv.DictReader(open(sys.argv[2])))
assert len(rows) == 8 and rows[0]["era"] in ("burst", "tail")
dens = [float(r["density_cm3"]) for r in rows]
assert dens == sorted(dens)
assert {"center_hz", "center_hz_err", "shift_hz", "shift_hz_err", "fwhm_hz", "fwhm_hz_err", "area", "area_err"} <= set(rows[0])
PY

# one thread gives the same numbers
expect_code 0 "$CS_BIN" series "$TMP/m.csv" --threads 1 --json "$TMP/s1.json" --quiet
expect_code 0 "$CS_BIN" series "$TMP/m.csv" --threads 3 --json "$TMP/s3.json" --quiet
python3 - "$TMP/s1.json" "$TMP/s3.json" <<'PY' && ok || bad "threads change the results"
import json, sys
a, b = (json.load(open(p)) for p in sys.argv[1:])
assert a["entries"] == b["entries"] and a["regressions"] == b["regressions"]
PY

# an entry whose file is missing: marked, skipped, the rest still fitted and written (exit 1)
expect_code 1 "$CS_BIN" series "$TMP/m_missing.csv" --json "$TMP/m.json" --table "$TMP/m_t.csv" \
  --through-origin --inflate
expect_in "$TMP/err" "not_there.csv"
expect_in "$TMP/out" "[failed, skipped]"
python3 - "$TMP/m.json" "$TMP/m_t.csv" <<'PY' && ok || bad "failed entry JSON/CSV"
import csv, json, sys
d = json.load(open(sys.argv[1]))
st = [e["status"] for e in d["entries"]]
assert st == ["ok"] * 4 + ["failed"], st
assert d["entries"][4]["burst"] is None and "not_there.csv" in d["entries"][4]["message"]
assert all(r["n"] == 4 and r["through_origin"] and r["intercept_hz"] == 0 for r in d["regressions"])
assert d["theory"] is None
rows = list(csv.DictReader(open(sys.argv[2])))
assert sum(r["status"] == "failed" for r in rows) == 2 and len(rows) == 10
PY

# time records go through split: the bundled burst record, once as a whole and once as shot 0
R="$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv"
printf 'file,density,shot\n%s,1e13 cm^-3,\n%s,2e13 cm^-3,0\n' "$R" "$R" > "$TMP/mr.csv"
expect_code 0 "$CS_BIN" series "$TMP/mr.csv" --json "$TMP/r.json" --quiet
python3 - "$TMP/r.json" <<'PY' && ok || bad "records through split"
import json, sys
d = json.load(open(sys.argv[1]))
for e in d["entries"]:
    assert e["status"] == "ok" and e["kind"] == "record" and e["shots"] == 1, e
    assert e["burst"]["fwhm_hz"] > e["tail"]["fwhm_hz"] > 0 and e["tail"]["shift_hz"] is not None
PY

# help
expect_code 0 "$CS_BIN" series --help; expect_in "$TMP/out" "usage: collshift series MANIFEST"
finish
