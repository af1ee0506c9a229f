#!/usr/bin/env bash
# End-to-end: `collshift series --shard K/N` on three nodes + `collshift merge` equals one run.
. "$(dirname "$0")/lib.bash"

# Seven spectra (broad + narrow Lorentzian, shifting and broadening with density), a second
# manifest with other densities, and a manifest with an entry whose file is missing.
python3 - "$TMP" <<'PY'
import math, random, sys
d = sys.argv[1]
rnd = random.Random(11)
rows = ["file,density_cm^-3,thickness_um"]
for k in range(7):
    N = 1e13 * (1 + 0.7 * k)
    name = "s%d.csv" % k
    with open(d + "/" + name, "w") as f:
        f.write("# reference = 1 GHz\nfrequency_hz,y,sigma\n")
        for i in range(1201):
            x = 0.6e9 + 0.66e6 * i
            v = 0.01
            for c0, w0, a, sc, sw in ((1e9, 200e6, 5e7, -3e-6, 2e-6), (1e9, 20e6, 1e7, -1e-6, 0.5e-6)):
                c = c0 + sc * N; h = (w0 + sw * N) / 2
                v += a / math.pi * h / ((x - c) ** 2 + h * h)
            f.write("%.17g,%.17g,%g\n" % (x, v + rnd.gauss(0, 0.004), 0.004))
    rows.append("%s,%.6g,1" % (name, N))
open(d + "/m.csv", "w").write("\n".join(rows) + "\n")
open(d + "/m2.csv", "w").write("\n".join(r.replace(",1e+13,", ",1.1e+13,") for r in rows) + "\n")
open(d + "/mx.csv", "w").write("\n".join(rows[:3] + ["gone.csv,4e13,1"] + rows[3:]) + "\n")
PY

# --shard syntax (exit 2)
for bad_shard in 0/3 4/3 3 a/3 1/0 1/ /3 -1/3 2/3x; do
  expect_code 2 "$CS_BIN" series "$TMP/m.csv" --shard "$bad_shard" --quiet
  expect_in "$TMP/err" "--shard '$bad_shard'"
done
expect_code 2 "$CS_BIN" series "$TMP/m.csv" --theory-table "$TMP/x.csv";  expect_in "$TMP/err" "needs --line"
expect_code 2 "$CS_BIN" merge;                                             expect_in "$TMP/err" "expected the JSON files"
expect_code 2 "$CS_BIN" merge --wobble "$TMP/a.json";                      expect_in "$TMP/err" "unknown option"

# one run over the whole manifest, and three shards (threads differ: they do not matter)
OPTS=(--line rb87-d2 --inflate)
expect_code 0 "$CS_BIN" series "$TMP/m.csv" "${OPTS[@]}" --threads 2 --json "$TMP/all.json" \
  --table "$TMP/all.csv" --theory-table "$TMP/all_th.csv" --quiet
for k in 1 2 3; do
  expect_code 0 "$CS_BIN" series "$TMP/m.csv" --shard $k/3 "${OPTS[@]}" --threads $k --json "$TMP/sh$k.json" --quiet
done
# shard order on the command line does not matter
expect_code 0 "$CS_BIN" merge "$TMP/sh3.json" "$TMP/sh1.json" "$TMP/sh2.json" --json "$TMP/mg.json" \
  --table "$TMP/mg.csv" --theory-table "$TMP/mg_th.csv"
expect_in "$TMP/out" "Regressions against density"
cmp -s "$TMP/all.csv" "$TMP/mg.csv" && ok || bad "merged CSV table differs from the unsharded one"
cmp -s "$TMP/all_th.csv" "$TMP/mg_th.csv" && ok || bad "merged theory table differs from the unsharded one"
python3 - "$TMP" <<'PY' && ok || bad "sharded + merged JSON != unsharded JSON"
import csv, json, sys
d = sys.argv[1]
a = json.load(open(d + "/all.json")); m = json.load(open(d + "/mg.json"))
sh = [json.load(open(d + "/sh%d.json" % k)) for k in (1, 2, 3)]
# every 3rd entry starting at the K-th
assert [[e["index"] for e in s["entries"]] for s in sh] == [[0, 3, 6], [1, 4], [2, 5]]
assert all(s["run"]["shard"] == "%d/3" % (k + 1) and s["run"]["entries_total"] == 7 for k, s in enumerate(sh))
assert len({s["run"]["fingerprint"] for s in sh} | {a["run"]["fingerprint"]}) == 1
assert m["command"] == "merge" and m["run"]["merged_shards"] == 3 and m["run"]["shard"] is None
assert a["entries"] == m["entries"], "entries"
assert a["regressions"] == m["regressions"], "regressions"
assert a["theory"] == m["theory"] and a["theory"]["comparisons"], "theory"
assert a["entries"][0]["density_m3"] == 1e19
rows = list(csv.DictReader(open(d + "/mg_th.csv")))
assert {r["estimate"] for r in rows} == {"lorentz_lorenz_coefficient_hz_cm3", "slab_shift_coefficient_hz_cm3",
                                           "self_broadening_coefficient_hz_cm3"}, rows
for r in rows:
    assert abs(float(r["ratio"]) * float(r["theory_hz_cm3"]) - float(r["slope_hz_cm3"])) <= 1e-9 * abs(float(r["slope_hz_cm3"]))
    assert r["source"] and r["y"] in ("shift_hz", "fwhm_hz")
PY

# the unsharded JSON merges too (as 1/1) and gives the same table
expect_code 0 "$CS_BIN" merge "$TMP/all.json" --table "$TMP/mg1.csv" --quiet
cmp -s "$TMP/all.csv" "$TMP/mg1.csv" && ok || bad "merging the unsharded JSON changes the table"

# a missing shard (exit 3), a shard given twice (exit 3)
expect_code 3 "$CS_BIN" merge "$TMP/sh1.json" "$TMP/sh3.json" --quiet
expect_in "$TMP/err" "2 of the manifest's 7 entries are in no shard (entries 2, 5"
expect_in "$TMP/err" "is a shard missing?"
expect_code 3 "$CS_BIN" merge "$TMP/sh1.json" "$TMP/sh2.json" "$TMP/sh3.json" "$TMP/sh2.json" --quiet
expect_in "$TMP/err" "is in two shards"

# shards of different options or of a different manifest are refused (exit 3)
expect_code 0 "$CS_BIN" series "$TMP/m.csv" --shard 2/3 --line rb87-d2 --json "$TMP/o2.json" --quiet
expect_code 3 "$CS_BIN" merge "$TMP/sh1.json" "$TMP/o2.json" "$TMP/sh3.json" --quiet
expect_in "$TMP/err" "come from different manifests or options"
expect_code 0 "$CS_BIN" series "$TMP/m2.csv" --shard 2/3 "${OPTS[@]}" --json "$TMP/d2.json" --quiet
expect_code 3 "$CS_BIN" merge "$TMP/sh1.json" "$TMP/d2.json" "$TMP/sh3.json" --quiet
expect_in "$TMP/err" "refusing to merge"
# not a series JSON, unreadable file (exit 3)
echo '{"command": "fit"}' > "$TMP/fit.json"
expect_code 3 "$CS_BIN" merge "$TMP/fit.json";      expect_in "$TMP/err" "not the JSON of 'collshift series'"
expect_code 3 "$CS_BIN" merge "$TMP/nope.json";     expect_in "$TMP/err" "nope.json"

# a failed entry (the third, in shard 1/2): the shard that holds it exits 1, and so does the merge; the tables still agree
expect_code 1 "$CS_BIN" series "$TMP/mx.csv" --json "$TMP/x.json" --table "$TMP/x.csv" --quiet
expect_code 1 "$CS_BIN" series "$TMP/mx.csv" --shard 1/2 --json "$TMP/x1.json" --quiet
expect_code 0 "$CS_BIN" series "$TMP/mx.csv" --shard 2/2 --json "$TMP/x2.json" --quiet
expect_code 1 "$CS_BIN" merge "$TMP/x1.json" "$TMP/x2.json" --table "$TMP/xm.csv" --json "$TMP/xm.json" --quiet
expect_in "$TMP/err" "gone.csv"
cmp -s "$TMP/x.csv" "$TMP/xm.csv" && ok || bad "merged table with a failed entry differs"
python3 - "$TMP/x.json" "$TMP/xm.json" <<'PY' && ok || bad "merged JSON with a failed entry differs"
import json, sys
a, b = (json.load(open(p)) for p in sys.argv[1:])
assert a["entries"] == b["entries"] and a["regressions"] == b["regressions"]
assert [e["status"] for e in b["entries"]].count("failed") == 1
PY

# an empty shard (more shards than entries) is allowed
expect_code 0 "$CS_BIN" series "$TMP/m.csv" --shard 9/9 --json "$TMP/e.json" --quiet

expect_code 0 "$CS_BIN" merge --help; expect_in "$TMP/out" "usage: collshift merge SHARD.json"
finish
