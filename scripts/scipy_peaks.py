#!/usr/bin/env python3
"""Outside check for lineshot's peak finder: scipy.signal.find_peaks and
peak_widths (Debian's python3-scipy) on the same profiles.

Reads JSON from stdin: {"profiles": [{"y": [...], "height": h,
"prominence": p, "distance": d}, ...]} and writes JSON to stdout:
{"scipy": "1.10.1", "results": [{"peaks": [...], "centres": [...]}, ...]}
where each centre is the midpoint of the interpolated half-prominence
crossings that peak_widths returns (rel_height=0.5).
"""
import json
import sys

import numpy as np
import scipy
from scipy.signal import find_peaks, peak_widths


def main():
    doc = json.load(sys.stdin)
    out = []
    for p in doc["profiles"]:
        y = np.asarray(p["y"], dtype=float)
        peaks, _ = find_peaks(y, height=p["height"], prominence=p["prominence"], distance=p["distance"])
        if len(peaks):
            _, _, left, right = peak_widths(y, peaks, rel_height=0.5)
            centres = ((left + right) / 2).tolist()
        else:
            centres = []
        out.append({"peaks": peaks.tolist(), "centres": centres})
    json.dump({"scipy": scipy.__version__, "results": out}, sys.stdout)


if __name__ == "__main__":
    main()
