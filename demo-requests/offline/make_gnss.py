#!/usr/bin/env python3
"""Write gnss.csv: invented GNSS antennas on the invented Hollin Scar landslip
(asset HSLS-03), at an invented location. Python standard library only, fixed seed.

Twelve antennas stand on a slope facing south-east. Their reference positions are
laid out in a local East-North-Up frame about an invented origin; between the
reference and the current campaign the slope creeps downhill (south-east), faster
near its toe than near its crown, so the ground stretches along the fall line and
settles a little. Each epoch is converted from ENU to WGS84 latitude, longitude and
ellipsoidal height with the standard closed forms (IOGP Guidance Note 7-2: EPSG
method 9836 for topocentric -> geocentric, EPSG method 9602 inverted by fixed-point
iteration on the latitude for geocentric -> geodetic). Survey noise is added to the
current epoch; every antenna states sigma_e, sigma_n, sigma_u of its displacement.
"""

import math
import random
from pathlib import Path

random.seed(20260302)

A = 6378137.0  # WGS84 semi-major axis, m (EPSG 7030)
F = 1.0 / 298.257223563  # WGS84 flattening (EPSG 7030)
E2 = F * (2.0 - F)

# Invented origin of the layout (degrees, degrees, m): no real monitored site.
ORIGIN = (54.30275, -2.41630, 286.0)

SIGMA_EN = 0.003  # m, stated standard deviation of the horizontal displacement
SIGMA_U = 0.006  # m, vertical
NOISE_EN = 0.0015  # m, invented survey noise actually added
NOISE_U = 0.003


def ecef(lat, lon, h):
    """EPSG 9602: geodetic (radians, m) -> ECEF (m)."""
    n = A / math.sqrt(1.0 - E2 * math.sin(lat) ** 2)
    return (
        (n + h) * math.cos(lat) * math.cos(lon),
        (n + h) * math.cos(lat) * math.sin(lon),
        ((1.0 - E2) * n + h) * math.sin(lat),
    )


def geodetic(x, y, z):
    """ECEF (m) -> geodetic (radians, m), fixed-point iteration on the latitude."""
    p = math.hypot(x, y)
    lat = math.atan2(z, p)
    for _ in range(30):
        n = A / math.sqrt(1.0 - E2 * math.sin(lat) ** 2)
        nxt = math.atan2(z + E2 * n * math.sin(lat), p)
        if abs(nxt - lat) < 1e-15:
            lat = nxt
            break
        lat = nxt
    s = math.sin(lat)
    h = p * math.cos(lat) + z * s - A * math.sqrt(1.0 - E2 * s * s)
    return lat, math.atan2(y, x), h


def enu_to_geodetic(e, n, u):
    """EPSG 9836 inverted: ENU about ORIGIN (m) -> geodetic (degrees, degrees, m)."""
    lat0, lon0 = math.radians(ORIGIN[0]), math.radians(ORIGIN[1])
    x0 = ecef(lat0, lon0, ORIGIN[2])
    sp, cp = math.sin(lat0), math.cos(lat0)
    sl, cl = math.sin(lon0), math.cos(lon0)
    x = x0[0] - sl * e - sp * cl * n + cp * cl * u
    y = x0[1] + cl * e - sp * sl * n + cp * sl * u
    z = x0[2] + cp * n + sp * u
    lat, lon, h = geodetic(x, y, z)
    return math.degrees(lat), math.degrees(lon), h


def main():
    fall = math.radians(-45.0)  # downhill direction, counter-clockwise from east
    de, dn = math.cos(fall), math.sin(fall)
    rows = []
    k = 0
    for i in range(4):  # rows across the slope, crown (i = 0) to toe (i = 3)
        for j in range(3):
            k += 1
            s = 40.0 * i + random.uniform(-4.0, 4.0)  # along the fall line, m
            c = 35.0 * (j - 1) + random.uniform(-4.0, 4.0)  # across it, m
            e = s * de - c * dn
            n = s * dn + c * de
            u = -0.35 * s + random.uniform(-1.0, 1.0)  # the slope drops ~19 degrees
            # Creep downhill: 12 mm at the crown to 60 mm at the toe, plus settlement.
            creep = 0.012 + 0.0004 * s
            ue = creep * de + random.gauss(0.0, NOISE_EN)
            un = creep * dn + random.gauss(0.0, NOISE_EN)
            uu = -0.004 - 0.0001 * s + random.gauss(0.0, NOISE_U)
            ref = enu_to_geodetic(e, n, u)
            cur = enu_to_geodetic(e + ue, n + un, u + uu)
            rows.append((f"HSLS03-G{k:02d}", ref, cur))
    out = Path(__file__).with_name("gnss.csv")
    with out.open("w", encoding="ascii") as f:
        f.write("id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur,sigma_e,sigma_n,sigma_u\n")
        for pid, ref, cur in rows:
            f.write(
                f"{pid},{ref[0]:.10f},{ref[1]:.10f},{ref[2]:.4f},"
                f"{cur[0]:.10f},{cur[1]:.10f},{cur[2]:.4f},"
                f"{SIGMA_EN},{SIGMA_EN},{SIGMA_U}\n"
            )
    print(f"wrote {out} ({len(rows)} antennas)")


if __name__ == "__main__":
    main()
