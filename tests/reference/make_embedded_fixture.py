#!/usr/bin/env python3
"""Barycentric states of the Sun, planets and Moon from JPL DE421, for the
embedded-ephemeris test (service/astro/embedded/tests.rs).

Generating command (from the repository root):

    bash tests/reference/fetch-de421.sh
    python3 tests/reference/make_embedded_fixture.py

Reference libraries: jplephem 2.24 (PyPI) reading de421.bsp as carried by
the PyPI package skyfield-data 7.0.0; numpy 2.4.6.

Output: tests/reference/fixtures/embedded_de421_states.csv, one row per
epoch and body: TDB days since J2000, the body's name as the project spells
it, then the barycentric ICRF position (au) and velocity (au/day). The
epochs cover 1990-2050 at an uneven step so that no period of the
theories is sampled in phase.
"""

import csv
import os

import jplephem
from jplephem.spk import SPK

AU_KM = 149_597_870.700  # IAU 2012 Resolution B2, exact
J2000_JD = 2_451_545.0
EPOCH_COUNT = 160
# 1990 January 1.0 and 2050 January 1.0, TDB, as days since J2000.
FIRST_DAY = -3652.5
LAST_DAY = 18262.5

HERE = os.path.dirname(os.path.abspath(__file__))
KERNEL = os.path.join(HERE, "data", "de421.bsp")
OUT = os.path.join(HERE, "fixtures", "embedded_de421_states.csv")

# Segment chains from the solar-system barycentre (0), NAIF ids.
CHAINS = {
    "Sun": [(0, 10)],
    "Mercury": [(0, 1)],
    "Venus": [(0, 2)],
    "Earth": [(0, 3), (3, 399)],
    "Moon": [(0, 3), (3, 301)],
    "Mars": [(0, 4)],
    "Jupiter": [(0, 5)],
    "Saturn": [(0, 6)],
    "Uranus": [(0, 7)],
    "Neptune": [(0, 8)],
}


def main():
    assert jplephem.__version__ == "2.24", jplephem.__version__
    if not os.path.exists(KERNEL):
        raise SystemExit("de421.bsp missing: run bash tests/reference/fetch-de421.sh")
    kernel = SPK.open(KERNEL)
    step = (LAST_DAY - FIRST_DAY) / (EPOCH_COUNT - 1)
    rows = []
    for i in range(EPOCH_COUNT):
        # An irrational-looking wobble keeps the phases of the step apart.
        day = FIRST_DAY + i * step + 0.37 * ((i * 0.618034) % 1.0)
        day = min(day, LAST_DAY)
        for body, chain in CHAINS.items():
            p = [0.0, 0.0, 0.0]
            v = [0.0, 0.0, 0.0]
            for center, target in chain:
                # jplephem: compute_and_differentiate(tdb_jd) -> km, km/day
                pos, vel = kernel[center, target].compute_and_differentiate(J2000_JD, day)
                p = [a + b for a, b in zip(p, pos)]
                v = [a + b for a, b in zip(v, vel)]
            rows.append(
                [f"{day:.6f}", body]
                + [f"{x / AU_KM:.14e}" for x in p]
                + [f"{x / AU_KM:.14e}" for x in v]
            )
    kernel.close()
    with open(OUT, "w", newline="") as f:
        f.write("# jplephem 2.24 on de421.bsp (skyfield-data 7.0.0); "
                "python3 tests/reference/make_embedded_fixture.py\n")
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["tdb_days_since_j2000", "body", "x_au", "y_au", "z_au",
                    "vx_au_per_day", "vy_au_per_day", "vz_au_per_day"])
        w.writerows(rows)


if __name__ == "__main__":
    main()
