#!/usr/bin/env python3
"""Body of POST /v1/compute/strain-field for the HTTP benchmark: N points on a jittered
grid (metres) under a uniform strain plus a rigid rotation, Delaunay method.
Invented data; fixed seed."""

import json
import random
import sys

n = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
rnd = random.Random(20261202)
side = int(n ** 0.5 + 0.999)
# A uniform gradient G (strain 200e-6, -80e-6, 50e-6 shear plus a 30e-6 rad rotation).
g = [[200e-6, 50e-6 - 30e-6], [50e-6 + 30e-6, -80e-6]]
points = []
for i in range(n):
    x = (i % side) * 2.0 + rnd.uniform(-0.4, 0.4)
    y = (i // side) * 2.0 + rnd.uniform(-0.4, 0.4)
    u = [g[0][0] * x + g[0][1] * y, g[1][0] * x + g[1][1] * y]
    points.append({"id": f"P{i:05d}", "x": [round(x, 4), round(y, 4)], "u": [round(u[0], 7), round(u[1], 7)]})
json.dump({"length_unit": "m", "strain_unit": "microstrain", "method": {"kind": "delaunay"},
           "points": points}, sys.stdout)
