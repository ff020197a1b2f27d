#!/usr/bin/env python3
"""Write rosettes.csv: invented strain-gauge rosettes on the invented Millbeck
footbridge (asset MBFB-02). Python standard library only, fixed seed.

Each rosette is given a known plane strain state (exx, eyy, tensor shear exy, in
microstrain, in the rosette's own frame). A gauge at angle t (counter-clockwise from
the rosette's x axis) then reads
    e(t) = exx cos^2 t + eyy sin^2 t + 2 exy sin t cos t
(strain transformation, Gere & Goodno, Mechanics of Materials, section 7.7), plus its
zero reading, plus a little reading noise. Readings are written in microstrain with
0.1 microstrain resolution.
"""

import math
import random
from pathlib import Path

random.seed(20260211)

NOISE = 0.4  # microstrain, standard deviation of the invented reading noise

# (rosette ID, layout angles in degrees, (exx, eyy, exy) in microstrain, zero readings?)
ROSETTES = [
    # rectangular 0/45/90 rosettes on the bottom flange near midspan
    ("MBFB02-R01", [0, 45, 90], (182.0, -54.6, 12.0), False),
    ("MBFB02-R02", [0, 45, 90], (165.0, -49.5, -20.0), True),
    ("MBFB02-R03", [0, 45, 90], (-40.0, 12.0, 35.0), False),
    # delta 0/60/120 rosettes on the web near the east bearing
    ("MBFB02-R04", [0, 60, 120], (-18.0, 22.0, 48.0), False),
    ("MBFB02-R05", [0, 60, 120], (25.0, -8.0, -52.0), True),
    # a four-gauge rosette (0/45/90/135) at the hanger connection: least squares
    ("MBFB02-R06", [0, 45, 90, 135], (96.0, -30.0, 41.0), False),
]


def reading(exx, eyy, exy, deg):
    t = math.radians(deg)
    c, s = math.cos(t), math.sin(t)
    return exx * c * c + eyy * s * s + 2.0 * exy * s * c


def main():
    lines = ["rosette,gauge,angle_deg,reading,zero"]
    for rid, angles, (exx, eyy, exy), zeroed in ROSETTES:
        for k, deg in enumerate(angles):
            gauge = "abcd"[k]
            zero = round(random.uniform(-15.0, 15.0), 1) if zeroed else None
            r = reading(exx, eyy, exy, deg) + random.gauss(0.0, NOISE)
            r += zero or 0.0
            lines.append(
                f"{rid},{gauge},{deg},{r:.1f},{'' if zero is None else f'{zero:.1f}'}"
            )
    out = Path(__file__).with_name("rosettes.csv")
    out.write_text("\n".join(lines) + "\n")
    print(f"wrote {out} ({len(lines) - 1} gauge readings, {len(ROSETTES)} rosettes)")


if __name__ == "__main__":
    main()
