#!/usr/bin/env python3
"""Write the survey epochs of the invented Ashcombe Lane retaining wall (ALRW-01).

Everything here is invented for the demo: the wall, its targets, the surveys, their
temperatures and the movement.  Python standard library only; the output is the same
on every run (fixed seed).

The 40 targets ALRW01-T01 .. T40 and their baseline positions are those of
make_demo.py (same seed, same jittered 8 x 5 grid, x along the face and y up the
face, mm).  Seven surveys over about two years follow the bulge of make_demo.py as it
grows linearly in time, reaching make_demo.py's amplitude (1.6 mm) at the last survey,
plus the settlement of the east end growing the same way.  On top of that the face
expands freely with temperature, alpha * (T - T_baseline) with alpha = 10e-6 1/K
(normal concrete, common practice), so temperature compensation has something to
remove.  Survey noise 0.05 mm per coordinate; stated sigma 0.1 mm.

Target ALRW01-T20 was hidden behind scaffolding at survey S3 and is missing there:
only the elements and groups that hold it are excluded at that survey.

File written next to this script:
  epochs.csv   epoch,time,id,x,y,sigma_x,sigma_y,temperature_c (mm, RFC 3339 UTC, degC)
"""

import datetime
import os
import random
import sys

sys.dont_write_bytecode = True  # keep the demo folder free of __pycache__
import make_demo as wall  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20260301
ALPHA_PER_K = 10.0e-6
# (label, survey time RFC 3339 UTC, temperature of the wall degC)
SURVEYS = [
    ("S0", "2024-03-04T09:30:00Z", 7.5),
    ("S1", "2024-06-17T10:15:00Z", 18.0),
    ("S2", "2024-10-01T09:00:00Z", 12.5),
    ("S3", "2025-01-20T11:45:00Z", 3.0),
    ("S4", "2025-05-12T08:30:00Z", 14.0),
    ("S5", "2025-09-08T09:10:00Z", 16.5),
    ("S6", "2026-02-23T10:40:00Z", 5.0),
]
MISSING = ("S3", "ALRW01-T20")
NOISE_MM = 0.05  # survey noise per coordinate at each epoch (precise total station)
SIGMA_MM = 0.1   # stated standard deviation per coordinate


def days(t):
    """Days since S0 from an RFC 3339 UTC time."""
    fmt = "%Y-%m-%dT%H:%M:%SZ"
    t0 = datetime.datetime.strptime(SURVEYS[0][1], fmt)
    return (datetime.datetime.strptime(t, fmt) - t0).total_seconds() / 86400.0


def baseline_positions():
    """The targets of make_demo.py: same seed, same order of random draws."""
    rng = random.Random(wall.SEED)
    pts = []
    n = 0
    for j in range(wall.NY):
        for i in range(wall.NX):
            n += 1
            x = (i + 0.5) * wall.LENGTH / wall.NX + rng.uniform(-350.0, 350.0)
            y = (j + 0.5) * wall.HEIGHT / wall.NY + rng.uniform(-120.0, 120.0)
            rng.gauss(0.0, wall.NOISE_MM)
            rng.gauss(0.0, wall.NOISE_MM)
            pts.append((wall.target_id(n), x, y))
    return pts


def main():
    rng = random.Random(SEED)
    pts = baseline_positions()
    span = days(SURVEYS[-1][1])
    t_base = SURVEYS[0][2]
    with open(os.path.join(HERE, "epochs.csv"), "w", newline="") as f:
        f.write("epoch,time,id,x,y,sigma_x,sigma_y,temperature_c\n")
        for label, time, temp in SURVEYS:
            growth = days(time) / span
            thermal = ALPHA_PER_K * (temp - t_base)
            for pid, x, y in pts:
                if (label, pid) == MISSING:
                    continue
                ux, uy = wall.field(x, y)
                px = x * (1.0 + thermal) + growth * ux + rng.gauss(0.0, NOISE_MM)
                py = y * (1.0 + thermal) + growth * uy + rng.gauss(0.0, NOISE_MM)
                f.write(f"{label},{time},{pid},{px:.2f},{py:.2f},"
                        f"{SIGMA_MM},{SIGMA_MM},{temp}\n")


if __name__ == "__main__":
    main()
