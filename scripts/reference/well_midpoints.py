"""Reference positions between survey stations of ISCWSA wells #03 and #04, from an
independent well-path library, for engine/tests/iscwsa.rs.

Library: wellpathpy 0.5.2 (PyPI), whose `minimum_curvature.resample` interpolates along the
minimum-curvature arc by spherical interpolation of the positions about the arc's centre
(a different construction from flexure's, which interpolates the tangent).

Run from the repository root:
    python3 -m venv /tmp/wp && /tmp/wp/bin/pip install wellpathpy==0.5.2
    /tmp/wp/bin/python scripts/reference/well_midpoints.py > engine/tests/data/iscwsa/midpoints.csv

Writes, for every course with a dogleg of at least 0.01 degree, the points a quarter, half and
three quarters of the way along it: well, md, north, east, tvd (metres, relative to the well's
first station at the origin).
"""

import csv
import sys
from pathlib import Path

import numpy as np
import wellpathpy as wp

HERE = Path(__file__).resolve().parents[2] / "engine" / "tests" / "data" / "iscwsa"
FRACTIONS = (0.25, 0.5, 0.75)


def main():
    out = sys.stdout
    out.write("# reference positions from wellpathpy %s minimum_curvature.resample\n" % wp.__version__)
    out.write("# made by scripts/reference/well_midpoints.py from ISCWSA rev 4 wells 03 and 04\n")
    out.write("well,md,north,east,tvd\n")
    for name in ("03_well", "04_well"):
        with open(HERE / (name + ".csv")) as f:
            rows = [r for r in csv.DictReader(f)]
        md = np.array([float(r["md"]) for r in rows])
        inc = np.array([float(r["inc"]) for r in rows])
        azi = np.array([float(r["azi"]) for r in rows])
        dev = wp.deviation(md=md, inc=inc, azi=azi)
        pos = dev.minimum_curvature(course_length=30)
        depths = []
        for k in range(len(md) - 1):
            if pos.dls[k + 1] * (md[k + 1] - md[k]) / 30.0 < 0.01:
                continue
            depths.extend(md[k] + f * (md[k + 1] - md[k]) for f in FRACTIONS)
        res = pos.resample(depths=np.array(depths))
        for d, n, e, v in zip(depths, res.northing, res.easting, res.depth):
            out.write("%s,%.6f,%.9f,%.9f,%.9f\n" % (name, d, n, e, v))


if __name__ == "__main__":
    main()
