#!/usr/bin/python3
"""Numbers behind configs/demo.yaml (an invented works, Brackwater Steelworks).

Run with Debian's interpreter: /usr/bin/python3 configs/demo_values.py

It prints, for each demo head, the blackbody channel signals across the
measuring range, the raw register values they become after the configured
scale, and the temperature step one register count is worth, so that the
register types and scale factors in demo.yaml neither overflow nor lose
resolution. For the Sakuma-Hattori head it derives A and B from the band
(Saunders & White, Metrologia 40, 195, 2003) and fits C.

Constants: c1L = 2hc^2 and c2 = 0.014388 m.K (ITS-90, Preston-Thomas,
Metrologia 27, 3, 1990); h, c from scipy.constants (SI 2019, exact).
"""
import math

import numpy as np
from scipy import constants, integrate

C1L = 2 * constants.h * constants.c ** 2  # W.m^2.sr^-1
C2 = 0.014388                             # m.K, ITS-90


def planck(lam, t):
    """Spectral radiance, W.m^-2.sr^-1.m^-1."""
    return C1L / lam ** 5 / math.expm1(C2 / (lam * t))


def band(lo, hi, t):
    """Band radiance of an ideal rectangular band, W.m^-2.sr^-1."""
    v, _ = integrate.quad(planck, lo, hi, args=(t,), epsabs=0, epsrel=1e-12)
    return v


def sh(a, b, c, t):
    return c / math.expm1(C2 / (a * t + b))


def saunders_white(lo, hi):
    """A, B of a rectangular band: mean l0, variance s2 = w^2/12."""
    l0 = (lo + hi) / 2
    s2 = (hi - lo) ** 2 / 12
    return l0 * (1 - 6 * s2 / l0 ** 2), C2 * s2 / (2 * l0 ** 2)


def kelvin(c):
    return c + 273.15


def report_band(name, bands, kind, scale, lo_c, hi_c, eps, worst_tau):
    limits = {"uint16": (0, 65535), "int16": (-32768, 32767),
              "uint32": (0, 2 ** 32 - 1), "int32": (-2 ** 31, 2 ** 31 - 1)}
    print(f"== {name}: {kind}, scale {scale}")
    for lo, hi in bands:
        top = band(lo, hi, kelvin(hi_c))
        bottom = band(lo, hi, kelvin(lo_c)) * eps * worst_tau
        print(f"  band {lo*1e6:.3f}-{hi*1e6:.3f} um: "
              f"{bottom:.4g} (at {lo_c} degC x eps {eps} x tau {worst_tau}) .. "
              f"{top:.4g} W/m2/sr (blackbody at {hi_c} degC)")
        if kind in limits:
            lo_lim, hi_lim = limits[kind]
            raw_top, raw_bottom = top / scale, bottom / scale
            print(f"    raw {raw_bottom:.4g} .. {raw_top:.4g} (register holds {lo_lim}..{hi_lim});"
                  f" overflow: {raw_top > hi_lim}")
            # one count at the bottom of the range, as a temperature step:
            # dT = (lambda T^2 / c2) dS/S in the Wien limit
            lam = (lo + hi) / 2
            t = kelvin(lo_c)
            print(f"    one count at the bottom is {lam*t*t/C2/raw_bottom*1e3:.3g} mK "
                  f"of brightness temperature")


print("caster1-strand")
report_band("caster1-strand", [(0.875e-6, 0.925e-6), (1.025e-6, 1.075e-6)],
            "float32", 1, 700, 1600, 0.75, 1.0)
for c in (1100, 1150, 1200):
    print(f"  at {c} degC, eps 0.75: " + ", ".join(
        f"{0.75*band(lo, hi, kelvin(c)):.4g}" for lo, hi in
        [(0.875e-6, 0.925e-6), (1.025e-6, 1.075e-6)]))

print()
report_band("reheat-exit", [(0.850e-6, 0.900e-6), (1.000e-6, 1.050e-6)],
            "int32", 1e-5, 800, 1350, 0.78, 0.10)
for c in (1190, 1215, 1240):
    print(f"  at {c} degC, eps 0.80/0.78: " + ", ".join(
        f"{e*band(lo, hi, kelvin(c)):.4g}" for e, (lo, hi) in
        zip((0.80, 0.78), [(0.850e-6, 0.900e-6), (1.000e-6, 1.050e-6)])))

print()
print("== ladle-stream: Sakuma-Hattori channels, uint32 low_first, scale 0.01")
lo_c, hi_c = 1250, 1750
gain = None
temps = np.linspace(kelvin(lo_c), kelvin(hi_c), 51)
for lo, hi in [(0.85e-6, 0.95e-6), (1.00e-6, 1.10e-6)]:
    a, b = saunders_white(lo, hi)
    if gain is None:
        # detector gain in counts per W.m^-2.sr^-1, shared by both channels,
        # chosen so the long channel of this pair tops out near 60000 counts
        gain = 60000 / band(1.00e-6, 1.10e-6, kelvin(hi_c))
    target = np.array([gain * band(lo, hi, t) for t in temps])
    # least squares in log space (equal relative weight over the range)
    # has a closed form for C with A and B fixed: the mean log ratio
    model = np.array([sh(a, b, 1.0, t) for t in temps])
    c = float(np.exp(np.mean(np.log(target / model))))
    # temperature error of the Sakuma-Hattori model against the band integral
    worst = 0
    for t, s in zip(temps, target):
        t_sh = C2 / (a * math.log(c / s + 1)) - b / a
        worst = max(worst, abs(t_sh - t))
    print(f"  band {lo*1e6:.2f}-{hi*1e6:.2f} um: A = {a*1e6:.6f} um, B = {b*1e6:.4f} umK, "
          f"C = {c:.6g} (gain {gain:.5g} counts per W/m2/sr); worst model error {worst*1e3:.3g} mK")
    for tc in (lo_c, 1600, hi_c):
        s = sh(a, b, c, kelvin(tc))
        print(f"    {tc} degC: blackbody {s:.5g} counts, x eps 0.40 = {0.4*s:.5g}, raw {0.4*s/0.01:.4g}")

print()
print("== reference band radiances for daemon/config/config_test.go (W/m2/sr, 10 digits)")
for lo, hi, tc in [(0.875e-6, 0.925e-6, 1200), (1.025e-6, 1.075e-6, 700),
                   (0.850e-6, 0.900e-6, 800), (1.000e-6, 1.050e-6, 1350)]:
    print(f"  {{{lo*1e6:.3f}e-6, {hi*1e6:.3f}e-6, {tc}, {band(lo, hi, kelvin(tc)):.10g}}},")
