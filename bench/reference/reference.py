#!/usr/bin/env python3
"""Python reference (numpy + scipy) of collshift's three benchmark tasks (issue 8), run by
bench/compare on the same inputs as the C side. Every command prints one JSON object per line.

  reference.py gate [--log2n 20] [--reps 7]
      early + late gated spectra (Hann, periodic; x2 zero padding to an even 2^a 3^b 5^c 7^d
      length, as collshift) of the 2^20-sample complex record bench_gate builds (the same
      deterministic formula, no random numbers), timed, and one bare numpy FFT of the late gate's
      padded length timed in the same run.
  reference.py make-spectrum FILE
      write the fit task's spectrum (the model of bench_fit.c: Voigt + Lorentzian + linear
      baseline on 2048 points, Gaussian noise of sigma 1, fixed seed) as frequency_hz,y,sigma.
  reference.py fit FILE [--reps 30]
      Voigt + Lorentzian + linear baseline fitted to FILE with scipy.optimize.least_squares
      (method "trf", analytic Jacobian; the Voigt through scipy.special.wofz, w evaluated once per
      point per iteration, its derivative from w' = -2 z w + 2i/sqrt(pi)), weights 1/sigma^2.
      Starting values: the simple automatic guess in guess() below (baseline from the wings,
      the narrow line at the highest point, the broad line from what is left), i.e. estimated
      from the data as collshift's automatic guess is, not from the true values.
  reference.py campaign DIR [--records K]
      for each DIR/synthetic_record_*.csv (the first K, sorted): numpy.loadtxt, envelope,
      burst, early gate (peak-2w, 4w, hann) and late gate (end+3w to the end, rect) spectra,
      and a Lorentzian + constant floor least-squares fit of the late (tail) spectrum.
      This is a SUBSET of collshift's split pipeline (no gate-aware fits, no whole-record
      fit, no pencil), so the ratio it gives is conservative for collshift.
  reference.py check C_JSON PY_JSON
      compare the fitted values of `collshift fit --json` with the reference's fit, in units of
      collshift's standard errors; exit status 1 when one differs by more than 0.01.
"""
import argparse
import glob
import json
import math
import os
import sys
import time

import numpy as np
from scipy.optimize import least_squares
from scipy.special import wofz

SQRT_PI = math.sqrt(math.pi)
SQRT_LN2 = math.sqrt(math.log(2.0))


def emit(obj):
    print(json.dumps(obj), flush=True)


# --------------------------------------------------------------------------- gated spectra

def fast_even_len(n):
    """Smallest even N >= n of the form 2^a 3^b 5^c 7^d (collshift's default)."""
    n = max(int(n), 2)
    while True:
        if n % 2 == 0:
            m = n
            for p in (2, 3, 5, 7):
                while m % p == 0:
                    m //= p
            if m == 1:
                return n
        n += 1


def hann_periodic(m):
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(m) / m)


def gated_psd(z, first, m, window, pad, dt):
    """One-gate PSD: window, zero-pad to an even fast length, FFT, fftshift, |X|^2 dt / sum w^2."""
    nfft = fast_even_len(pad * m)
    buf = np.zeros(nfft, dtype=np.complex128)
    buf[:m] = z[first:first + m] * window
    x = np.fft.fftshift(np.fft.fft(buf))
    psd = (x.real ** 2 + x.imag ** 2) * (dt / np.dot(window, window))
    freq = np.fft.fftshift(np.fft.fftfreq(nfft, dt))
    return freq, psd


def cmd_gate(a):
    n = 1 << a.log2n
    dt = 2e-9
    t = np.arange(n) * dt
    tp, tau = 0.02 * n * dt, 40e-9
    with np.errstate(over="ignore"):   # cosh overflows far from the burst: 1/inf = 0, as in C
        z = np.exp(2j * 3.14159265358979 * 70e6 * t) / np.cosh((t - tp) / tau)
    late = t > tp
    z[late] += 0.3 * np.exp(-3e6 * (t[late] - tp)) * np.exp(2j * 3.14159265358979 * 205e6 * t[late])
    j = np.arange(n)
    z = z + 1e-3 * np.sin(0.37 * j) + 1j * 1e-3 * np.cos(0.41 * j)
    T = n * dt
    gates = [(tp - 4 * tau, 8 * tau), (tp + 10 * tau, T - (tp + 10 * tau) - dt)]
    spans = []
    for start, length in gates:
        first = int(math.ceil(start / dt - 1e-9))
        m = int(math.floor((start + length) / dt + 1e-9)) - first + 1
        m = min(m, n - first)
        spans.append((first, m))
    nfft_late = fast_even_len(2 * spans[1][1])
    bare_in = np.zeros(nfft_late, dtype=np.complex128)
    bare_in[:n] = z[:nfft_late] if nfft_late < n else z
    tg, tf = [], []
    for _ in range(a.reps):
        t0 = time.perf_counter()
        for first, m in spans:   # the window is recomputed per call, as a per-record tool does
            gated_psd(z, first, m, hann_periodic(m), 2, dt)
        tg.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        np.fft.fft(bare_in)
        tf.append(time.perf_counter() - t0)
    g, f = float(np.median(tg)), float(np.median(tf))
    emit({"ref": "gate", "samples": n, "nfft_late": nfft_late, "gated_ms_median": 1e3 * g,
          "bare_fft_ms_median": 1e3 * f, "ratio_median": g / f, "records_per_s": 1.0 / g})


# --------------------------------------------------------------------------- profiles

def voigt_jac(x, c, fg, fl):
    """Unit-area Voigt and its derivatives with respect to (c, fg, fl) (profile.h conventions)."""
    s = fg / (2.0 * SQRT_LN2)
    g = 0.5 * fl
    zz = ((x - c) + 1j * g) / s
    w = wofz(zz)                                   # once per point per evaluation
    wp = -2.0 * zz * w + 2j / SQRT_PI
    norm = 1.0 / (s * SQRT_PI)
    v = w.real * norm
    dv_du = wp.real * norm / s
    dv_dg = -wp.imag * norm / s
    dv_ds = (wp * (-zz / s)).real * norm - v / s
    return v, -dv_du, dv_ds / (2.0 * SQRT_LN2), 0.5 * dv_dg


def lorentz_jac(x, c, f):
    h = 0.5 * f
    u = x - c
    d = u * u + h * h
    v = (h / math.pi) / d
    dv_dc = (h / math.pi) * 2.0 * u / (d * d)
    dv_dh = (u * u - h * h) / (math.pi * d * d)
    return v, dv_dc, 0.5 * dv_dh


# --------------------------------------------------------------------------- fit task

SCALE = 1e6   # the fit works in MHz (x, centres, widths) and y*MHz (areas), then converts


def read_spectrum(path):
    with open(path) as fh:
        line = fh.readline()
        while line.startswith("#"):
            line = fh.readline()
        data = np.loadtxt(fh, delimiter=",", ndmin=2)
    x, y = data[:, 0], data[:, 1]
    s = data[:, 2] if data.shape[1] > 2 else np.ones_like(y)
    return x, y, s


def guess(u, y):
    """Automatic starting values from the data (u in MHz from the middle of the axis)."""
    n = len(u)
    k = max(n // 10, 3)
    wings = np.r_[0:k, n - k:n]
    c1, c0 = np.polyfit(u[wings], y[wings], 1)
    r = y - (c0 + c1 * u)

    def line_at(res, box):
        sm = np.convolve(res, np.ones(box) / box, mode="same")
        i = int(np.argmax(sm))
        h = sm[i]
        lo = i
        while lo > 0 and sm[lo] > 0.5 * h:
            lo -= 1
        hi = i
        while hi < n - 1 and sm[hi] > 0.5 * h:
            hi += 1
        return u[i], max(u[hi] - u[lo], 2 * (u[1] - u[0])), h

    c2, f2, h2 = line_at(r, 5)                       # the narrow line: the highest point
    a2 = h2 * math.pi * f2 / 2.0
    r2 = r - a2 * lorentz_jac(u, c2, f2)[0]
    c1v, f1, h1 = line_at(r2, 51)                    # the broad line: what is left
    a1 = h1 * f1 * 1.2
    return np.array([c1v, f1 / 1.6, f1 / 1.6, a1, c2, f2, a2, c0, c1])


def model_fun(p, u, y, s):
    v, _, _, _ = voigt_jac(u, p[0], p[1], p[2])
    l, _, _ = lorentz_jac(u, p[4], p[5])
    return (p[7] + p[8] * u + p[3] * v + p[6] * l - y) / s


def model_jac(p, u, y, s):
    v, dc, dfg, dfl = voigt_jac(u, p[0], p[1], p[2])
    l, lc, lf = lorentz_jac(u, p[4], p[5])
    J = np.empty((len(u), 9))
    J[:, 0] = p[3] * dc
    J[:, 1] = p[3] * dfg
    J[:, 2] = p[3] * dfl
    J[:, 3] = v
    J[:, 4] = p[6] * lc
    J[:, 5] = p[6] * lf
    J[:, 6] = l
    J[:, 7] = 1.0
    J[:, 8] = u
    return J / s[:, None]


def fit_once(u, y, s):
    p0 = guess(u, y)
    r = least_squares(model_fun, p0, jac=model_jac, args=(u, y, s), method="trf",
                      x_scale="jac", xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=500)
    return p0, r


def cmd_fit(a):
    x, y, s = read_spectrum(a.file)
    x_ref = 0.5 * (x[0] + x[-1])
    u = (x - x_ref) / SCALE
    p0, r = fit_once(u, y, s)
    times = []
    for _ in range(a.reps):
        t0 = time.perf_counter()
        fit_once(u, y, s)      # guess + fit, as `collshift fit` times both
        times.append(time.perf_counter() - t0)
    J = r.jac
    cov = np.linalg.inv(J.T @ J)    # sigma weights: errors as the stated sigma imply (unscaled)
    err = np.sqrt(np.diag(cov))
    sc = np.array([SCALE, SCALE, SCALE, SCALE, SCALE, SCALE, SCALE, 1.0, 1.0 / SCALE])
    val = r.x * sc
    val[0] += x_ref
    val[4] += x_ref
    names = ["1.center", "1.fwhm_g", "1.fwhm_l", "1.area", "2.center", "2.fwhm", "2.area",
             "base.c0", "base.c1"]
    st = sc * p0
    st[0] += x_ref
    st[4] += x_ref
    med = float(np.median(times))
    emit({"ref": "fit", "file": a.file, "points": len(x), "success": bool(r.success),
          "nfev": int(r.nfev), "chi2": float(2 * r.cost), "x_ref_hz": x_ref,
          "median_ms": 1e3 * med, "fits_per_s": 1.0 / med,
          "values": dict(zip(names, map(float, val))),
          "errors": dict(zip(names, map(float, err * sc))),
          "start": dict(zip(names, map(float, st)))})


def cmd_make_spectrum(a):
    rng = np.random.default_rng(20240808)
    n = 2048
    x = -1.5e9 + 3e9 * np.arange(n) / (n - 1)
    v = voigt_jac(x / SCALE, -30.0, 150.0, 200.0)[0] / SCALE
    l = lorentz_jac(x / SCALE, 30.0, 25.0)[0] / SCALE
    y = 20.0 + 2e-9 * x + 1.0e9 * v + 0.3e9 * l + rng.normal(0.0, 1.0, n)
    with open(a.file, "w") as fh:
        fh.write("# synthetic = yes (bench/reference/reference.py make-spectrum: voigt + lorentz + "
                 "linear, sigma 1)\n")
        fh.write("frequency_hz,y,sigma\n")
        for xi, yi in zip(x, y):
            fh.write("%.17g,%.17g,1\n" % (xi, yi))


def cmd_check(a):
    with open(a.c_json) as fh:
        text = fh.read()   # `--json -` follows the human-readable summary on standard output
    start = text.find("\n{") + 1 if not text.startswith("{") else 0
    c = json.loads(text[start:])
    with open(a.py_json) as fh:
        p = json.loads(fh.read().strip().splitlines()[-1])
    f = c["fits"][0] if "fits" in c else c
    cval = {q["name"]: (q["value"], q["err"]) for q in f["parameters"]}
    # the baseline's origin: collshift's x_ref; move the reference's c0 there
    cref = f.get("baseline", {}).get("x_ref_hz", p["x_ref_hz"])
    pv = dict(p["values"])
    pv["base.c0"] = pv["base.c0"] + pv["base.c1"] * (cref - p["x_ref_hz"])
    worst, rows = 0.0, {}
    for name, v in pv.items():
        if name not in cval:
            continue
        cv, ce = cval[name]
        d = (v - cv) / ce if ce and ce > 0 else float("nan")
        rows[name] = {"collshift": cv, "collshift_err": ce, "reference": v,
                      "diff_in_err": d}
        worst = max(worst, abs(d)) if not math.isnan(d) else float("inf")
    ok = worst <= 0.01
    emit({"check": "fit_values", "max_abs_diff_in_err": worst, "within_0.01_err": ok,
          "collshift_status": f.get("status"), "collshift_iterations": f.get("iterations"),
          "parameters": rows})
    return 0 if ok else 1


# --------------------------------------------------------------------------- campaign

def read_record(path):
    meta_lo = 0.0
    with open(path) as fh:
        line = fh.readline()
        while line.startswith("#"):
            line = fh.readline()
        header = [h.strip() for h in line.split(",")]
        data = np.loadtxt(fh, delimiter=",")
    tscale = 1e-6 if header[0].endswith("_us") else 1e-9 if header[0].endswith("_ns") else 1.0
    t = data[:, 0] * tscale
    return t, data[:, 1] + 1j * data[:, 2], meta_lo


def tail_fit(freq, psd):
    """Lorentzian + constant floor fitted to a PSD (equal weights)."""
    floor = float(np.median(psd))
    i = int(np.argmax(psd))
    df = freq[1] - freq[0]
    u = (freq - freq[i]) / SCALE
    h = psd[i] - floor
    p0 = np.array([0.0, 1.0, max(h, floor) * math.pi * 0.5, floor])
    sc = max(floor, 1e-300)

    def fun(p):
        return (p[3] + p[2] * lorentz_jac(u, p[0], p[1])[0] - psd) / sc

    def jac(p):
        l, lc, lf = lorentz_jac(u, p[0], p[1])
        return np.column_stack([p[2] * lc, p[2] * lf, l, np.ones_like(u)]) / sc

    r = least_squares(fun, p0, jac=jac, method="trf", x_scale="jac")
    return freq[i] + r.x[0] * SCALE, abs(r.x[1]) * SCALE, r.success, df


def analyse(t, z):
    dt = t[1] - t[0]
    n = len(z)
    p = z.real ** 2 + z.imag ** 2
    box = 32
    env = np.convolve(p, np.ones(box) / box, mode="same")
    ip = int(np.argmax(env))
    floor = float(np.median(env))
    half = floor + 0.5 * (env[ip] - floor)
    lo = ip
    while lo > 0 and env[lo] > half:
        lo -= 1
    hi = ip
    while hi < n - 1 and env[hi] > half:
        hi += 1
    w = max(hi - lo, 1)
    e_first = max(ip - 2 * w, 0)
    e_m = min(4 * w, n - e_first)
    l_first = min(hi + 3 * w, n - 16)
    l_m = n - l_first
    gated_psd(z, e_first, e_m, hann_periodic(e_m), 2, dt)
    freq, psd = gated_psd(z, l_first, l_m, np.ones(l_m), 2, dt)
    return tail_fit(freq, psd)


def cmd_campaign(a):
    files = sorted(glob.glob(os.path.join(a.dir, "synthetic_record_*.csv")))[:a.records]
    if not files:
        sys.exit("reference: no synthetic_record_*.csv in " + a.dir)
    t0 = time.perf_counter()
    tload = 0.0
    ok = 0
    nbytes = 0
    for path in files:
        t1 = time.perf_counter()
        t, z, _ = read_record(path)
        tload += time.perf_counter() - t1
        nbytes += os.path.getsize(path)
        c, f, good, _ = analyse(t, z)
        ok += bool(good)
    wall = time.perf_counter() - t0
    emit({"ref": "campaign", "records": len(files), "samples": int(len(z)), "seconds": wall,
          "records_per_s": len(files) / wall, "load_fraction": tload / wall,
          "loadtxt_mb_per_s": nbytes / 1e6 / tload, "ok": ok,
          "tail_center_offset_hz_last": float(c), "tail_fwhm_hz_last": float(f)})


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="cmd", required=True)
    g = sub.add_parser("gate")
    g.add_argument("--log2n", type=int, default=20)
    g.add_argument("--reps", type=int, default=7)
    f = sub.add_parser("fit")
    f.add_argument("file")
    f.add_argument("--reps", type=int, default=30)
    m = sub.add_parser("make-spectrum")
    m.add_argument("file")
    c = sub.add_parser("campaign")
    c.add_argument("dir")
    c.add_argument("--records", type=int, default=1 << 30)
    k = sub.add_parser("check")
    k.add_argument("c_json")
    k.add_argument("py_json")
    a = ap.parse_args()
    return {"gate": cmd_gate, "fit": cmd_fit, "make-spectrum": cmd_make_spectrum,
            "campaign": cmd_campaign, "check": cmd_check}[a.cmd](a) or 0


if __name__ == "__main__":
    sys.exit(main())
