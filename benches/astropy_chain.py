#!/usr/bin/env python3
"""The general-purpose chain lapse's pulsar batch is compared with (issue 7):
astropy offline, vectorised per site (its fastest form):
Time(utc, location=site).tdb, get_body_barycentric('earth') +
EarthLocation.get_gcrs_posvel for the Roemer term, same kernel and EOP.

Usage: astropy_chain.py ROWS.parquet [MAX_ROWS]   -> prints seconds per row
"""
import math
import os
import sys
import time

import numpy as np
import pyarrow.parquet as pq
from astropy.utils import iers
from astropy.utils.data import conf as data_conf

data_conf.allow_internet = False
iers.conf.auto_download = False
iers.conf.auto_max_age = None
import astropy.units as u  # noqa: E402
from astropy.coordinates import EarthLocation, get_body_barycentric, solar_system_ephemeris  # noqa: E402
from astropy.time import Time  # noqa: E402

root = os.path.abspath(os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.path.insert(0, os.path.join(root, "tests", "reference"))
from erfa_geometry import stations  # noqa: E402

iers.earth_orientation_table.set(iers.IERS_A.open(os.path.join(root, "data", "finals2000A.all")))
solar_system_ephemeris.set(os.path.join(root, "data", "de421.bsp"))
t = pq.read_table(sys.argv[1]).to_pydict()
n = min(len(t["obs_id"]), int(sys.argv[2]) if len(sys.argv) > 2 else 10**9)
by_code = {s["code"]: s for s in stations}
ra, dec = math.radians(253.4127), math.radians(-31.2846)
nhat = np.array([math.cos(dec) * math.cos(ra), math.cos(dec) * math.sin(ra), math.sin(dec)])
start = time.perf_counter()
sites = np.array(t["site"][:n])
day = np.array(t["arrival_mjd_day"][:n], dtype=float)
frac = np.array(t["arrival_mjd_frac"][:n])
total = 0.0
for code in sorted(set(sites)):
    m = sites == code
    loc = EarthLocation.from_geocentric(*by_code[code]["xyz"], unit=u.m)
    tt = Time(day[m], frac[m], format="mjd", scale="utc", location=loc)
    tdb = tt.tdb
    earth = get_body_barycentric("earth", tdb).xyz.to_value(u.m)
    gcrs = loc.get_gcrs_posvel(tt)[0].xyz.to_value(u.m)
    roemer = ((earth + gcrs).T @ nhat) / 299792458.0
    total += float(roemer.sum())
elapsed = time.perf_counter() - start
print(f"{elapsed / n:.6e} {n} {total:.3f}")
