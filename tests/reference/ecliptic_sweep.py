"""Reference ICRS positions of directions given in ecliptic coordinates of
J2000.0 (IAU 2006): pyerfa's eceq06 at date J2000.0 TT (2451545.0, 0).

Writes ecliptic_icrs.csv: lon_deg, lat_deg, ra_deg, dec_deg. Reference
library: pyerfa (version in the header).
"""
import sys
from pathlib import Path

import erfa
import numpy as np


def main(out_dir):
    out = Path(out_dir) / "ecliptic_icrs.csv"
    lons = [0.0, 45.5, 97.25, 180.0, 253.4127, 359.9]
    lats = [-89.5, -31.2846, -5.0, 0.0, 12.3, 60.0, 89.9]
    with open(out, "w") as f:
        f.write(f"# pyerfa {erfa.__version__}: erfa.eceq06(2451545.0, 0.0, lon, lat)\n")
        f.write("lon_deg,lat_deg,ra_deg,dec_deg\n")
        for lon in lons:
            for lat in lats:
                ra, dec = erfa.eceq06(2451545.0, 0.0, np.radians(lon), np.radians(lat))
                f.write(f"{lon!r},{lat!r},{float(np.degrees(ra))!r},{float(np.degrees(dec))!r}\n")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else ".")
