#!/usr/bin/env bash
# End-to-end: hostile inputs (issue 9, section 5). Each is handled with a clear message (or loads
# as documented) and bounded memory:
#   - a text file whose one line is 100 MB (data line and comment line);
#   - a metadata key repeated 100000 times (the last value wins, a note says so), and 100000
#     different keys (refused beyond 10000);
#   - an .npy header declaring 10^8 samples over 16 bytes of data;
#   - paths with spaces and non-ASCII characters for info, fit, split and series (CSV cells quoted);
#   - outputs that cannot be written (read-only folder, a file where a folder is expected, /proc):
#     a message naming the path, exit 3, no partial or temporary files left.
# Big files are generated in the test's temporary folder, never committed. Peak memory is measured
# with /usr/bin/time -f %M (maximum resident set, KiB) when it exists and no sanitizer is in use
# (CS_SANITIZE set: ASan's shadow memory makes the figure meaningless, so only that check is
# skipped).
. "$(dirname "$0")/lib.bash"

MEM_LIMIT_KB=65536  # 64 MiB: the loaders' buffers are 4 MiB; a loader holding a 100 MB line would exceed it
measure=1
if [ -n "${CS_SANITIZE:-}" ] && [ "${CS_SANITIZE}" != "OFF" ] && [ "${CS_SANITIZE}" != "0" ]; then
  measure=0; echo "note: sanitizer build, peak-memory checks skipped"
fi
if ! [ -x /usr/bin/time ] || ! /usr/bin/time -f %M true >/dev/null 2>&1; then
  measure=0; echo "note: /usr/bin/time -f %M not available, peak-memory checks skipped"
fi
# run_mem WANT_CODE CMD...: like expect_code, and the peak resident size below MEM_LIMIT_KB
run_mem() {
  local want=$1; shift
  if [ "$measure" = 1 ]; then
    /usr/bin/time -f %M -o "$TMP/mem" "$@" >"$TMP/out" 2>"$TMP/err"
  else
    "$@" >"$TMP/out" 2>"$TMP/err"
  fi
  local got=$?
  if [ "$got" = "$want" ]; then ok; else bad "exit $got, wanted $want: $* ($(head -c 300 "$TMP/err"))"; fi
  if [ "$measure" = 1 ]; then
    local kb; kb=$(tail -n 1 "$TMP/mem")
    if [ "$kb" -lt "$MEM_LIMIT_KB" ] 2>/dev/null; then ok; else bad "peak memory ${kb} KiB >= ${MEM_LIMIT_KB} KiB: $*"; fi
  fi
}

# ---------------------------------------------------------------- a 100 MB line
# data line: header, then one number of 100 000 000 digits
{ printf 'frequency_hz,y\n'; head -c 100000000 /dev/zero | tr '\0' '7'; printf ',1\n'; } >"$TMP/longline.csv"
run_mem 3 "$CS_BIN" info "$TMP/longline.csv"
expect_in "$TMP/err" "longline.csv"
expect_in "$TMP/err" "line 2"
expect_in "$TMP/err" "line longer than 1048576 bytes (1 MiB)"
# comment line of 100 MB (a metadata value): the same refusal, before the data
{ printf '# note = '; head -c 100000000 /dev/zero | tr '\0' 'x'; printf '\nfrequency_hz,y\n1,2\n2,3\n3,4\n'; } >"$TMP/longcomment.csv"
run_mem 3 "$CS_BIN" fit "$TMP/longcomment.csv" --model lorentz
expect_in "$TMP/err" "line 1"
expect_in "$TMP/err" "line longer than"
rm -f "$TMP/longline.csv" "$TMP/longcomment.csv"

# a wide table: 500001 columns per row (just under 1 MiB a line): loads, the unused columns are
# named in a note, bounded memory (only the columns in use are converted, io_text.c)
python3 -c "
import sys
with open(sys.argv[1], 'w') as f:
    for r in range(5):
        f.write('%d,' % r + ','.join(['1'] * 500000) + '\\n')
" "$TMP/wide.csv"
run_mem 0 "$CS_BIN" info "$TMP/wide.csv"
expect_in "$TMP/out" "499999 other columns not used"
rm -f "$TMP/wide.csv"

# ---------------------------------------------------------------- repeated metadata keys
# the same key 100000 times: loads, the last value wins (io.h: cs_meta_parse_line), a note says so
python3 - "$TMP" <<'PY'
import sys
d = sys.argv[1]
with open(d + "/repeat.csv", "w") as f:
    for k in range(1, 100001):
        f.write("# density = %d cm^-3\n" % k)
    f.write("frequency_hz,y\n")
    for i in range(10):
        f.write("%d,%d\n" % (i, i * i))
with open(d + "/manykeys.csv", "w") as f:
    for k in range(100000):
        f.write("# key%d = %d\n" % (k, k))
    f.write("frequency_hz,y\n1,2\n2,3\n3,4\n")
PY
run_mem 0 "$CS_BIN" info "$TMP/repeat.csv" --json "$TMP/repeat.json"
expect_in "$TMP/out" "metadata 'density' given again: the last value wins"
python3 - "$TMP/repeat.json" <<'PY' && ok || bad "repeated key: the last value wins"
import json, sys
d = json.load(open(sys.argv[1]))["files"][0]
meta = d["spectrum"]["metadata"]
assert list(meta) == ["density"], list(meta)      # one entry, not 100000
assert meta["density"]["value"] == 100000 and meta["density"]["line"] == 100000, meta
assert any("given again" in n for n in d["notes"]), d["notes"]
PY
# 100000 different keys: refused at the 10001st with its line (bounded memory and time)
run_mem 3 "$CS_BIN" info "$TMP/manykeys.csv"
expect_in "$TMP/err" "line 10001"
expect_in "$TMP/err" "more than 10000 different metadata keys"

# an HDF5 dataset under a flood of attributes (10050 on the root group): refused with a message
# (io_hdf5_tree.c: at most CS_META_MAX_KEYS attributes are gathered). The file is written by a
# small C program built with the project's compiler (CS_CC) and pkg-config's hdf5; skipped
# without them.
if [ -n "${CS_CC:-}" ] && pkg-config --exists hdf5 2>/dev/null; then
  cat >"$TMP/h5flood.c" <<'C'
#include <hdf5.h>
#include <stdio.h>
int main(int argc, char **argv)
{
    hid_t fapl = H5Pcreate(H5P_FILE_ACCESS); /* the latest format indexes many attributes */
    H5Pset_libver_bounds(fapl, H5F_LIBVER_LATEST, H5F_LIBVER_LATEST);
    hid_t f = H5Fcreate(argv[1], H5F_ACC_TRUNC, H5P_DEFAULT, fapl);
    hsize_t n = 64;
    double d[64];
    for (int i = 0; i < 64; i++)
        d[i] = i % 7;
    hid_t sp = H5Screate_simple(1, &n, NULL);
    hid_t ds = H5Dcreate2(f, "/y", H5T_NATIVE_DOUBLE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    H5Dwrite(ds, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, d);
    hid_t one = H5Screate(H5S_SCALAR);
    int count = argc > 2 ? 10050 : 3;
    for (int k = 0; k < count; k++) {
        char name[32];
        snprintf(name, sizeof name, "key%d", k);
        double v = k;
        hid_t a = H5Acreate2(f, name, H5T_NATIVE_DOUBLE, one, H5P_DEFAULT, H5P_DEFAULT);
        H5Awrite(a, H5T_NATIVE_DOUBLE, &v);
        H5Aclose(a);
    }
    H5Sclose(one); H5Dclose(ds); H5Sclose(sp); H5Fclose(f); H5Pclose(fapl);
    return 0;
}
C
  # shellcheck disable=SC2046
  if "$CS_CC" -o "$TMP/h5flood" "$TMP/h5flood.c" $(pkg-config --cflags --libs hdf5) 2>"$TMP/cc.err" &&
     "$TMP/h5flood" "$TMP/few.h5" && "$TMP/h5flood" "$TMP/flood.h5" many; then
    expect_code 0 "$CS_BIN" info "$TMP/few.h5" --sample-rate 1GHz     # the same file, 3 attributes: loads
    run_mem 3 "$CS_BIN" info "$TMP/flood.h5" --sample-rate 1GHz
    expect_in "$TMP/err" "flood.h5"
    expect_in "$TMP/err" "more than 10000 attributes"
  else
    echo "note: could not build the HDF5 writer ($(head -c 200 "$TMP/cc.err")): HDF5 attribute flood skipped"
  fi
  rm -f "$TMP/few.h5" "$TMP/flood.h5" "$TMP/h5flood" "$TMP/h5flood.c"
else
  echo "note: no CS_CC or no hdf5 in pkg-config: HDF5 attribute flood skipped"
fi

# ---------------------------------------------------------------- .npy declaring far more than it holds
python3 - "$TMP" <<'PY'
import struct, sys
hdr = "{'descr': '<c16', 'fortran_order': False, 'shape': (100000000,), }"
hdr += " " * ((64 - (10 + len(hdr) + 1) % 64) % 64) + "\n"
with open(sys.argv[1] + "/liar.npy", "wb") as f:
    f.write(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(hdr)) + hdr.encode() + b"\0" * 16)
PY
run_mem 3 "$CS_BIN" info "$TMP/liar.npy" --sample-rate 1GHz
expect_in "$TMP/err" "liar.npy"
expect_in "$TMP/err" "truncated: expected 1600000000 bytes of data, found 16"

# ---------------------------------------------------------------- spaces and non-ASCII in paths
U="$TMP/données 5 µm"
mkdir -p "$U"
python3 - "$U" <<'PY'
import math, random, sys
d = sys.argv[1]
rnd = random.Random(5)
rows = ["file,density_cm^-3"]
for k in range(3):
    name = "spectre №%d, run \"a\".csv" % (k + 1) if k == 0 else "spectre №%d.csv" % (k + 1)
    with open(d + "/" + name, "w", encoding="utf-8") as f:
        f.write("# reference = 1 GHz\nfrequency_hz,y,sigma\n")
        for i in range(801):
            x = 0.8e9 + 0.5e6 * i
            v = 0.01
            for c, w, a in ((1e9 - 1e6 * k, 100e6, 5e7), (1e9 - 0.3e6 * k, 10e6, 1e7)):
                h = w / 2
                v += a / math.pi * h / ((x - c) ** 2 + h * h)
            f.write("%.17g,%.17g,%g\n" % (x, v + rnd.gauss(0, 0.004), 0.004))
    if k > 0:   # the manifest's file column is split at commas: names without one there
        rows.append('"%s",%g' % (name, 1e13 * (k + 1)))
open(d + "/manifeste é.csv", "w", encoding="utf-8").write("\n".join(rows) + "\n")
PY
S1="$U/spectre №1, run \"a\".csv"
S2="$U/spectre №2.csv"
expect_code 0 "$CS_BIN" info "$S2"
expect_in "$TMP/out" "spectre №2.csv"
expect_code 0 "$CS_BIN" fit "$S1" "$S2" --model lorentz+lorentz --table "$U/table ü.csv" --json "$U/fit ü.json" \
  --residuals "$U/résidus.csv" --quiet
python3 - "$U/table ü.csv" "$U/fit ü.json" "$U/résidus.csv" "$S1" "$S2" <<'PY' && ok || bad "fit outputs with unicode paths"
import csv, json, sys
rows = list(csv.DictReader(open(sys.argv[1], encoding="utf-8")))
assert [r["file"] for r in rows] == [sys.argv[4]] * 2 + [sys.argv[5]] * 2, [r["file"] for r in rows]
assert all(r["status"] == "converged" for r in rows)
d = json.load(open(sys.argv[2], encoding="utf-8"))
assert [f["file"] for f in d["fits"]] == [sys.argv[4], sys.argv[5]]
res = list(csv.DictReader(open(sys.argv[3], encoding="utf-8")))
assert {r["file"] for r in res} == {sys.argv[4], sys.argv[5]}
PY
# a time record under such a name for split (the bundled synthetic record, copied)
R="$U/enregistrement №1.csv"
cp "$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv" "$R"
expect_code 0 "$CS_BIN" split "$R" --json "$U/split é.json" --table "$U/split é.csv" --no-pencil
python3 - "$U/split é.csv" "$R" <<'PY' && ok || bad "split table with a unicode path"
import csv, sys
rows = [r for r in csv.DictReader(open(sys.argv[1], encoding="utf-8")) if r["kind"] == "shot"]
assert rows and all(r["file"] == sys.argv[2] for r in rows), [r["file"] for r in rows]
PY
expect_code 0 "$CS_BIN" series "$U/manifeste é.csv" --json "$U/série.json" --table "$U/série.csv" --threads 1
python3 - "$U/série.json" "$U/série.csv" <<'PY' && ok || bad "series with unicode names"
import csv, json, sys
d = json.load(open(sys.argv[1], encoding="utf-8"))
files = [e["file"] for e in d["entries"]]
assert all("spectre №" in f for f in files) and len(files) == 2, files
assert all(e["status"] == "ok" for e in d["entries"]), [e["status"] for e in d["entries"]]
rows = list(csv.reader(open(sys.argv[2], encoding="utf-8")))
assert len({len(r) for r in rows}) == 1, "ragged CSV"
assert any("spectre №2.csv" in c for r in rows for c in r)
PY

# ---------------------------------------------------------------- outputs that cannot be written
S="$CS_SOURCE_DIR/spectra/synthetic_broad_narrow_spectrum.csv"
# no_leftovers DIR: nothing but what was there (no partial file, no temporary file)
# (a) a file where a folder is expected: fails for every user, root included
printf 'x' >"$TMP/plainfile"
expect_code 3 "$CS_BIN" fit "$S" --model lorentz+lorentz --quiet --json "$TMP/plainfile/out.json"
expect_in "$TMP/err" "$TMP/plainfile/out.json"
expect_in "$TMP/err" "Not a directory"
[ "$(cat "$TMP/plainfile")" = x ] && ok || bad "the plain file was changed"
# the other outputs of the run are written; only the impossible one is missing
expect_code 3 "$CS_BIN" fit "$S" --model lorentz+lorentz --quiet --table "$TMP/good.csv" --json "$TMP/plainfile/o.json"
[ -s "$TMP/good.csv" ] && ok || bad "the writable output was not written"
# a figure and the outputs of split and series: the same refusal
expect_code 3 "$CS_BIN" fit "$S" --model lorentz+lorentz --quiet --plot "$TMP/plainfile/fit.png"
expect_in "$TMP/err" "$TMP/plainfile/fit.png"
expect_code 3 "$CS_BIN" split "$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv" --quiet --no-pencil \
  --json "$TMP/plainfile/s.json"
expect_in "$TMP/err" "$TMP/plainfile/s.json"
expect_code 3 "$CS_BIN" series "$U/manifeste é.csv" --threads 1 --table "$TMP/plainfile/t.csv"
expect_in "$TMP/err" "$TMP/plainfile/t.csv"
# (b) a read-only folder (chmod 555): for root, chmod does not stop writes, so it is tested
#     only when it actually refuses a write
RO="$TMP/dossier protégé"
mkdir -p "$RO"
chmod 555 "$RO"
if ( : >"$RO/probe" ) 2>/dev/null; then
  rm -f "$RO/probe"
  echo "note: running with privileges that ignore folder permissions (root?): read-only folder test skipped; case (a) and (c) cover the refusal"
else
  for cmd in "fit $S --model lorentz+lorentz --quiet --json" "fit $S --model lorentz+lorentz --quiet --table" \
             "info $S --json"; do
    # shellcheck disable=SC2086
    expect_code 3 "$CS_BIN" $cmd "$RO/out file"
    expect_in "$TMP/err" "$RO/out file"
    expect_in "$TMP/err" "Permission denied"
  done
  expect_code 3 "$CS_BIN" split "$CS_SOURCE_DIR/spectra/synthetic_burst_record.csv" --no-pencil --table "$RO/t.csv"
  expect_in "$TMP/err" "$RO/t.csv"
  [ -z "$(ls -A "$RO")" ] && ok || bad "files left in the read-only folder: $(ls -A "$RO")"
fi
chmod 755 "$RO"
[ -z "$(ls -A "$RO")" ] && ok || bad "files left in the read-only folder: $(ls -A "$RO")"
# (c) a path under /proc, where no file can be created (root included)
if [ -d /proc/self ]; then
  expect_code 3 "$CS_BIN" info "$S" --json /proc/self/collshift_out.json
  expect_in "$TMP/err" "/proc/self/collshift_out.json"
fi
# no temporary files (".tmp.") left anywhere in the test folder
left=$(find "$TMP" -name '*.tmp.*' | head -n 3)
[ -z "$left" ] && ok || bad "temporary files left: $left"

finish
