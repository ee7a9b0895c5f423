#!/usr/bin/env python3
"""Reference states from DE421 for the SPK reader's tests.

Generated with (from the repository root):

    bash tests/reference/fetch-de421.sh
    python3 tests/reference/make_spk_fixture.py

Reference library: jplephem 2.24 (PyPI), reading tests/reference/data/de421.bsp
(from the PyPI package skyfield-data 7.0.0). Each call is

    SPK.open(path)[center, target].compute_and_differentiate(2451545.0, days)

which returns the position in km and the velocity in km/day (jplephem's own
units), written here unchanged with repr() so every digit survives.

One file per segment pair: tests/reference/fixtures/spk_<center>_<target>.csv
with columns tdb_days_since_j2000, x_km, y_km, z_km, vx_km_per_day,
vy_km_per_day, vz_km_per_day.

Epochs are days since J2000 TDB on a grid of 2**-10 day (84.375 s), so the
same instant is exactly representable both as days and as seconds and the
comparison measures the reader, not time rounding. They include the
segments' first and last instants, interval boundaries of every interval
length in the file (with neighbours one grid step either side) and random
epochs over 1900-2050 from a fixed seed.
"""

import os
import random

import jplephem
from jplephem.spk import SPK

HERE = os.path.dirname(os.path.abspath(__file__))
BSP = os.path.join(HERE, "data", "de421.bsp")
OUT = os.path.join(HERE, "fixtures")

J2000_JD = 2451545.0
GRID = 2.0**-10  # days
# (center, target) pairs the reader chains to give every body's barycentric state.
PAIRS = [(0, 1), (0, 2), (0, 3), (0, 4), (0, 5), (0, 6), (0, 7), (0, 8), (0, 10), (3, 301), (3, 399)]
RANDOM_EPOCHS = 160
BOUNDARIES_PER_LENGTH = 8


def on_grid(days):
    return round(days / GRID) * GRID


def epochs(kernel):
    segments = [kernel[c, t] for c, t in PAIRS]
    start = max(s.start_second for s in segments) / 86400.0
    end = min(s.end_second for s in segments) / 86400.0
    init_days = segments[0].daf.read_array(segments[0].end_i - 3, segments[0].end_i)[0] / 86400.0
    lengths = sorted({s.daf.read_array(s.end_i - 3, s.end_i)[1] / 86400.0 for s in segments})

    rng = random.Random(421)
    out = {start, start + GRID, end - GRID, end}
    lo = 1900.0
    hi = 2050.0
    lo_days = (lo - 2000.0) * 365.25
    hi_days = (hi - 2000.0) * 365.25
    for length in lengths:
        # Boundaries that are multiples of this length, in 1900-2050.
        k_lo = int((lo_days - init_days) / length) + 1
        k_hi = int((hi_days - init_days) / length) - 1
        for _ in range(BOUNDARIES_PER_LENGTH):
            b = init_days + rng.randint(k_lo, k_hi) * length
            out.update((b - GRID, b, b + GRID))
    while len(out) < 4 + 3 * BOUNDARIES_PER_LENGTH * len(lengths) + RANDOM_EPOCHS:
        out.add(on_grid(rng.uniform(lo_days, hi_days)))
    return sorted(out)


def main():
    assert jplephem.__version__ == "2.24", jplephem.__version__
    kernel = SPK.open(BSP)
    days_list = epochs(kernel)
    os.makedirs(OUT, exist_ok=True)
    for center, target in PAIRS:
        segment = kernel[center, target]
        path = os.path.join(OUT, "spk_%d_%d.csv" % (center, target))
        with open(path, "w") as f:
            f.write("# jplephem %s, de421.bsp (skyfield-data 7.0.0), segment %d -> %d: "
                    "SPK.open(path)[%d, %d].compute_and_differentiate(2451545.0, days)\n"
                    % (jplephem.__version__, center, target, center, target))
            f.write("tdb_days_since_j2000,x_km,y_km,z_km,vx_km_per_day,vy_km_per_day,vz_km_per_day\n")
            for days in days_list:
                position, velocity = segment.compute_and_differentiate(J2000_JD, days)
                values = [float(days)] + [float(x) for x in position] + [float(v) for v in velocity]
                f.write(",".join(repr(v) for v in values) + "\n")
        print("wrote %s (%d epochs)" % (path, len(days_list)))
    kernel.close()


if __name__ == "__main__":
    main()
