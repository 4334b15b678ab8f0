"""Shared ERFA/jplephem geometry for the reference scripts (not a test itself).

Independent of lapse: reads data/finals2000A.all itself (Bulletin B final
values where present, else Bulletin A), interpolates with 4-point Lagrange
(UT1 as UT1 - TAI), and builds the ITRS -> GCRS rotation with ERFA's
CIO-based routines (IERS Conventions 2010 eq. 5.1).
"""
import math
import os
import tomllib

import erfa
import numpy as np
from jplephem.spk import SPK

root = os.path.abspath(os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))
kernel = SPK.open(os.path.join(root, "data", "de421.bsp"))
C_M_S = 299792458.0
AS2R = math.pi / (180.0 * 3600.0)

# --- finals2000A, Bulletin A columns (ReadMe.finals2000A) ---------------------
rows = []
for line in open(os.path.join(root, "data", "finals2000A.all")):
    xs, ys, us = line[18:27].strip(), line[37:46].strip(), line[58:68].strip()
    if not (xs and ys and us):
        break
    dxs, dys = line[97:106].strip(), line[116:125].strip()
    b = [line[134:144], line[144:154], line[154:165], line[165:175], line[175:185]]
    b = [x.strip() for x in b]
    mjd = int(float(line[7:15]))
    if all(b):
        rows.append((mjd, float(b[0]), float(b[1]), float(b[2]), float(b[3]), float(b[4]), False))
        continue
    pred = line[16] == "P" or line[57] == "P"
    rows.append((mjd, float(xs), float(ys), float(us),
                 float(dxs) if dxs and dys else 0.0, float(dys) if dxs and dys else 0.0, pred))
mjd0 = rows[0][0]
table = np.array([r[:6] for r in rows])
predicted = np.array([r[6] for r in rows])


def tai_utc(mjd):
    y, m, d, _ = erfa.jd2cal(2400000.5, mjd)
    return float(erfa.dat(y, m, d, 0.0))


def lagrange4(x, y, t):
    s = 0.0
    for k in range(4):
        w = 1.0
        for j in range(4):
            if j != k:
                w *= (t - x[j]) / (x[k] - x[j])
        s += w * y[k]
    return s


def eop(day, frac):
    t = day + frac
    i = min(day - mjd0, len(rows) - 2)
    start = min(max(i - 1, 0), len(rows) - 4)
    nodes = table[start:start + 4]
    x = nodes[:, 0]
    ut1_tai = [n[3] - tai_utc(int(n[0])) for n in nodes]
    v = {
        "ut1_tai": lagrange4(x, ut1_tai, t),
        "xp": lagrange4(x, nodes[:, 1], t),
        "yp": lagrange4(x, nodes[:, 2], t),
        "dx": lagrange4(x, nodes[:, 4], t),
        "dy": lagrange4(x, nodes[:, 5], t),
        "pred": bool(predicted[start:start + 4].any()),
    }
    v["ut1_utc"] = v["ut1_tai"] + tai_utc(day)
    return v


def gcrs(u1, u2, day, frac, itrs):
    e = eop(day, frac)
    a1, a2 = erfa.utctai(u1, u2)
    t1, t2 = erfa.taitt(a1, a2)
    b1, b2 = erfa.taiut1(a1, a2, e["ut1_tai"])
    x, y, s = erfa.xys06a(t1, t2)
    rc2i = erfa.c2ixys(x + e["dx"] * 1e-3 * AS2R, y + e["dy"] * 1e-3 * AS2R, s)
    era = erfa.era00(b1, b2)
    sp = erfa.sp00(t1, t2)
    rpom = erfa.pom00(e["xp"] * AS2R, e["yp"] * AS2R, sp)
    rc2t = erfa.c2tcio(rc2i, era, rpom)
    return rc2t.T @ itrs, e


def observer_term_s(u1, u2, x_gcrs_m):
    a1, a2 = erfa.utctai(u1, u2)
    t1, t2 = erfa.taitt(a1, a2)
    b1, b2 = erfa.tttdb(t1, t2, erfa.dtdb(t1, t2, 0.0, 0.0, 0.0, 0.0))
    _, v_emb = kernel[0, 3].compute_and_differentiate(b1, b2)
    _, v_e = kernel[3, 399].compute_and_differentiate(b1, b2)
    v_m_s = (v_emb + v_e) * 1e3 / 86400.0
    return float(np.dot(v_m_s, x_gcrs_m) / C_M_S**2)


stations = tomllib.load(open(os.path.join(root, "data", "demo", "stations.toml", ), "rb"))["station"]
for st in stations:
    if "geodetic" in st:
        g = st["geodetic"]
        st["xyz"] = np.array(erfa.gd2gc(2, math.radians(g["lon_deg"]), math.radians(g["lat_deg"]), g["height_m"]))
    else:
        st["xyz"] = np.array(st["itrf_m"], dtype=float)
    st["vel"] = np.array(st.get("velocity_m_per_yr", [0.0, 0.0, 0.0]))
    st["epoch"] = st.get("epoch_mjd", 51544.5)


# UTC days (MJD) that end in a leap second, 2005-2016 (IERS Bulletin C;
# the same days as the leap-second table lapse uses). The random geometry
# sweeps skip them and keep to 86 400 s days.
LEAP_DAYS = frozenset({53735, 54831, 56108, 57203, 57753})


def station_itrs_m(st, day, frac):
    """ITRF position (m) of a demo station at UTC MJD day + frac, moved
    linearly by its plate velocity (m per Julian year) from its epoch."""
    return st["xyz"] + st["vel"] * ((day + frac - st["epoch"]) / 365.25)
