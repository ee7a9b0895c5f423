#!/usr/bin/env python3
"""Reference fixtures for time scales and station positions, from pyerfa.

Generate (from the repository root):

    python3 tests/reference/make_time_observer_fixtures.py

Needs pyerfa 2.0.1.5 and numpy (PyPI). Writes

  tests/reference/fixtures/time_utc_tt_tdb.csv
      UTC instants 1990-2050, leap-second days included, with TAI, TT and TDB
      as two-part Julian dates:
        erfa.dtf2d("UTC", ...) -> erfa.utctai -> erfa.taitt
        -> erfa.dtdb(tt1, tt2, ut, 0.0, 0.0, 0.0)   (geocentric form)
        -> erfa.tttdb(tt1, tt2, dtdb)
  tests/reference/fixtures/observer_gcrs.csv
      GCRS position (km) and velocity (km/s) of invented sites, taking
      UT1 = UTC and no polar motion, by the equinox-based route:
        ut1 = erfa.utcut1(utc1, utc2, 0.0); tt as above
        npb  = erfa.pnm06a(tt1, tt2)
        gast = erfa.gst06a(ut11, ut12, tt1, tt2)
        pv   = erfa.pvtob(elong, phi, h, 0.0, 0.0, 0.0, gast)  (true equator
               and equinox of date; velocity = Earth rotation x position)
        gcrs = npb.T @ pv
      The script also checks the CIO-based route (erfa.c2t06a with
      xp = yp = 0) against it and prints the largest difference.

Sites and epochs are invented (seeded random numbers); no real station.
"""

import csv
import os
import warnings

import erfa
import numpy as np

# erfa warns "dubious year" for dates past its leap-second knowledge; the
# table simply keeps the last TAI-UTC, which is what the Rust side does too.
warnings.simplefilter("ignore", erfa.ErfaWarning)

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "fixtures")

# Invented sites: (name, east longitude deg, geodetic latitude deg, height m)
SITES = [
    ("mid-north", 12.3456, 47.1234, 520.0),
    ("high-north", -71.25, 78.9, 35.0),
    ("far-south", 135.5, -66.4, 2400.0),
    ("summit", -68.1, -22.95, 5050.0),
    ("dateline-east", 179.95, -16.5, 12.0),
    ("dateline-west", -179.9, 51.7, 80.0),
    ("equator", 35.0, 0.0, 0.0),
]

# Days that end with a leap second: (year, month, day).
LEAP_DAYS = [(1992, 6, 30), (1998, 12, 31), (2005, 12, 31), (2012, 6, 30),
             (2015, 6, 30), (2016, 12, 31)]


def utc_instants(rng, count):
    """Random UTC calendar readings 1990-2050 plus readings around leap seconds."""
    out = []
    start = erfa.dtf2d("UTC", 1990, 1, 1, 0, 0, 0.0)
    end = erfa.dtf2d("UTC", 2050, 12, 31, 0, 0, 0.0)
    span = (end[0] - start[0]) + (end[1] - start[1])
    for _ in range(count):
        day = int(rng.uniform(0.0, span))
        iy, im, iday, _ = erfa.jd2cal(start[0] + start[1], float(day))
        sec_of_day = round(float(rng.uniform(0.0, 86399.0)), 6)
        hour = int(sec_of_day // 3600)
        minute = int((sec_of_day - 3600 * hour) // 60)
        sec = round(sec_of_day - 3600 * hour - 60 * minute, 6)
        out.append((int(iy), int(im), int(iday), hour, minute, sec))
    for (y, m, d) in LEAP_DAYS:
        out.append((y, m, d, 23, 59, 59.5))
        out.append((y, m, d, 23, 59, 60.5))
        jd = erfa.cal2jd(y, m, d)
        ny, nm, nd, _ = erfa.jd2cal(jd[0], jd[1] + 1.0)
        out.append((int(ny), int(nm), int(nd), 0, 0, 0.5))
    return out


def iso(y, m, d, hh, mm, ss):
    whole = int(ss)
    frac = f"{ss - whole:.6f}"[1:]
    return f"{y:04d}-{m:02d}-{d:02d}T{hh:02d}:{mm:02d}:{whole:02d}{frac}Z"


def tt_of(y, m, d, hh, mm, ss):
    u1, u2 = erfa.dtf2d("UTC", y, m, d, hh, mm, ss)
    a1, a2 = erfa.utctai(u1, u2)
    t1, t2 = erfa.taitt(a1, a2)
    return (u1, u2), (a1, a2), (t1, t2)


def write_time_fixture(rng):
    rows = []
    for (y, m, d, hh, mm, ss) in utc_instants(rng, 60):
        (u1, u2), (a1, a2), (t1, t2) = tt_of(y, m, d, hh, mm, ss)
        ut_fraction = ((hh * 3600 + mm * 60 + ss) / 86400.0) % 1.0
        dtdb = erfa.dtdb(t1, t2, ut_fraction, 0.0, 0.0, 0.0)
        b1, b2 = erfa.tttdb(t1, t2, dtdb)
        rows.append([iso(y, m, d, hh, mm, ss), repr(float(a1)), repr(float(a2)),
                     repr(float(t1)), repr(float(t2)), repr(float(b1)), repr(float(b2))])
    path = os.path.join(OUT, "time_utc_tt_tdb.csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["utc_iso", "tai_jd1", "tai_jd2", "tt_jd1", "tt_jd2",
                    "tdb_jd1", "tdb_jd2"])
        w.writerows(rows)
    print(f"{path}: {len(rows)} rows")


def write_observer_fixture(rng):
    epochs = utc_instants(rng, 50)[:50]
    rows = []
    worst_cio_m = 0.0
    for (name, lon, lat, h) in SITES:
        elong, phi = np.radians(lon), np.radians(lat)
        for (y, m, d, hh, mm, ss) in epochs:
            (u1, u2), _, (t1, t2) = tt_of(y, m, d, hh, mm, ss)
            ut11, ut12 = erfa.utcut1(u1, u2, 0.0)
            npb = erfa.pnm06a(t1, t2)
            gast = erfa.gst06a(ut11, ut12, t1, t2)
            pv = erfa.pvtob(elong, phi, h, 0.0, 0.0, 0.0, gast)
            pos_m = npb.T @ pv[0]
            vel_m_s = npb.T @ pv[1]
            # CIO-based route for comparison: ITRS -> GCRS = c2t^T.
            c2t = erfa.c2t06a(t1, t2, ut11, ut12, 0.0, 0.0)
            itrs = erfa.gd2gc(1, elong, phi, h)
            worst_cio_m = max(worst_cio_m, float(np.linalg.norm(c2t.T @ itrs - pos_m)))
            rows.append([name, repr(lon), repr(lat), repr(h), iso(y, m, d, hh, mm, ss)]
                        + [repr(float(v) / 1000.0) for v in pos_m]
                        + [repr(float(v) / 1000.0) for v in vel_m_s])
    path = os.path.join(OUT, "observer_gcrs.csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["site", "east_longitude_deg", "latitude_deg", "height_m", "utc_iso",
                    "x_km", "y_km", "z_km", "vx_km_s", "vy_km_s", "vz_km_s"])
        w.writerows(rows)
    print(f"{path}: {len(rows)} rows; equinox vs CIO route differ by at most "
          f"{worst_cio_m * 1000:.3f} mm")


def main():
    os.makedirs(OUT, exist_ok=True)
    rng = np.random.default_rng(20240917)
    write_time_fixture(rng)
    write_observer_fixture(np.random.default_rng(77))


if __name__ == "__main__":
    main()
