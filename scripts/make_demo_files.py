#!/usr/bin/env python3
"""Writes the small synthetic demo files in spectra/ (an invented scenario; standard library only).

Used until `collshift simulate` exists. Reproducible: fixed seed. The true values are written into
each file's metadata lines, prefixed 'true_'.
"""
import cmath
import math
import random
import sys
from pathlib import Path

out = Path(sys.argv[1] if len(sys.argv) > 1 else "spectra")
rng = random.Random(20261201)

# --- spectrum: broad (burst-era) + narrow (tail-era) Lorentzian on a sloping baseline
ref_hz = 384.2304844685e12          # reference line centre (Rb-87 D2-like; invented scenario)
broad = dict(center=-180e6, fwhm=420e6, area=2.0e9)   # shift from ref, FWHM, area (counts * Hz)
narrow = dict(center=-45e6, fwhm=38e6, area=0.9e9)
def lor(x, center, fwhm, area):
    return area * (fwhm / (2 * math.pi)) / ((x - center) ** 2 + (fwhm / 2) ** 2)
lines = [
    "# synthetic = yes: invented scenario, not a measurement",
    "# scenario = emission of a 150 nm vapour layer after a short pump pulse (invented)",
    "# density = 3.0e14 cm^-3",
    "# temperature = 493 K",
    "# thickness = 150 nm",
    "# reference = %.10f GHz" % (ref_hz / 1e9),
    "# true_broad_center = %.4f MHz" % ((ref_hz + broad['center']) / 1e6),
    "# true_broad_fwhm = %.6g MHz" % (broad['fwhm'] / 1e6),
    "# true_narrow_center = %.4f MHz" % ((ref_hz + narrow['center']) / 1e6),
    "# true_narrow_fwhm = %.6g MHz" % (narrow['fwhm'] / 1e6),
    "# noise_sigma = 2.0",
    "frequency_ghz,counts,sigma",
]
n = 1201
for k in range(n):
    d = -1.5e9 + 3.0e9 * k / (n - 1)
    y = 50.0 + 4.0 * d / 1e9 + lor(d, **broad) + lor(d, **narrow)
    y += rng.gauss(0.0, 2.0)
    lines.append("%.10f,%.4f,2.0" % ((ref_hz + d) / 1e9, y))
(out / "synthetic_broad_narrow_spectrum.csv").write_text("\n".join(lines) + "\n")

# --- record: complex I/Q after heterodyne mixing; a sech burst then an exponential tail
rate = 500e6
nrec = 8192
lo_hz = ref_hz - 250e6               # local oscillator below the line
burst = dict(t0=1.0e-6, tau=40e-9, f=ref_hz + broad['center'] - lo_hz, amp=1.0)
# tail: intensity decay rate Gamma = 2 pi x 1.5 MHz (line FWHM 1.5 MHz); the amplitude decays at Gamma/2
tail_fwhm = 1.5e6
tail = dict(t0=1.1e-6, gamma=math.pi * tail_fwhm, f=ref_hz + narrow['center'] - lo_hz, amp=0.3)
lines = [
    "# synthetic = yes: invented scenario, not a measurement",
    "# scenario = heterodyne record of a superradiant burst and its tail (invented)",
    "# density = 3.0e14 cm^-3",
    "# sample_rate = 500 MHz",
    "# lo = %.10f GHz" % (lo_hz / 1e9),
    "# reference = %.10f GHz" % (ref_hz / 1e9),
    "# true_burst_offset = %.6g MHz" % (burst['f'] / 1e6),
    "# true_tail_offset = %.6g MHz" % (tail['f'] / 1e6),
    "# true_tail_fwhm = %.6g MHz" % (tail_fwhm / 1e6),
    "# true_burst_tau = %.6g ns" % (burst['tau'] * 1e9),
    "time_us,i,q",
]
for k in range(nrec):
    t = k / rate
    z = burst['amp'] / math.cosh((t - burst['t0']) / burst['tau']) * cmath.exp(2j * math.pi * burst['f'] * t)
    if t >= tail['t0']:
        z += tail['amp'] * math.exp(-tail['gamma'] * (t - tail['t0'])) * cmath.exp(2j * math.pi * tail['f'] * t)
    z += complex(rng.gauss(0, 0.01), rng.gauss(0, 0.01))
    lines.append("%.6f,%.6f,%.6f" % (t * 1e6, z.real, z.imag))
(out / "synthetic_burst_record.csv").write_text("\n".join(lines) + "\n")
