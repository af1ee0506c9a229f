#!/usr/bin/env bash
# End-to-end: `collshift simulate` writes a labelled synthetic density series (records, spectra,
# .npy) with manifest.csv and truth.csv; `collshift info` reads every file; `collshift split`
# recovers a record's true tail centre; same seed gives identical bytes; exit codes.
. "$(dirname "$0")/lib.bash"

# help (exit 0)
expect_code 0 "$CS_BIN" simulate --help;  expect_in "$TMP/out" "usage: collshift simulate"
expect_in "$TMP/out" "--density-range A:B:N"

# usage errors: exit 2
expect_code 2 "$CS_BIN" simulate;                                  expect_in "$TMP/err" "--out DIR is required"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u";                   expect_in "$TMP/err" "no densities"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13,3parsecs; expect_in "$TMP/err" "--densities '3parsecs'"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --density-range 1e13:1e14:3; expect_in "$TMP/err" "give the densities once"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --density-range 1e13:1e14; expect_in "$TMP/err" "expected A:B:N"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --kind movie; expect_in "$TMP/err" "--kind 'movie'"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --kind spectrum --format npy; expect_in "$TMP/err" "text only"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --lo 384.229THz; expect_in "$TMP/err" "outside the band"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --burst-tau 40ns --burst-fwhm 5MHz; expect_in "$TMP/err" "--burst-tau"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --shots 0; expect_in "$TMP/err" "--shots '0'"
expect_code 2 "$CS_BIN" simulate --out "$TMP/u" --densities 1e13 --bogus; expect_in "$TMP/err" "unknown option '--bogus'"
[ ! -e "$TMP/u" ] && ok || bad "a usage error created the output folder"

# a record series with custom slopes
A="$TMP/a"
expect_code 0 "$CS_BIN" simulate --out "$A" --densities 1e13,1e14,3e14 --seed 5 \
    --burst-shift-slope -5e-7 --tail-shift-slope -1e-7 --tail-width-slope 2e-9
expect_in "$TMP/out" "wrote 3 synthetic record files"
for f in manifest.csv truth.csv synthetic_record_d00.csv synthetic_record_d01.csv synthetic_record_d02.csv; do
  [ -s "$A/$f" ] && ok || bad "missing $A/$f"
done
expect_in "$A/manifest.csv" "file,density_cm^-3,reference_hz"
expect_in "$A/synthetic_record_d01.csv" "# synthetic = yes"
expect_in "$A/synthetic_record_d01.csv" "# sample_rate = "
expect_in "$A/synthetic_record_d01.csv" "# lo = "
expect_in "$A/synthetic_record_d01.csv" "# reference = "
expect_in "$A/synthetic_record_d01.csv" "# density = 100000000000000 cm^-3"
expect_in "$A/synthetic_record_d01.csv" "# true_tail_center = "
expect_in "$A/synthetic_record_d01.csv" "time_us,i,q"
python3 - "$A" <<'PY' && ok || bad "truth.csv and manifest content"
import csv, os, re, sys
d = sys.argv[1]
man = list(csv.DictReader(open(os.path.join(d, "manifest.csv"))))
tru = list(csv.DictReader(open(os.path.join(d, "truth.csv"))))
assert [r["file"] for r in man] == [r["file"] for r in tru] and len(man) == 3
for m, t in zip(man, tru):
    assert m["file"].startswith("synthetic_")
    n = float(t["density_cm^-3"])
    assert n == float(m["density_cm^-3"])
    rel = lambda a, b: abs(a - b) <= 1e-12 * abs(b)
    assert rel(float(t["burst_shift_hz"]), -5e-7 * n) and rel(float(t["tail_shift_hz"]), -1e-7 * n)
    assert rel(float(t["tail_fwhm_hz"]), 1.1e6 + 2e-9 * n)
    ref = float(t["reference_hz"])
    assert abs(float(t["tail_center_hz"]) - (ref + float(t["tail_shift_hz"]))) < 1.0
    # the file's metadata say the same
    meta = {}
    for line in open(os.path.join(d, m["file"])):
        mm = re.match(r"#\s*(\w+)\s*=\s*(\S+)", line)
        if mm:
            meta[mm.group(1)] = mm.group(2)
    assert float(meta["true_tail_center"]) == float(t["tail_center_hz"])
    assert float(meta["true_burst_fwhm"]) == float(t["burst_fwhm_hz"])
    assert meta["synthetic"].startswith("yes")
PY
for f in "$A"/synthetic_*; do
  expect_code 0 "$CS_BIN" info "$f"; expect_in "$TMP/out" "kind: record"; expect_in "$TMP/out" "synthetic"
done

# never overwrite (exit 3, nothing written), unless --force
cp "$A/synthetic_record_d00.csv" "$TMP/keep.csv"
expect_code 3 "$CS_BIN" simulate --out "$A" --densities 1e13,1e14,3e14 --seed 6
expect_in "$TMP/err" "already exists"
cmp -s "$A/synthetic_record_d00.csv" "$TMP/keep.csv" && ok || bad "a refused run changed a file"
expect_code 0 "$CS_BIN" simulate --out "$A" --densities 1e13,1e14,3e14 --seed 6 --force --quiet
[ ! -s "$TMP/out" ] && ok || bad "--quiet printed"
cmp -s "$A/synthetic_record_d00.csv" "$TMP/keep.csv" && bad "--force with another seed left the file" || ok

# same seed: identical bytes; another seed: different
expect_code 0 "$CS_BIN" simulate --out "$TMP/b" --densities 1e13,1e14,3e14 --seed 6 --quiet
expect_code 0 "$CS_BIN" simulate --out "$TMP/c" --densities 1e13,1e14,3e14 --seed 6 --quiet
expect_code 0 "$CS_BIN" simulate --out "$TMP/d" --densities 1e13,1e14,3e14 --seed 7 --quiet
for f in synthetic_record_d00.csv synthetic_record_d02.csv truth.csv manifest.csv; do
  cmp -s "$TMP/b/$f" "$TMP/c/$f" && ok || bad "seed 6 twice: $f differs"
done
cmp -s "$TMP/b/synthetic_record_d00.csv" "$TMP/d/synthetic_record_d00.csv" && bad "seeds 6 and 7 gave the same file" || ok

# split recovers the true tail centre (and burst centre) of one record within 5 sigma
R="$TMP/b/synthetic_record_d01.csv"
expect_code 0 "$CS_BIN" split "$R" --json "$TMP/s.json"
python3 - "$TMP/s.json" "$TMP/b/truth.csv" <<'PY' && ok || bad "split against truth"
import csv, json, sys
d = json.load(open(sys.argv[1]))
t = [r for r in csv.DictReader(open(sys.argv[2])) if r["file"] == "synthetic_record_d01.csv"][0]
for era, key in (("tail", "tail_center_hz"), ("burst", "burst_center_hz")):
    x, e, truth = d[era]["center_hz"], d[era]["center_hz_err"], float(t[key])
    assert abs(x - truth) <= 5 * e, (era, x, e, truth, (x - truth) / e)
x, e = d["tail"]["fwhm_hz"], d["tail"]["fwhm_hz_err"]
assert abs(x - float(t["tail_fwhm_hz"])) <= 5 * e, (x, e, t["tail_fwhm_hz"])
PY

# spectra from a density range; real records; .npy with several shots
expect_code 0 "$CS_BIN" simulate --out "$TMP/sp" --kind spectrum --density-range 1e13:3e14:4 --noise 2 --broad-shape sech2
expect_in "$TMP/out" "wrote 4 synthetic spectrum files"
expect_in "$TMP/sp/synthetic_spectrum_d03.csv" "frequency_hz,y,sigma"
expect_in "$TMP/sp/synthetic_spectrum_d03.csv" "# true_noise_sigma = 2"
for f in "$TMP"/sp/synthetic_*; do
  expect_code 0 "$CS_BIN" info "$f"; expect_in "$TMP/out" "kind: spectrum"
done
expect_code 0 "$CS_BIN" simulate --out "$TMP/re" --densities 3e13 --real --shots 2 --samples 2048 --quiet
expect_in "$TMP/re/synthetic_record_d00_s01.csv" "time_us,y"
expect_code 0 "$CS_BIN" info "$TMP/re/synthetic_record_d00_s00.csv"; expect_in "$TMP/out" "kind: record"
expect_code 0 "$CS_BIN" simulate --out "$TMP/np" --densities 1e13,1e14 --format npy --shots 3 --quiet
[ -s "$TMP/np/synthetic_record_d01.npy" ] && ok || bad "no .npy written"
expect_code 0 "$CS_BIN" info "$TMP/np/synthetic_record_d01.npy" --sample-rate 1GHz; expect_in "$TMP/out" "kind: record"
finish
