#!/usr/bin/env bash
# End-to-end: fits that fail safely (issue 9, section 3). Each failure kind of `collshift fit` is
# forced - no convergence, a singular covariance, a parameter stuck at a bound, a model that is not
# finite - and every output (summary on stdout, --json, --table CSV, --residuals CSV) must carry
# the explicit status, leave undefined numbers out (JSON null, empty CSV cell, "undefined" in the
# summary) and never print "nan" or "inf". The same is checked on the outputs of `gate --fit` and
# `split` for a record without any line.
. "$(dirname "$0")/lib.bash"

# One Lorentzian at 150 MHz (FWHM 20 MHz, area 1e7, peak about 0.32) on a 0.1 floor, sigma 0.01,
# deterministic ripple instead of noise; and a record of pure noise for gate/split.
python3 - "$TMP" <<'PY'
import math, random, sys
d = sys.argv[1]
with open(d + "/line.csv", "w") as f:
    f.write("frequency_hz,y,sigma\n")
    for i in range(300):
        x = 1e6 * i; h = 10e6; u = x - 150e6
        y = 1e7 * (h / math.pi) / (u * u + h * h) + 0.1 + 0.01 * math.sin(0.71 * i)
        f.write("%.17g,%.17g,0.01\n" % (x, y))
with open(d + "/small.csv", "w") as f:          # axis in Hz from 0 to 299 Hz
    f.write("frequency_hz,y\n")
    for i in range(300):
        f.write("%d,%.17g\n" % (i, 1.0 + 0.01 * math.sin(0.3 * i)))
with open(d + "/huge.csv", "w") as f:           # dynamic range of 600 decades
    f.write("frequency_hz,y\n")
    for i in range(300):
        f.write("%d,%s\n" % (1000000 * i, "1e300" if i % 2 else "1e-300"))
rnd = random.Random(3)
with open(d + "/noise.csv", "w") as f:          # a time record of white noise, no burst, no line
    f.write("# sample_rate = 1 GHz\n# lo = 0 Hz\ntime_s,i,q\n")
    for i in range(4096):
        f.write("%.12g,%.6g,%.6g\n" % (i * 1e-9, rnd.gauss(0, 1), rnd.gauss(0, 1)))
PY

# no "nan"/"inf" as a word anywhere in FILE (JSON null and empty cells are the markers; common
# practice: a printed NaN is not a result)
no_nan() {
  if grep -qiwE -- '-?(nan|inf|infinity)' "$1"; then bad "nan/inf printed in $2: $(grep -iwE -m2 -- '-?(nan|inf)' "$1")"; else ok; fi
}
# run a fit with every output; want exit code $1, then the fit options
fit_all() {
  local want=$1; shift
  rm -f "$TMP"/o.json "$TMP"/o.csv "$TMP"/o_res.csv
  expect_code "$want" "$CS_BIN" fit "$@" --json "$TMP/o.json" --table "$TMP/o.csv" --residuals "$TMP/o_res.csv"
  cp "$TMP/out" "$TMP/o.txt"
  for f in o.txt o.json o.csv o_res.csv; do [ -f "$TMP/$f" ] && no_nan "$TMP/$f" "$f ($*)"; done
}
# check_json STATUS PYTHON-EXPR...: the first fit's JSON status, then assertions on d (the fit)
check_json() {
  python3 - "$TMP/o.json" "$TMP/o.csv" "$@" <<'PY' && ok || bad "JSON/CSV content for status '$1'"
import csv, json, sys
d = json.load(open(sys.argv[1]))["fits"][0]
want = sys.argv[3]
assert d["status"] == want, (d["status"], want)
rows = list(csv.DictReader(open(sys.argv[2])))
assert rows and all(r["status"] == want for r in rows), [r["status"] for r in rows]
for expr in sys.argv[4:]:
    assert eval(expr), expr
PY
}

# 1. non-convergence: one iteration from a poor start (exit 1, "not converged", errors null/empty)
fit_all 1 "$TMP/line.csv" --model lorentz --baseline const --start 1.center=120MHz --start 1.fwhm=60MHz --max-iter 1
expect_in "$TMP/o.txt" "status: not converged (iteration limit)"
expect_in "$TMP/o.txt" "errors undefined"
expect_in "$TMP/o.txt" "(error undefined)"
check_json "not converged" \
  'd["stop_reason"] == "iteration limit"' \
  'all(p["err"] is None for p in d["parameters"])' \
  'd["components"][0]["center_hz_err"] is None and d["components"][0]["center_hz"] is not None' \
  'all(r["center_hz_err"] == "" and r["fwhm_hz_err"] == "" and r["center_hz"] != "" for r in rows)' \
  'all(r["stop_reason"] == "iteration limit" for r in rows)'

# 2. singular covariance: two components forced to coincide (tied centre and width), only the sum
#    of their areas is determined; the areas' errors are null, the common centre keeps its error
fit_all 0 "$TMP/line.csv" --model lorentz+lorentz --baseline const --tie 2.center=1.center --tie 2.fwhm=1.fwhm
expect_in "$TMP/o.txt" "status: singular covariance"
check_json "singular covariance" \
  'd["components"][0]["area_err"] is None and d["components"][1]["area_err"] is None' \
  'd["components"][0]["center_hz_err"] is not None and d["components"][0]["center_hz_err"] > 0' \
  'rows[0]["area_err"] == "" and rows[0]["center_hz_err"] != ""'

# 2b. a parameter without influence: the exponential baseline's rate with its amplitude fixed at 0
fit_all 0 "$TMP/line.csv" --model lorentz --baseline exp --fix base.amp=0
expect_in "$TMP/o.txt" "status: singular covariance"
check_json "singular covariance" \
  '[p for p in d["parameters"] if p["name"] == "base.rate"][0]["err"] is None' \
  '[p for p in d["parameters"] if p["name"] == "base.amp"][0]["err"] == 0'

# 3. stuck at a bound: the true FWHM is 20 MHz, the bound's floor 35 MHz
fit_all 0 "$TMP/line.csv" --model lorentz --baseline const --bound 1.fwhm=35MHz:200MHz
expect_in "$TMP/o.txt" "at lower bound"
expect_in "$TMP/o.txt" "1 parameter at a bound"
check_json "converged" \
  'd["at_bound"] == [{"name": "1.fwhm", "bound": "lower"}]' \
  '[p for p in d["parameters"] if p["name"] == "1.fwhm"][0]["at_bound"] == "lower"' \
  'd["components"][0]["fwhm_hz_err"] is None' \
  'rows[0]["at_bound"] == "1.fwhm:lower" and rows[0]["fwhm_hz_err"] == "" and rows[0]["center_hz_err"] != ""'
fit_all 0 "$TMP/line.csv" --model lorentz --baseline const --bound 1.fwhm=1MHz:10MHz
check_json "converged" 'rows[0]["at_bound"] == "1.fwhm:upper"' 'd["at_bound"][0]["bound"] == "upper"'

# 4. model not finite: exp(-rate u) overflows (rate -10 per Hz, u up to 299 Hz: exp(2990) >
#    DBL_MAX, IEEE 754 binary64, common practice); exit 1, "model not finite", chi2 null
fit_all 1 "$TMP/small.csv" --model lorentz --baseline exp --fix base.rate=-10 --start 1.center=150Hz --start 1.fwhm=10Hz
expect_in "$TMP/o.txt" "status: model not finite"
expect_in "$TMP/o.txt" "chi2 = undefined"
check_json "model not finite" \
  'd["chi2"] is None and d["redchi2"] is None' \
  'all(p["err"] is None for p in d["parameters"] if not p["fixed"])' \
  'rows[0]["chi2"] == "" and rows[0]["redchi2"] == ""'
python3 -c "
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1])))
empty = [r for r in rows if r['model'] == '']
assert empty and all(r['residual'] == '' for r in empty), rows[-2:]
" "$TMP/o_res.csv" && ok || bad "residuals of a model that is not finite: empty cells"

# 4b. data of 600 decades of dynamic range: whatever happens is explicit (a status in the
#     outputs, exit 0 or 1), never a nan in them
fit_all_any() {
  rm -f "$TMP"/o.json "$TMP"/o.csv "$TMP"/o_res.csv
  "$CS_BIN" fit "$@" --json "$TMP/o.json" --table "$TMP/o.csv" --residuals "$TMP/o_res.csv" >"$TMP/o.txt" 2>"$TMP/err"
  local rc=$?
  if [ "$rc" = 0 ] || [ "$rc" = 1 ]; then ok; else bad "exit $rc on $*: $(head -c 300 "$TMP/err")"; fi
  for f in o.txt o.json o.csv o_res.csv; do [ -f "$TMP/$f" ] && no_nan "$TMP/$f" "$f ($*)"; done
  expect_in "$TMP/o.txt" "status: "
}
fit_all_any "$TMP/huge.csv" --model lorentz --baseline const
python3 -c "
import json, sys
d = json.load(open(sys.argv[1]))['fits'][0]
assert d['status'] in ('converged', 'not converged', 'singular covariance', 'model not finite'), d['status']
" "$TMP/o.json" && ok || bad "huge dynamic range: status"

# --compare with a failing model: the comparison names its status, no nan in the summary
expect_code 1 "$CS_BIN" fit "$TMP/line.csv" --model lorentz --baseline const --max-iter 1 --compare lorentz+lorentz \
  --json "$TMP/c.json"
no_nan "$TMP/out" "compare summary"; no_nan "$TMP/c.json" "compare JSON"
python3 -c "
import json, sys
c = json.load(open(sys.argv[1]))['fits'][0]['comparison']
assert c[0]['status'] == 'not converged' and c[1]['delta_bic'] is None, c
assert 'f_p_value' not in c[1], c          # no F-test against a fit that is not at a minimum
" "$TMP/c.json" && ok || bad "comparison with a failed fit"
expect_in "$TMP/out" "BIC = "
# bootstrap errors of a failed fit are undefined, not numbers
expect_code 1 "$CS_BIN" fit "$TMP/line.csv" --model lorentz --baseline const --max-iter 1 --bootstrap 5 --json "$TMP/b.json"
no_nan "$TMP/out" "bootstrap summary"
python3 -c "
import json, sys
d = json.load(open(sys.argv[1]))['fits'][0]
assert all(p['err_bootstrap'] is None for p in d['parameters']), d['parameters']
" "$TMP/b.json" && ok || bad "bootstrap errors of a failed fit"

# gate --fit and split on a record without any line: explicit statuses, no nan anywhere
"$CS_BIN" gate "$TMP/noise.csv" --gate "g=0s:2us" --fit lorentz --json "$TMP/g.json" >"$TMP/g.txt" 2>"$TMP/err"
rc=$?
if [ "$rc" -le 3 ]; then ok; else bad "gate exit $rc"; fi
for f in g.txt g.json; do [ -f "$TMP/$f" ] && no_nan "$TMP/$f" "gate $f"; done
"$CS_BIN" split "$TMP/noise.csv" --gate "early=0s:1us" --gate "late=1us:2us" --json "$TMP/s.json" --table "$TMP/s.csv" >"$TMP/s.txt" 2>"$TMP/err"
rc=$?
if [ "$rc" -le 3 ]; then ok; else bad "split exit $rc: $(head -c 300 "$TMP/err")"; fi
for f in s.txt s.json s.csv; do [ -f "$TMP/$f" ] && no_nan "$TMP/$f" "split $f"; done
if [ -f "$TMP/s.csv" ]; then
  python3 -c "
import csv, sys
rows = [r for r in csv.DictReader(open(sys.argv[1])) if r['kind'] != 'weighted_mean']
assert rows and all(r['status'] and r['fit_status'] for r in rows), rows
for r in rows:
    if r['status'] != 'ok':
        assert r['center_hz_err'] == '', r
" "$TMP/s.csv" && ok || bad "split table statuses"
fi

finish
