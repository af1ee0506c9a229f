#!/usr/bin/env bash
# End-to-end: `collshift predict` (theory estimates): values against ../shared/guide/physics.md,
# JSON field names, the line list, and usage errors (exit 2). Each expected value repeats the mark
# physics.md gives it.
. "$(dirname "$0")/lib.bash"

# help, conventions and the line list
expect_code 0 "$CS_BIN" predict --help;    expect_in "$TMP/out" "usage: collshift predict"
expect_in "$TMP/out" "negative = red"
expect_in "$TMP/out" "FWHM"
expect_code 0 "$CS_BIN" help predict;      expect_in "$TMP/out" "--temperature T"
cp "$TMP/out" "$TMP/help"
expect_code 0 "$CS_BIN" predict --list-lines
for l in rb87-d1 rb87-d2 rb85-d1 rb85-d2 cs-d1 cs-d2 cs-d1-old cs-d2-old k39-d1 k39-d2 na-d1 na-d2 \
         sr-461 sr-689 ca-423; do
  expect_in "$TMP/out" "$l"
done
# every listed line is named in --help
awk 'NR > 1 && $1 !~ /^aliases/ {print $1}' "$TMP/out" >"$TMP/names"
[ -s "$TMP/names" ] && ok || bad "no lines listed"
while read -r l; do expect_in "$TMP/help" "$l"; done <"$TMP/names"

# physics.md sect. 1 worked example (computed here): Rb D2 at N = 1e16 cm^-3, Delta_LL/2pi = -243 MHz;
# sect. 3 (computed here): self-broadening 1.03 GHz FWHM
expect_code 0 "$CS_BIN" predict --line rb87-d2 --density 1e16cm^-3 --json "$TMP/rb.json"
expect_in "$TMP/out" "-243.3 MHz"
expect_in "$TMP/out" "Lorentz-Lorenz shift"
expect_in "$TMP/out" "Andreoli et al. 2021"
expect_in "$TMP/out" "shift = measured minus unperturbed, negative = red"
expect_in "$TMP/out" "needs the slab thickness"
python3 - "$TMP/rb.json" <<'PY' && ok || bad "Rb D2 JSON"
import json, sys
d = json.load(open(sys.argv[1]))
assert d["command"] == "predict" and "negative = red" in d["conventions"]
# one field per estimate, named with its unit (architecture.md, stable interface)
for k in ["lorentz_lorenz_shift_hz", "cooperative_lamb_shift_hz", "self_broadening_fwhm_hz",
          "lorentz_lorenz_coefficient_hz_cm3", "cooperative_lamb_coefficient_hz_cm3",
          "self_broadening_coefficient_hz_cm3", "single_atom_decay_rate_per_s",
          "collective_decay_rate_per_s", "burst_delay_s", "burst_fwhm_s",
          "trapping_rate_slab_doppler_per_s", "trapping_rate_cylinder_lorentz_per_s", "optical_depth"]:
    assert k in d, k
assert abs(d["lorentz_lorenz_shift_hz"] + 243e6) <= 0.5e6, d["lorentz_lorenz_shift_hz"]
# physics.md sect. 1 table (computed here): -0.2433e-7 Hz cm^3; sect. 3 (computed here): 1.0323e-7
assert abs(d["lorentz_lorenz_coefficient_hz_cm3"] + 0.2433e-7) <= 0.5e-11
assert abs(d["self_broadening_coefficient_hz_cm3"] - 1.0323e-7) <= 0.5e-11
assert abs(d["self_broadening_fwhm_hz"] - 1.03e9) <= 5e6
# without a thickness there is no CLS number, and the list says why
assert d["cooperative_lamb_shift_hz"] is None
e = {x["name"]: x for x in d["estimates"]}
assert e["cooperative_lamb_shift_hz"]["status"] == "needs_input"
assert "thickness" in e["cooperative_lamb_shift_hz"]["note"]
assert e["lorentz_lorenz_shift_hz"]["status"] == "ok" and "Andreoli" in e["lorentz_lorenz_shift_hz"]["source"]
# the line data and their sources
l = d["line"]
assert l["name"] == "rb87-d2" and l["jg"] == 0.5 and l["je"] == 1.5
assert abs(l["wavelength_m"] - 780.241209686e-9) < 1e-18   # physics.md sect. 7 (C')
assert "Steck" in l["source"] and "confirmed" in l["mark"]
# Steck's f = 0.69577 (confirmed in stored source, Rb85 rev. 2.2.3, Table 3)
assert abs(l["oscillator_strength"] - 0.69577) < 1e-4
assert d["inputs"]["density_per_cm3"] == 1e16 and d["inputs"]["density_origin"] == "given"
PY

# slab of 250 nm: Delta_CLS/Delta_LL = -0.89414, total 0.10586 (physics.md sect. 2, computed here
# for lambda = 780.241 nm; half a unit in the 5th decimal)
expect_code 0 "$CS_BIN" predict --line rb87-d2 --density 1e16cm^-3 --thickness 250nm --json "$TMP/slab.json"
expect_in "$TMP/out" "model-dependent"
python3 - "$TMP/slab.json" <<'PY' && ok || bad "slab JSON"
import json, sys
d = json.load(open(sys.argv[1]))
ll = d["lorentz_lorenz_shift_hz"]
assert abs(d["cooperative_lamb_shift_hz"] / ll + 0.89414) <= 5e-6
assert abs(d["slab_shift_hz"] / ll - 0.10586) <= 5e-6
assert abs(d["inputs"]["thickness_m"] - 250e-9) < 1e-21
PY

# density from the vapour pressure (physics.md sect. 6, computed here): Rb at 100 degC 6.014e12 cm^-3,
# Cs at 25 degC 4.894e10 cm^-3; a temperature in K works the same
expect_code 0 "$CS_BIN" predict --line rb87-d2 --temperature 100degC --json "$TMP/vp.json"
expect_in "$TMP/out" "from the vapour pressure"
expect_in "$TMP/out" "Alcock"
python3 - "$TMP/vp.json" <<'PY' && ok || bad "vapour JSON (Rb)"
import json, sys
d = json.load(open(sys.argv[1]))
i = d["inputs"]
assert i["density_origin"] == "vapour_pressure" and i["vapour"]["phase"] == "liquid"
assert abs(i["density_per_cm3"] - 6.014e12) <= 0.0005e12 * 1.0001, i["density_per_cm3"]
assert abs(i["vapour"]["pressure_torr"] - 2.324e-4) <= 0.0005e-4 * 1.0001
assert d["doppler_fwhm_hz"] is not None and d["doppler_fwhm_hz"] > 0
PY
expect_code 0 "$CS_BIN" predict --line CS-D2 --temperature 298.15K --json "$TMP/cs.json"
python3 - "$TMP/cs.json" <<'PY' && ok || bad "vapour JSON (Cs)"
import json, sys
d = json.load(open(sys.argv[1]))
assert abs(d["inputs"]["density_per_cm3"] - 4.894e10) <= 0.0005e10 * 1.0001
assert d["inputs"]["vapour"]["phase"] == "solid" and d["line"]["name"] == "cs-d2"
PY

# a user-specified two-level line: physics.md sect. 1 (computed here), lambda = 780.241 nm,
# Gamma0/2pi = 6.0666 MHz: -0.3650e-7 Hz cm^3, so -365.0 MHz at 1e16 cm^-3
expect_code 0 "$CS_BIN" predict --wavelength 780.241nm --gamma 6.0666MHz --jg 0 --je 1 --density 1e16cm^-3 --json "$TMP/tl.json"
expect_in "$TMP/out" "user-specified"
python3 - "$TMP/tl.json" <<'PY' && ok || bad "two-level JSON"
import json, sys
d = json.load(open(sys.argv[1]))
assert abs(d["lorentz_lorenz_coefficient_hz_cm3"] + 0.3650e-7) <= 0.5e-11
assert d["line"]["name"] == "custom" and d["line"]["element"] is None
assert sorted(d["line"]["user_specified"]) == ["gamma0", "j", "wavelength"]
assert d["doppler_fwhm_hz"] is None     # no mass given
PY
# from Steck's reduced dipole 4.227 53 e a0 (confirmed in stored source, Rb85 rev. 2.2.3, Table 7):
# Gamma0 = 2 pi x 6.0666 MHz within the printed uncertainties (5e-4); a frequency and a lifetime work too
expect_code 0 "$CS_BIN" predict --wavelength 780.241368271nm --dipole 4.22753ea0 --jg 1/2 --je 3/2 --density 1e12cm^-3 --json "$TMP/d.json"
python3 - "$TMP/d.json" <<'PY' && ok || bad "dipole JSON"
import json, sys, math
d = json.load(open(sys.argv[1]))
g = d["line"]["gamma0_per_s"]
assert abs(g / (2 * math.pi * 6.0666e6) - 1) < 5e-4, g
PY
expect_code 0 "$CS_BIN" predict --frequency 384.2304844685THz --gamma 26.2348ns --jg 1/2 --je 3/2 --density 1e12cm^-3 --json "$TMP/f.json"
python3 - "$TMP/f.json" <<'PY' && ok || bad "frequency/lifetime JSON"
import json, sys
d = json.load(open(sys.argv[1]))
assert abs(d["line"]["frequency_hz"] / 384.2304844685e12 - 1) < 1e-15
assert abs(d["line"]["lifetime_s"] / 26.2348e-9 - 1) < 1e-12
PY
# changes to a table line: the Cs D2 line with the older width
expect_code 0 "$CS_BIN" predict --line cs-d2 --gamma 5.2227MHz --density 1e16cm^-3 --json "$TMP/o.json"
python3 - "$TMP/o.json" <<'PY' && ok || bad "override JSON"
import json, sys
d = json.load(open(sys.argv[1]))
# physics.md sect. 1 table, Cs D2 with Gamma/2pi = 5.2227 MHz: -0.2731e-7 Hz cm^3 (computed here)
assert abs(d["lorentz_lorenz_coefficient_hz_cm3"] + 0.2731e-7) <= 0.5e-11
assert d["line"]["user_specified"] == ["gamma0"] and d["line"]["name"] == "cs-d2"
PY

# superradiance, physics.md sect. 4 worked example (computed here): lambda = 780 nm, Gamma0/2pi =
# 6.0666 MHz, N = 1e6, R = 20 um: T_R = 0.45396 ns, t_D = T_R ln N = 6.2716 ns, N mu = 57.791
expect_code 0 "$CS_BIN" predict --wavelength 780nm --gamma 6.0666MHz --jg 0 --je 1 --density 0cm^-3 \
  --atoms 1e6 --radius 20um --json -
python3 - "$TMP/out" <<'PY' && ok || bad "superradiance JSON (stdout)"
import json, sys
d = json.load(open(sys.argv[1]))   # '--json -' writes the JSON alone
assert abs(d["superradiance_time_s"] - 0.45396e-9) <= 0.5e-14 * 1.0001, d["superradiance_time_s"]
assert abs(d["burst_delay_s"] - 6.2716e-9) <= 0.5e-13 * 1.0001
assert abs(d["collective_enhancement"] - 57.791) <= 0.5e-3 * 1.0001
assert abs(d["pencil_optical_depth"] / d["collective_enhancement"] - 4) < 1e-12   # N mu = OD/4
assert d["lorentz_lorenz_shift_hz"] == 0.0
PY

# usage errors (exit 2)
expect_code 2 "$CS_BIN" predict;                               expect_in "$TMP/err" "no line given"
expect_code 2 "$CS_BIN" predict --line rb87-d2;                expect_in "$TMP/err" "--density"
expect_code 2 "$CS_BIN" predict --line xx-d9 --density 1e12cm^-3; expect_in "$TMP/err" "unknown line 'xx-d9'"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12; expect_in "$TMP/err" "--density '1e12'"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density -1cm^-3; expect_in "$TMP/err" "must not be negative"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 --thickness 5GHz; expect_in "$TMP/err" "--thickness '5GHz'"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 --thickness 0nm; expect_in "$TMP/err" "must be positive"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 --bogus; expect_in "$TMP/err" "unknown option"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 extra; expect_in "$TMP/err" "unexpected argument 'extra'"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density;      expect_in "$TMP/err" "needs a value"
expect_code 2 "$CS_BIN" predict --line sr-461 --temperature 600K; expect_in "$TMP/err" "no vapour-pressure formula"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --temperature 0K; expect_in "$TMP/err" "--temperature '0K'"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --temperature 400K --phase gas; expect_in "$TMP/err" "--phase 'gas'"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --gamma 6MHz --density 1e12cm^-3; expect_in "$TMP/err" "J_g"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --gamma 6MHz --jg 0.3 --je 1 --density 1e12cm^-3; expect_in "$TMP/err" "multiple of 1/2"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --gamma 6MHz --jg 0 --je 0 --density 1e12cm^-3; expect_in "$TMP/err" "electric-dipole"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --gamma 6kg --jg 0 --je 1 --density 1e12cm^-3; expect_in "$TMP/err" "--gamma '6kg'"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --dipole 4.2 --jg 0 --je 1 --density 1e12cm^-3; expect_in "$TMP/err" "--dipole '4.2'"
expect_code 2 "$CS_BIN" predict --wavelength 780nm --gamma 6MHz --dipole 4ea0 --jg 0 --je 1 --density 1e12cm^-3; expect_in "$TMP/err" "not both"
expect_code 2 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 --atoms -3; expect_in "$TMP/err" "--atoms '-3'"
expect_code 2 "$CS_BIN" predict --frequency 5nm --gamma 6MHz --jg 0 --je 1 --density 1e12cm^-3; expect_in "$TMP/err" "--frequency '5nm'"

# an unwritable JSON path is a data error (exit 3)
expect_code 3 "$CS_BIN" predict --line rb87-d2 --density 1e12cm^-3 --json "$TMP/no/such/dir/x.json"

finish
