#!/usr/bin/env python3
"""Write the HTTP request bodies of the service demo from the offline demo data.

Everything here is invented: the Ashcombe Lane retaining wall (asset ALRW-01), the
Hollin Scar landslip (asset HSLS-03), their targets, antennas and movements.  Python
standard library only; the output is the same on every run.

  alrw01/structure.json       PUT /v1/structures/ALRW-01 (local frame of the wall face, mm)
  alrw01/points.json          PUT /v1/structures/ALRW-01/points (positions at survey S0)
  alrw01/batch-S0.csv … S6    POST /v1/structures/ALRW-01/batches (text/csv, one per
                              survey: displacement since S0, mm; T20 missing at S3)
  hsls03/structure.json       PUT /v1/structures/HSLS-03 (East-North-Up about the mean
                              reference position of the antennas)
  hsls03/points.json          PUT /v1/structures/HSLS-03/points (WGS84 positions)
  hsls03/batch.json           POST /v1/structures/HSLS-03/batches (application/json: the
                              reference epoch with zero displacement and the current one,
                              displacements along East/North/Up in m)
  alrw01/analysis-S6-delaunay.json    POST /v1/structures/ALRW-01/analyses: survey S6
                              against S0, Delaunay triangles, precision-weighted tests
  alrw01/analysis-S6-groups.json      the same epoch, one fit per bay half (8 groups)
  alrw01/analysis-series-groups.json  all seven surveys, cumulative strain and rates per
                              bay half
  alrw01/auto-analysis.json   PUT /v1/structures/ALRW-01/auto-analysis: every arriving
                              survey analysed per bay half against the first survey
  alrw01/alert-rule.json      POST /v1/structures/ALRW-01/alert-rules: principal tension
                              with two levels (thresholds invented for the demo)
  hsls03/analysis.json        POST /v1/structures/HSLS-03/analyses: the current epoch
                              against the reference, Delaunay triangles (GeoJSON export)
  compute/gradient.json       POST /v1/compute/gradient (one measured gradient of the wall)
  compute/strain-field.json   POST /v1/compute/strain-field (the wall's current survey,
                              Delaunay triangles, from offline/points.csv)
  compute/rosettes.json       POST /v1/compute/rosette (the invented Millbeck footbridge's
                              strain-gauge rosettes, MBFB-02, from offline/rosettes.csv)
"""

import csv
import json
import math
import os

HERE = os.path.dirname(os.path.abspath(__file__))
OFFLINE = os.path.join(HERE, "..", "offline")

# WGS84 (NIMA TR8350.2): semi-major axis and flattening.
A = 6378137.0
F = 1.0 / 298.257223563
E2 = F * (2.0 - F)


def write_json(path, doc):
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", encoding="utf-8") as f:
        json.dump(doc, f, indent=2)
        f.write("\n")


def ecef(lat_deg, lon_deg, h):
    lat, lon = math.radians(lat_deg), math.radians(lon_deg)
    n = A / math.sqrt(1.0 - E2 * math.sin(lat) ** 2)
    return (
        (n + h) * math.cos(lat) * math.cos(lon),
        (n + h) * math.cos(lat) * math.sin(lon),
        (n * (1.0 - E2) + h) * math.sin(lat),
    )


def enu_delta(lat_deg, lon_deg, d):
    """ECEF difference d rotated into East-North-Up at (lat, lon)."""
    lat, lon = math.radians(lat_deg), math.radians(lon_deg)
    sl, cl, sp, cp = math.sin(lon), math.cos(lon), math.sin(lat), math.cos(lat)
    e = -sl * d[0] + cl * d[1]
    n = -sp * cl * d[0] - sp * sl * d[1] + cp * d[2]
    u = cp * cl * d[0] + cp * sl * d[1] + sp * d[2]
    return e, n, u


def wall():
    rows = list(csv.DictReader(open(os.path.join(OFFLINE, "epochs.csv"), encoding="utf-8")))
    base = {r["id"]: r for r in rows if r["epoch"] == "S0"}
    write_json(
        os.path.join(HERE, "alrw01", "structure.json"),
        {
            "name": "Ashcombe Lane retaining wall",
            "dimension": 2,
            "frame": {"kind": "local"},
            "length_unit": "mm",
            "material": {"name": "concrete C30/37", "youngs_modulus_gpa": 33.0, "poisson_ratio": 0.2},
            "metadata": {"asset_register": "AL-RW-0001", "owner": "Ashcombe District (invented)"},
        },
    )
    write_json(
        os.path.join(HERE, "alrw01", "points.json"),
        {
            "length_unit": "mm",
            "points": [
                {"id": pid, "x": [float(r["x"]), float(r["y"])],
                 "sigma": [float(r["sigma_x"]), float(r["sigma_y"])]}
                for pid, r in sorted(base.items())
            ],
        },
    )
    for label in sorted({r["epoch"] for r in rows}):
        path = os.path.join(HERE, "alrw01", f"batch-{label}.csv")
        with open(path, "w", encoding="utf-8", newline="") as f:
            w = csv.writer(f, lineterminator="\n")
            w.writerow(["point_id", "epoch", "ux", "uy", "sigma_x", "sigma_y"])
            for r in rows:
                if r["epoch"] != label:
                    continue
                b = base[r["id"]]
                w.writerow([
                    r["id"], r["time"],
                    f"{float(r['x']) - float(b['x']):.3f}", f"{float(r['y']) - float(b['y']):.3f}",
                    r["sigma_x"], r["sigma_y"],
                ])


def slope():
    rows = list(csv.DictReader(open(os.path.join(OFFLINE, "gnss.csv"), encoding="utf-8")))
    lat0 = sum(float(r["lat_ref"]) for r in rows) / len(rows)
    lon0 = sum(float(r["lon_ref"]) for r in rows) / len(rows)
    h0 = sum(float(r["h_ref"]) for r in rows) / len(rows)
    write_json(
        os.path.join(HERE, "hsls03", "structure.json"),
        {
            "name": "Hollin Scar landslip",
            "dimension": 2,
            "frame": {"kind": "enu", "origin": {"lat_deg": round(lat0, 10), "lon_deg": round(lon0, 10), "h_m": round(h0, 4)}},
            "length_unit": "m",
            "metadata": {"asset_register": "HS-LS-0003", "monitoring": "GNSS, 12 antennas (invented)"},
        },
    )
    write_json(
        os.path.join(HERE, "hsls03", "points.json"),
        {
            "points": [
                {"id": r["id"],
                 "wgs84": {"lat_deg": float(r["lat_ref"]), "lon_deg": float(r["lon_ref"]), "h_m": float(r["h_ref"])},
                 "sigma": [float(r["sigma_e"]), float(r["sigma_n"])]}
                for r in rows
            ]
        },
    )
    readings = []
    for r in rows:
        readings.append({"point_id": r["id"], "epoch": "2026-05-04T06:00:00Z", "u": [0.0, 0.0]})
    for r in rows:
        p = ecef(float(r["lat_ref"]), float(r["lon_ref"]), float(r["h_ref"]))
        q = ecef(float(r["lat_cur"]), float(r["lon_cur"]), float(r["h_cur"]))
        e, n, _ = enu_delta(float(r["lat_ref"]), float(r["lon_ref"]), [q[i] - p[i] for i in range(3)])
        readings.append({
            "point_id": r["id"], "epoch": "2026-11-02T06:00:00Z",
            "u": [round(e, 5), round(n, 5)],
            "sigma": [float(r["sigma_e"]), float(r["sigma_n"])],
        })
    write_json(os.path.join(HERE, "hsls03", "batch.json"), {"length_unit": "m", "readings": readings})


def analyses():
    groups = {}
    for r in csv.DictReader(open(os.path.join(OFFLINE, "groups.csv"), encoding="utf-8")):
        groups.setdefault(r["group"], []).append(r["point_id"])
    group_list = [{"name": g, "point_ids": ids} for g, ids in groups.items()]
    times = {}
    for r in csv.DictReader(open(os.path.join(OFFLINE, "epochs.csv"), encoding="utf-8")):
        times[r["epoch"]] = r["time"]
    write_json(
        os.path.join(HERE, "alrw01", "analysis-S6-delaunay.json"),
        {"kind": "epoch", "epoch": times["S6"], "baseline_epoch": times["S0"],
         "method": {"kind": "delaunay"}, "strain_unit": "microstrain"},
    )
    write_json(
        os.path.join(HERE, "alrw01", "analysis-S6-groups.json"),
        {"kind": "epoch", "epoch": times["S6"], "baseline_epoch": times["S0"],
         "method": {"kind": "groups", "groups": group_list},
         "options": {"use_precision": True}, "strain_unit": "microstrain"},
    )
    write_json(
        os.path.join(HERE, "alrw01", "analysis-series-groups.json"),
        {"kind": "series", "baseline_epoch": times["S0"],
         "method": {"kind": "groups", "groups": group_list},
         "options": {"use_precision": True}, "strain_unit": "microstrain"},
    )
    # The monitoring loop: every survey that arrives is analysed per bay half against S0,
    # and compared with the wall's alert rule. The thresholds are invented for the demo
    # (a user's configuration; Kinema ships no limit values).
    write_json(
        os.path.join(HERE, "alrw01", "auto-analysis.json"),
        {"method": {"kind": "groups", "groups": group_list},
         "options": {"use_precision": True}, "strain_unit": "microstrain",
         "baseline": "first_epoch"},
    )
    write_json(
        os.path.join(HERE, "alrw01", "alert-rule.json"),
        {"name": "bay tension (demo thresholds, invented)", "quantity": "principal_tensile",
         "unit": "microstrain",
         "levels": [{"name": "review", "threshold": 150}, {"name": "alarm", "threshold": 300}],
         "hysteresis": 20, "significance": {"alpha": 0.05}},
    )
    write_json(
        os.path.join(HERE, "hsls03", "analysis.json"),
        {"kind": "epoch", "epoch": "2026-11-02T06:00:00Z", "baseline_epoch": "2026-05-04T06:00:00Z",
         "method": {"kind": "delaunay"}, "options": {"min_angle_deg": 5}, "strain_unit": "microstrain"},
    )


def compute():
    write_json(
        os.path.join(HERE, "compute", "gradient.json"),
        {"gradient": [[120e-6, -35e-6], [55e-6, -40e-6]], "strain_unit": "microstrain"},
    )
    rows = list(csv.DictReader(open(os.path.join(OFFLINE, "points.csv"), encoding="utf-8")))
    write_json(
        os.path.join(HERE, "compute", "strain-field.json"),
        {
            "length_unit": "mm",
            "strain_unit": "microstrain",
            "method": {"kind": "delaunay"},
            "points": [
                {"id": r["id"], "x": [float(r["x"]), float(r["y"])],
                 "u": [float(r["ux"]), float(r["uy"])],
                 "sigma": [float(r["sigma_x"]), float(r["sigma_y"])]}
                for r in rows
            ],
        },
    )
    rosettes = {}
    for r in csv.DictReader(open(os.path.join(OFFLINE, "rosettes.csv"), encoding="utf-8")):
        g = {"id": r["gauge"], "angle_deg": float(r["angle_deg"]), "reading": float(r["reading"])}
        if r.get("zero"):
            g["zero"] = float(r["zero"])
        rosettes.setdefault(r["rosette"], []).append(g)
    write_json(
        os.path.join(HERE, "compute", "rosettes.json"),
        {"reading_unit": "microstrain", "strain_unit": "microstrain",
         "rosettes": [{"id": k, "gauges": v} for k, v in rosettes.items()]},
    )


if __name__ == "__main__":
    wall()
    slope()
    analyses()
    compute()
