"""Reference Roemer delays of a pulsar in a Keplerian binary, from a direct
numerical integration of the Newtonian two-body problem (scipy solve_ivp,
DOP853), projected on the line of sight.

Units: the relative orbit is integrated with a = 1, GM = 1, so the mean
motion is 1 and the time unit is P/(2 pi). It starts at periastron (T0):
r = (1 - e, 0), v = (0, sqrt((1 + e)/(1 - e))). The pulsar's orbit about the
barycentre is the relative orbit scaled by a1/a (same orientation: periastron
along +X); its line-of-sight position, with the argument of periastron omega
measured in the orbital plane from the ascending node, is
z = a1 sin i (X sin omega + Y cos omega), so the Roemer delay in seconds is
x (X sin omega + Y cos omega) with x = a1 sin i / c
(Blandford & Teukolsky 1976, ApJ 205, 580, eq. 2.33, written for this
geometry).

Writes binary_roemer.csv: case, period_s, eccentricity, omega_deg, x_s,
dt_s (proper time from T0), roemer_s. Reference library: scipy (version in
the header).
"""
import sys
from pathlib import Path

import numpy as np
import scipy
from scipy.integrate import solve_ivp

CASES = [
    # name, period (s), e, omega (deg), x (lt-s)
    ("circular_fast", 5400.0, 0.0, 0.0, 0.8),
    ("moderate", 0.4 * 86400.0, 0.6, 120.0, 2.34),
    ("eccentric", 3.2 * 86400.0, 0.9, 250.0, 14.1),
    ("wide", 100.0 * 86400.0, 0.05, 33.0, 32.3),
]
ORBITS = 5          # integrate several orbits
SAMPLES = 97        # epochs per case (not commensurate with the period)


def rhs(_t, y):
    x, yy, vx, vy = y
    r3 = (x * x + yy * yy) ** 1.5
    return [vx, vy, -x / r3, -yy / r3]


def main(out_dir):
    out = Path(out_dir) / "binary_roemer.csv"
    with open(out, "w") as f:
        f.write(f"# scipy {scipy.__version__}, numpy {np.__version__}: solve_ivp DOP853, rtol 1e-13, atol 1e-15\n")
        f.write("case,period_s,eccentricity,omega_deg,x_s,dt_s,roemer_s\n")
        for name, period_s, e, omega_deg, x_s in CASES:
            taus = np.linspace(0.0, ORBITS * 2 * np.pi, SAMPLES) * (1 + 1e-3)
            y0 = [1 - e, 0.0, 0.0, np.sqrt((1 + e) / (1 - e))]
            sol = solve_ivp(rhs, (0.0, taus[-1]), y0, method="DOP853", t_eval=taus, rtol=1e-13, atol=1e-15)
            w = np.radians(omega_deg)
            for tau, X, Y in zip(sol.t, sol.y[0], sol.y[1]):
                dt_s = tau * period_s / (2 * np.pi)
                roemer = x_s * (X * np.sin(w) + Y * np.cos(w))
                f.write(f"{name},{period_s!r},{e!r},{omega_deg!r},{x_s!r},{float(dt_s)!r},{float(roemer)!r}\n")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else ".")
