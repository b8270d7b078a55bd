#!/usr/bin/python3
"""Band radiance of ideal rectangular channels, the reference for the bus/sim
server tests (band_signals.csv).

    S(T) = integral from lo to hi of c1L / (lambda^5 (exp(c2/(lambda T)) - 1)) d lambda

in W m^-2 sr^-1, with c1L = 2hc^2 from scipy.constants (CODATA 2018 exact SI
values) and c2 = 0.014388 m K as ITS-90 defines it (Preston-Thomas,
Metrologia 27, 3, 1990). Integrated with scipy.integrate.quad.

Run with Debian's interpreter, which has python3-scipy:
    /usr/bin/python3 testdata/band_signals.py > testdata/band_signals.csv
"""
import math

import scipy
from scipy import constants, integrate

C1L = 2 * constants.h * constants.c ** 2
C2 = 0.014388

BANDS = [(0.875e-6, 0.925e-6), (1.025e-6, 1.075e-6)]
TEMPERATURES = [1073.15, 1473.15, 1793.15, 1833.15, 2273.15]


def planck(lam, t):
    return C1L / lam ** 5 / math.expm1(C2 / (lam * t))


print("# scipy %s: scipy.integrate.quad of Planck's law over each band" % scipy.__version__)
print("lo_m,hi_m,t_k,signal_w_m2_sr")
for lo, hi in BANDS:
    for t in TEMPERATURES:
        s, err = integrate.quad(planck, lo, hi, args=(t,), epsabs=0, epsrel=1e-13)
        assert err < 1e-12 * s, (lo, hi, t, s, err)
        print("%.6g,%.6g,%.2f,%.15e" % (lo, hi, t, s))
