#!/usr/bin/env bash
# End-to-end: `collshift series` fails safely (issue 9). A regression of two entries has no degrees
# of freedom (chi2/dof undefined, never "nan"); an entry whose fit is singular is marked with that
# status and left out of the regressions; a parameter stuck at a bound is named per entry and era;
# the manifest's RFC 4180 quoting carries a file name with a comma and quotes; a file name that is
# not UTF-8 keeps its key in every JSON (U+FFFD plus its exact bytes) for series, fit, info and
# split. Merged shards and a resumed run still give the table of one uninterrupted run.
. "$(dirname "$0")/lib.bash"

# the two awkward names: a comma and quotes; and the byte string of the Unicode Standard's
# example of U+FFFD substitution (chapter 3, section 3.9, Table 3-8), then ".csv"
Q='x,"y".csv'
N=$'a\xF1\x80\x80\xE1\x80\xC2b\x80c\x80\xBFd.csv'
python3 - "$TMP" <<'PY'
import math, os, random, sys
d = os.fsencode(sys.argv[1])
def write(name, lines_of, ripple=0.0, ref=True, noise=None, seed=0):
    rnd = random.Random(seed)
    with open(os.path.join(d, name), "wb") as f:
        if ref:
            f.write(b"# reference = 1 GHz\n")
        f.write(b"frequency_hz,y,sigma\n")
        for i in range(801):
            x = 0.6e9 + 1e6 * i
            y = sum(fn(x) for fn in lines_of) + ripple * (1 + math.sin(0.77 * i))
            if noise:
                y += rnd.gauss(0, noise)
            f.write(b"%.17g,%.17g,%g\n" % (x, y, noise or 0.001))
def lor(c, w, a):
    return lambda x: a / math.pi * (w / 2) / ((x - c) ** 2 + (w / 2) ** 2)
def gau(c, w, a):
    s = w / 2.3548200450309493
    return lambda x: a / (s * math.sqrt(2 * math.pi)) * math.exp(-(x - c) ** 2 / (2 * s * s))
# manifest A (model pvoigt): a Lorentzian and a Gaussian line (its pseudo-Voigt eta ends at 0)
write(b'x,"y".csv', [lor(1.0e9, 30e6, 1e7)], ripple=0.001)
write(b"a\xF1\x80\x80\xE1\x80\xC2b\x80c\x80\xBFd.csv", [gau(0.99e9, 35e6, 1e7)], ripple=0.001)
# manifest S (model lorentz+lorentz): two spectra with a broad and a narrow line, and one
# noise-free single line, which two identical Lorentzians fit in any proportion (singular)
for k, N in ((1, 1e13), (3, 3e13)):
    write(b"two%d.csv" % k, [lor(1e9 - 3e-6 * N, 200e6 + 2e-6 * N, 5e7), lor(1e9 - 1e-6 * N, 20e6 + 0.5e-6 * N, 1e7)],
          ripple=0.0, noise=0.004, seed=k)
write(b"single.csv", [lor(1.0e9, 30e6, 1e7)], ref=False)
PY
cd "$TMP" || exit 1
# RFC 4180, section 2, rules 6 and 7: the name with a comma and quotes in double quotes, inner
# quotes doubled
printf 'file,density_cm^-3\n"x,""y"".csv",1e13\n%s,2e13\n' "$N" > A.csv
printf 'file,density_cm^-3\ntwo1.csv,1e13\nsingle.csv,2e13\ntwo3.csv,3e13\n' > S.csv

# no "nan"/"inf" as a word anywhere in FILE (common practice: a printed NaN is not a result)
no_nan() {
  if LC_ALL=C grep -qiwE -- '-?(nan|inf|infinity)' "$1"; then bad "nan/inf printed in $2: $(LC_ALL=C grep -iwE -m2 -- '-?(nan|inf)' "$1")"; else ok; fi
}

# ---- A: a two-entry regression, a parameter at a bound, both awkward names --------------------
expect_code 0 "$CS_BIN" series A.csv --model pvoigt --baseline const --line rb87-d2 \
  --json A.json --table A_t.csv --theory-table A_th.csv
cp "$TMP/out" A.txt
for f in A.txt A.json A_t.csv A_th.csv; do no_nan "$f" "series $f"; done
expect_in A.txt "chi2/dof undefined"
expect_in A.txt "[fit: converged; at a bound: 1.eta:lower]"
python3 - A.json A_t.csv "$Q" "$N" <<'PY' && ok || bad "series A: JSON and CSV"
import csv, json, os, sys
d = json.load(open(sys.argv[1], encoding="utf-8"))    # RFC 8259, section 8.1: UTF-8 text
q = sys.argv[3]
n = os.fsencode(sys.argv[4])
ents = d["entries"]
# the Unicode Standard, Table 3-8: 61 F1 80 80 E1 80 C2 62 80 63 80 BF 64 becomes
# a FFFD FFFD FFFD b FFFD c FFFD FFFD d (one U+FFFD per maximal subpart)
want = "a\ufffd\ufffd\ufffdb\ufffdc\ufffd\ufffdd.csv"
assert [e["file"] for e in ents] == [q, want], [e["file"] for e in ents]
assert "file_bytes" not in ents[0]
assert ents[1]["file_bytes"] == "a%F1%80%80%E1%80%C2b%80c%80%BFd.csv", ents[1]["file_bytes"]
for e in ents:
    assert e["status"] == "ok", e
    assert e["fit_status"] == {"burst": None, "tail": "converged"}, e["fit_status"]   # one component: no burst fit
assert ents[1]["at_bound"] == {"burst": [], "tail": [{"name": "1.eta", "bound": "lower"}]}, ents[1]["at_bound"]
# two entries: a straight line through two points has no degrees of freedom (common practice)
for r in d["regressions"]:
    if r["era"] == "tail":
        assert r["n"] == 2 and r["dof"] == 0 and r["chi2_dof"] is None and r["status"] == "ok", r
        assert r["slope_hz_cm3"] is not None and r["left_out_error_undefined"] == 0, r
# RFC 4180: the CSV as bytes (latin-1 keeps every byte); the existing columns keep their
# positions and the new ones come last (common practice for extending a table)
raw = open(sys.argv[2], encoding="latin-1", newline="").read()
rows = list(csv.reader(raw.splitlines()))
head = ("density_cm3,era,file,line,status,center_hz,center_hz_err,shift_hz,shift_hz_err,fwhm_hz,fwhm_hz_err,"
        "area,area_err,fit_status,at_bound").split(",")
assert rows[0] == head, rows[0]
rows = [dict(zip(head, r)) for r in rows[1:]]
assert all(len(r) == len(head) for r in rows)
tail = [r for r in rows if r["era"] == "tail"]
assert [r["file"].encode("latin-1") for r in tail] == [q.encode(), n], [r["file"] for r in tail]
assert [r["fit_status"] for r in tail] == ["converged", "converged"] and tail[1]["at_bound"] == "1.eta:lower", tail
assert all(r["fit_status"] == "not fitted" and r["at_bound"] == "" for r in rows if r["era"] == "burst")
PY

# merged shards and a resumed run equal the uninterrupted run (the table byte for byte, the JSON's
# entries field for field), names that are not UTF-8 included
expect_code 0 "$CS_BIN" series A.csv --model pvoigt --baseline const --line rb87-d2 --shard 1/2 --json A1.json --quiet
expect_code 0 "$CS_BIN" series A.csv --model pvoigt --baseline const --line rb87-d2 --shard 2/2 --json A2.json --quiet
expect_code 0 "$CS_BIN" merge A2.json A1.json --table Am_t.csv --json Am.json --theory-table Am_th.csv --quiet
cmp -s A_t.csv Am_t.csv && ok || bad "merged table differs: $(diff A_t.csv Am_t.csv | head -5)"
cmp -s A_th.csv Am_th.csv && ok || bad "merged theory table differs"
CS_SERIES_TEST_RAISE=INT:1 "$CS_BIN" series A.csv --model pvoigt --baseline const --line rb87-d2 \
  --json Ar.json --table Ar_t.csv --quiet >/dev/null 2>err.txt
rc=$?; [ "$rc" = 130 ] && ok || bad "interrupted run: exit $rc, wanted 130"
expect_code 0 "$CS_BIN" series A.csv --model pvoigt --baseline const --line rb87-d2 \
  --json Ar.json --table Ar_t.csv --quiet --resume
cmp -s A_t.csv Ar_t.csv && ok || bad "resumed table differs: $(diff A_t.csv Ar_t.csv | head -5)"
python3 - A.json Am.json Ar.json <<'PY' && ok || bad "merged or resumed JSON entries differ"
import json, sys
a, m, r = (json.load(open(p, encoding="utf-8")) for p in sys.argv[1:])
assert a["entries"] == m["entries"] == r["entries"]
assert a["regressions"] == m["regressions"] == r["regressions"]
assert m["manifest"] == a["manifest"]
PY

# ---- S: a singular fit among good ones; the regressions use the other two entries -------------
expect_code 1 "$CS_BIN" series S.csv --line rb87-d2 --thickness 1um --json S.json --table S_t.csv \
  --theory-table S_th.csv
cp "$TMP/out" S.txt
for f in S.txt S.json S_t.csv S_th.csv; do no_nan "$f" "series $f"; done
expect_in "$TMP/err" "singular covariance"
expect_in S.txt "[failed, skipped; burst fit: singular covariance; tail fit: singular covariance]"
expect_in S.txt "chi2/dof undefined"
python3 - S.json S_t.csv <<'PY' && ok || bad "series S: singular entry"
import csv, json, sys
d = json.load(open(sys.argv[1], encoding="utf-8"))
e = [x for x in d["entries"] if x["file"] == "single.csv"][0]
assert e["status"] == "failed" and e["burst"] is None and e["tail"] is None, e
assert e["fit_status"] == {"burst": "singular covariance", "tail": "singular covariance"}, e["fit_status"]
assert "singular covariance" in e["message"], e["message"]
assert all(x["status"] == "ok" and x["fit_status"]["tail"] == "converged" for x in d["entries"] if x is not e)
for r in d["regressions"]:
    assert r["n"] == 2 and r["dof"] == 0 and r["chi2_dof"] is None, r
for c in d["theory"]["comparisons"]:
    assert c["ratio"] is not None and c["theory_hz_cm3"] is not None, c
rows = [r for r in csv.DictReader(open(sys.argv[2], encoding="utf-8")) if r["file"] == "single.csv"]
assert len(rows) == 2 and all(r["status"] == "failed" and r["fit_status"] == "singular covariance" for r in rows), rows
assert all(r[k] == "" for r in rows for k in ("center_hz", "center_hz_err", "fwhm_hz", "fwhm_hz_err")), rows
PY
# the theory table holds numbers or empty cells (RFC 4180 fields), never nan
python3 - S_th.csv <<'PY' && ok || bad "theory table cells"
import csv, math, sys
rows = list(csv.DictReader(open(sys.argv[1], encoding="utf-8")))
assert rows
for r in rows:
    for k in ("theory_hz_cm3", "slope_hz_cm3", "slope_hz_cm3_err", "ratio"):
        assert r[k] != "" and math.isfinite(float(r[k])), (k, r)
PY

# ---- manifests whose quoting is broken: exit 3 with the line (RFC 4180, section 2) ------------
printf 'file,density_cm^-3\ntwo1.csv,1e13\n"two3.csv,3e13\n' > bad1.csv
expect_code 3 "$CS_BIN" series bad1.csv --quiet
expect_in "$TMP/err" "line 3"
expect_in "$TMP/err" "not closed on this line"
printf 'file,density_cm^-3\ntw"o1.csv,1e13\n' > bad2.csv
expect_code 3 "$CS_BIN" series bad2.csv --quiet
expect_in "$TMP/err" "line 2"
expect_in "$TMP/err" "inside an unquoted field"

# ---- fit, info and split keep the 'file'/'path' of a name that is not UTF-8 --------------------
expect_code 0 "$CS_BIN" fit "$N" --model pvoigt --baseline const --json f.json --quiet
"$CS_BIN" info "$N" --json i.json >/dev/null 2>&1 && ok || bad "info on a name that is not UTF-8"
R=$'r\xC0\xAF.csv'
cp "$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv" "$R"
expect_code 0 "$CS_BIN" split "$R" --no-pencil --json s.json --table s_t.csv
python3 - f.json i.json s.json s_t.csv <<'PY' && ok || bad "fit/info/split JSON of names that are not UTF-8"
import csv, json, sys
want = "a\ufffd\ufffd\ufffdb\ufffdc\ufffd\ufffdd.csv"         # Unicode Standard, Table 3-8
f = json.load(open(sys.argv[1], encoding="utf-8"))["fits"][0]
assert f["file"] == want and f["file_bytes"] == "a%F1%80%80%E1%80%C2b%80c%80%BFd.csv", f["file"]
i = json.load(open(sys.argv[2], encoding="utf-8"))["files"][0]
assert i["path"] == want and i["path_bytes"] == f["file_bytes"], i
# C0 can never start a well-formed sequence and AF alone is a continuation byte: two maximal
# subparts, two U+FFFD (Unicode Standard, section 3.9)
s = json.load(open(sys.argv[3], encoding="utf-8"))
files = [x["file"] for x in s["files"]] + [x["file"] for x in s["shots"]]
assert files and all(x == "r\ufffd\ufffd.csv" for x in files), files
assert all(x["file_bytes"] == "r%C0%AF.csv" for x in s["shots"])
rows = [r for r in csv.DictReader(open(sys.argv[4], encoding="latin-1")) if r["kind"] == "shot"]
assert rows and all(r["file"].encode("latin-1") == b"r\xc0\xaf.csv" for r in rows), rows
PY

finish
