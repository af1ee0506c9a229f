#!/usr/bin/env bash
# End-to-end: `collshift series` on the bundled synthetic demo campaign (spectra/campaign/, made by
# `collshift simulate`, see spectra/README.md) recovers the density slopes it was generated with.
# The true slopes are computed here from truth.csv by an independent straight-line fit of the
# true centres and widths against density (ordinary least squares, handbook formula).
. "$(dirname "$0")/lib.bash"
C="$CS_SOURCE_DIR/spectra/campaign"

expect_code 0 "$CS_BIN" series "$C/spectra/manifest.csv" --line rb87-d2 --json "$TMP/s.json" --table "$TMP/s.csv"
expect_code 0 "$CS_BIN" series "$C/records/manifest.csv" --line rb87-d2 --threads 2 --json "$TMP/r.json"
python3 - "$C" "$TMP/s.json" "$TMP/r.json" <<'PY' && ok || bad "campaign slopes against truth"
import csv, json, sys
C = sys.argv[1]
def true_slope(kind, col):
    rows = list(csv.DictReader(open(f"{C}/{kind}/truth.csv")))
    x = [float(r["density_cm^-3"]) for r in rows]; y = [float(r[col]) for r in rows]
    mx = sum(x) / len(x); my = sum(y) / len(y)
    return sum((a - mx) * (b - my) for a, b in zip(x, y)) / sum((a - mx) ** 2 for a in x)
def check(kind, path, pairs):
    regs = {(r["era"], r["quantity"]): r for r in json.load(open(path))["regressions"]}
    for (era, q), col in pairs:
        r = regs[(era, q)]; t = true_slope(kind, col)
        z = (r["slope_hz_cm3"] - t) / r["slope_hz_cm3_err"]
        print(f"{kind} {era} {q}: {r['slope_hz_cm3']:.5g} +- {r['slope_hz_cm3_err']:.2g} (truth {t:.5g}, {z:+.2f} sigma)")
        assert abs(z) < 4, (kind, era, q, z)
check("spectra", sys.argv[2], [(("burst", "center"), "burst_center_hz"), (("burst", "fwhm"), "burst_fwhm_hz"),
                                (("tail", "center"), "tail_center_hz"), (("tail", "fwhm"), "tail_fwhm_hz")])
check("records", sys.argv[3], [(("burst", "center"), "burst_center_hz"), (("burst", "fwhm"), "burst_fwhm_hz"),
                                (("tail", "center"), "tail_center_hz"), (("tail", "fwhm"), "tail_fwhm_hz")])
t = json.load(open(sys.argv[2]))["theory"]
assert t, "theory block missing"
PY
finish
