#!/usr/bin/python3
"""Numbers behind configs/kiln.yaml (an invented works, Brackwater Steelworks' lime kiln).

Run with Debian's interpreter: /usr/bin/python3 configs/kiln_values.py

The kiln-exit head's short channel is calibrated against a blackbody: its
certificate table (configs/kiln-exit-short.csv) holds the signal counts of
an ideal 0.85-0.95 um band at a gain of 2e3 counts per W.m^-2.sr^-1, at six
blackbody temperatures. Its long channel has a triangular spectral
responsivity from 1.00 to 1.10 um, peaking at 1.05 um (configs/kiln.yaml).
This script prints the certificate table, and the signals of both channels
across the measuring range so the register scale can be checked.

Constants: c1L = 2hc^2 from scipy.constants (SI 2019, exact h and c),
c2 = 0.014388 m.K (ITS-90, Preston-Thomas, Metrologia 27, 3, 1990).
"""
import math

from scipy import constants, integrate

C1L = 2 * constants.h * constants.c ** 2
C2 = 0.014388
GAIN = 2e3  # counts per W.m^-2.sr^-1


def planck(lam, t):
    return C1L / lam ** 5 / math.expm1(C2 / (lam * t))


def band(lo, hi, t):
    v, _ = integrate.quad(planck, lo, hi, args=(t,), epsabs=0, epsrel=1e-12)
    return v


def triangle(lam):
    lo, peak, hi = 1.00e-6, 1.05e-6, 1.10e-6
    if lam <= lo or lam >= hi:
        return 0.0
    return (lam - lo) / (peak - lo) if lam < peak else (hi - lam) / (hi - peak)


def responsive(t):
    f = lambda lam: triangle(lam) * planck(lam, t)
    a, _ = integrate.quad(f, 1.00e-6, 1.05e-6, epsabs=0, epsrel=1e-12)
    b, _ = integrate.quad(f, 1.05e-6, 1.10e-6, epsabs=0, epsrel=1e-12)
    return a + b


print("# kiln-exit-short.csv: blackbody points, ideal 0.85-0.95 um band x %g counts" % GAIN)
print("temperature_degC,signal")
for tc in (800, 900, 1000, 1100, 1200, 1300):
    print("%d,%.9g" % (tc, GAIN * band(0.85e-6, 0.95e-6, tc + 273.15)))
print()
print("t_degC  short_counts  long_W")
for tc in range(700, 1451, 50):
    t = tc + 273.15
    print("%6d  %12.6g  %10.6g" % (tc, GAIN * band(0.85e-6, 0.95e-6, t), responsive(t)))
