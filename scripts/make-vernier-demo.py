#!/usr/bin/env python3
"""Writes testdata/vernier/class-b12.csv: the invented Tuesday class of the
Larkspur College lab (room B12), 600 lines/mm gratings, 1' verniers, zero
near 180 deg 02'. Readings follow d sin(theta) = m lambda with NIST air
wavelengths, rounded to the least count; three students made the usual
mistakes on purpose (see testdata/README.md)."""
import math

D = 1e6 / 600
LINES = [("mercury", "green", 546.0735), ("mercury", "violet", 404.6563), ("mercury", "blue", 435.8328),
         ("mercury", "yellow 1", 576.9598), ("mercury", "yellow 2", 579.0663),
         ("hydrogen", "H-alpha", 656.2795), ("hydrogen", "H-beta", 486.1325), ("hydrogen", "H-gamma", 434.0463)]


def fmt(deg):
    t = int(round((deg % 360) * 60))
    return "%d°%02d'" % (t // 60, t % 60)


rows = ["bench,observer,lamp,line,side,reading,vernier,note"]


def session(bench, who, zero, verniers=("",), mistake=None):
    for v in verniers:
        z = zero if v in ("", "A") else (zero + 180.05) % 360
        rows.append("%s,%s,mercury,,zero,%s,%s," % (bench, who, fmt(z), v))
        for lamp, name, nm in LINES:
            th = math.degrees(math.asin(nm / D))
            for side, r in (("right", z + th), ("left", z - th)):
                note = ""
                if mistake and mistake(name, side, v):
                    r, note = mistake(name, side, v)(r), ""
                rows.append("%s,%s,%s,%s,%s,%s,%s,%s" % (bench, who, lamp, name, side, fmt(r), v, note))


session("bench1", "Priya", 180 + 2 / 60)
session("bench1", "Tomas", 180 + 3 / 60, mistake=lambda n, s, v: (lambda r: r + 0.5) if (n, s) == ("H-beta", "right") else None)
session("bench2", "Wen", 179 + 58 / 60,
        mistake=lambda n, s, v: (lambda r: r + (1 if s == "right" else -1) * (math.degrees(math.asin(579.0663 / D)) - math.degrees(math.asin(576.9598 / D)))) if n == "yellow 1" else None)
session("bench3", "Olu", 180 + 1 / 60, verniers=("A", "B"), mistake=lambda n, s, v: (lambda r: r - 1) if (n, s, v) == ("H-gamma", "left", "A") else None)
open("testdata/vernier/class-b12.csv", "w").write("\n".join(rows) + "\n")
