#!/usr/bin/env python3
"""Write the invented Ashcombe Lane retaining wall (ALRW-01) demo data set.

Everything here is invented for the demo: the wall, its targets and the movement.
Python standard library only; the output is the same on every run (fixed seed).

Frame: x along the wall face (mm, 0 at the west end), y up the face (mm, 0 at the
footing).  40 survey targets ALRW01-T01 .. T40 sit on a jittered 8 x 5 grid over a
24 m long, 4 m high face.

Displacement between the baseline and the current epoch (mm), a smooth field:
  - the face bulges outwards around mid-height near mid-length; seen in the plane
    of the face this stretches the face radially away from the bulge centre:
        u = A * (p - c) / s * exp(-|p - c|^2 / (2 s^2)),  A = 1.6 mm, s = 3.5 m
  - the east end settles slightly more than the west end:
        uy -= 0.9 mm * x / L
  - survey noise, Gaussian, 0.15 mm per component (stated sigma 0.3 mm).

Files written next to this script:
  points.csv    id,x,y,ux,uy,sigma_x,sigma_y (mm)
  points.json   the same points, {"length_unit": "mm", "points": [...]}
  elements.csv  element_id,v0,v1,v2 - two triangles per grid cell, counter-clockwise
  groups.csv    group,point_id - the face split into four bays, upper and lower half
"""

import json
import math
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20240611
LENGTH = 24000.0  # mm
HEIGHT = 4000.0   # mm
NX, NY = 8, 5
BULGE_MM = 1.6
BULGE_SCALE = 3500.0
BULGE_CENTRE = (13000.0, 2100.0)
SETTLEMENT_MM = 0.9
NOISE_MM = 0.15
SIGMA_MM = 0.3


def target_id(n):
    return f"ALRW01-T{n:02d}"


def field(x, y):
    """Smooth displacement (mm) at (x, y) mm, before noise."""
    dx, dy = x - BULGE_CENTRE[0], y - BULGE_CENTRE[1]
    g = math.exp(-(dx * dx + dy * dy) / (2.0 * BULGE_SCALE**2))
    ux = BULGE_MM * dx / BULGE_SCALE * g
    uy = BULGE_MM * dy / BULGE_SCALE * g - SETTLEMENT_MM * x / LENGTH
    return ux, uy


def main():
    rng = random.Random(SEED)
    points = []
    grid = {}
    n = 0
    for j in range(NY):
        for i in range(NX):
            n += 1
            x = (i + 0.5) * LENGTH / NX + rng.uniform(-350.0, 350.0)
            y = (j + 0.5) * HEIGHT / NY + rng.uniform(-120.0, 120.0)
            ux, uy = field(x, y)
            ux += rng.gauss(0.0, NOISE_MM)
            uy += rng.gauss(0.0, NOISE_MM)
            points.append((target_id(n), x, y, ux, uy))
            grid[(i, j)] = target_id(n)

    with open(os.path.join(HERE, "points.csv"), "w", newline="") as f:
        f.write("id,x,y,ux,uy,sigma_x,sigma_y\n")
        for pid, x, y, ux, uy in points:
            f.write(f"{pid},{x:.1f},{y:.1f},{ux:.3f},{uy:.3f},{SIGMA_MM},{SIGMA_MM}\n")

    doc = {
        "length_unit": "mm",
        "points": [
            {"id": pid, "x": round(x, 1), "y": round(y, 1), "ux": round(ux, 3),
             "uy": round(uy, 3), "sigma_x": SIGMA_MM, "sigma_y": SIGMA_MM}
            for pid, x, y, ux, uy in points
        ],
    }
    with open(os.path.join(HERE, "points.json"), "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")

    with open(os.path.join(HERE, "elements.csv"), "w", newline="") as f:
        f.write("element_id,v0,v1,v2\n")
        e = 0
        for j in range(NY - 1):
            for i in range(NX - 1):
                a, b = grid[(i, j)], grid[(i + 1, j)]
                c, d = grid[(i + 1, j + 1)], grid[(i, j + 1)]
                for tri in ((a, b, c), (a, c, d)):  # counter-clockwise (x right, y up)
                    e += 1
                    f.write(f"ALRW01-E{e:03d},{tri[0]},{tri[1]},{tri[2]}\n")

    with open(os.path.join(HERE, "groups.csv"), "w", newline="") as f:
        f.write("group,point_id\n")
        for bay in range(4):
            for half, rows in (("LOWER", range(0, 3)), ("UPPER", range(2, NY))):
                for j in rows:
                    for i in (2 * bay, 2 * bay + 1):
                        f.write(f"BAY{bay + 1}-{half},{grid[(i, j)]}\n")


if __name__ == "__main__":
    main()
