#!/usr/bin/env python3
"""Synthetic astrometry of invented bodies from an outside truth model.

Purpose
-------
The orbit fitter is tested against observations it did not make itself: this
script builds them from general-purpose reference libraries only (rebound,
jplephem on de421.bsp, pyerfa, numpy) and writes, per invented body, the true
orbit, noise-free astrometry and a noisy ADES PSV file with a few gross
outliers. The fitter must recover the state, the non-gravitational terms (or
their absence) and the outliers.

Regenerate (from the repository root):

    bash tests/reference/fetch-de421.sh      # once: tests/reference/data/de421.bsp
    python3 tests/reference/make_synthetic_astrometry.py

Library versions used for the committed fixtures: rebound 5.2.2,
jplephem 2.24, pyerfa 2.0.1.5, numpy 2.4.6, Python 3.11 (the script records
the versions it actually ran with in every truth.json). Run time is a few
minutes (the force model is a Python callback).

Outputs, under tests/reference/fixtures/synthetic/<body>/:
  truth.json   epoch (TDB), heliocentric ICRF state, A1/A2/A3, g(r) law, the
               constants used, the observation summary, the outlier indices,
               the noise seed, checks and estimates made by this script.
  clean.csv    noise-free astrometry, one row per observation, in time order:
               obs_time_utc (ISO 8601, ms), station, ra_deg, dec_deg (1e-10
               deg), rms_ra_arcsec (of RA*cos Dec), rms_dec_arcsec, then
               tdb_days_j2000, light_time_days, range_au (for diagnostics).
  noisy.psv    the same epochs as an ADES PSV (version 2022) file with
               Gaussian noise and the gross outliers; rows in the same order
               as clean.csv, so the outlier indices (0-based) apply to both.

Bodies (invented; the half-month letter Z is never assigned by the real
designation scheme):
  hyperbolic_outgassing  provID 2026 ZB1: e ~ 2, q ~ 1 au, A1 = 1e-8
                         au/day^2 with the inverse-square law, A2 = A3 = 0,
                         ~190-day arc. A1 is ~50 times its linear-estimate
                         sigma (see truth.json): far above an 8-sigma
                         detection, yet small enough that a gravity-only fit
                         still converges with residuals a few times the noise.
  hyperbolic_gravity     provID 2026 ZC2: the same epoch state, A_i = 0,
                         observed at the same epochs and stations.
  bound_comet            provID 2026 ZD3: e ~ 0.8, q ~ 1.4 au, water-ice law
                         A1, A2, ~1-year arc.

Modelling choices and simplifications
-------------------------------------
Dynamics (truth):
  * rebound IAS15 (default tolerance) integrates ONE massless particle,
    heliocentric, with rebound's own gravity switched off
    (sim.gravity = "none"); an additional-forces callback
    (force_is_velocity_dependent = 1) supplies the whole acceleration:
      - Sun point mass: -mu_s r/|r|^3;
      - Mercury, Venus, Earth, Moon, Mars..Neptune system barycentres from
        de421 via jplephem, heliocentric direct + indirect terms
        mu_p [(r_p - r)/|r_p - r|^3 - r_p/|r_p|^3], r_p = (0->p) - (0->10);
        Earth = (0->3) + (3->399), Moon = (0->3) + (3->301); Mercury and
        Venus are the 0->1 and 0->2 barycentres; no Pluto, no asteroids;
      - Sun's first post-Newtonian term, PPN beta = gamma = 1:
        mu_s/(c^2 r^3) [(4 mu_s/r - v^2) r + 4 (r.v) v];
      - non-gravitational g(r)(A1 r_hat + A2 t_hat + A3 n_hat), n_hat along
        r x v, t_hat = n_hat x r_hat, g either (1 au/r)^2 or the water-ice
        law of Marsden, Sekanina & Yeomans 1973 (alpha = 0.1112620426,
        r0 = 2.808 au, m = 2.15, n = 5.093, k = 4.6142); no time offset DT.
  * Units au, day; time argument TDB; axes ICRF (those of de421).
  * GM values: the DE440 values of docs SCIENCE (au^3/day^2), the same the
    fitter uses; c = 173.144632674 au/day.
  * Integration starts at the body's epoch and runs forward and backward,
    stopping exactly (exact_finish_time = 1) at every time needed.
  * Check: with the callback reduced to the Sun alone, the integrated state
    is compared with a universal-variable two-body propagation (written
    here) over the whole arc; the worst relative position difference is
    printed and stored in truth.json.
Observers:
  * Invented stations ZQA..ZQD from config/stations.toml (WGS84 geodetic).
    ITRS = erfa.gd2gc(1, lon, lat, h); GCRS = c2t06a(tt, ut1, 0, 0)^T ITRS
    (CIO-based, IAU 2006/2000A), no polar motion, UT1 = UTC (no IERS table;
    up to ~0.4 km at the site). The geocentric site vector is added to
    the de421 Earth barycentric position (0->3 + 3->399) unchanged (no
    GCRS->BCRS Lorentz scaling, centimetres).
  * UTC -> TAI -> TT with erfa.utctai, erfa.taitt; TDB = TT + erfa.dtdb with
    elong = u = v = 0 (geocentric form; the topocentric terms are ~2 us).
Observation model:
  * Astrometric (no aberration, no light deflection): rho = x_bary(t - tau)
    - R_obs_bary(t), x_bary = heliocentric truth + de421 Sun (0->10);
    tau starts at 0 and is iterated three times, tau = |rho|/c, on a cubic
    Hermite interpolant of the truth sampled every 0.25 day; the published
    rho then uses the integrator's own position at the final emission time
    (the script prints the largest interpolant-vs-integrator difference,
    ~1e-11 au, and the largest |tau - |rho|/c|, ~1e-14 day).
    RA = atan2(rho_y, rho_x), Dec = asin(rho_z/|rho|).
Cadence:
  * Nights (UTC dates) over the arc; a night is lost to a bright Moon when
    the geocentric Sun-Moon angle exceeds 120 deg (about 10 days a month),
    or to weather (a two-state Markov chain, runs of cloudy days).
  * Each clear night has 1-2 tracklets from different stations, taken in a
    rotating order; a tracklet is 3-6 exposures, 8-20 min apart, within an
    hour, at a time when the Sun is below -12 deg and the body above 20 deg
    altitude at that site (altitudes from the site's ellipsoid normal, no
    refraction). Exposure times are whole milliseconds of UTC.
  * No magnitude limit; the mag column is a simple brightness law (active:
    M1 + 5 log10(Delta) + 10 log10(r); inert: H + 5 log10(r Delta)
    + 0.035 deg^-1 * phase), rounded to 0.1 mag, band V. It is illustrative
    only.
Noise:
  * Per tracklet rmsRA (of RA*cos Dec) from the station's configured sigma
    (0.6 arcsec for ZQC, which has none) times a factor in [0.8, 1.2],
    rmsDec = rmsRA times [0.9, 1.1], both clipped to [0.2, 0.8] arcsec and
    rounded to 0.01 arcsec; errors drawn independently (no rmsCorr, no
    correlation between observations of a night) with exactly those
    sigmas. Then 3-6 gross outliers: 5-30 arcsec offsets in a random
    direction, added on top; their indices and offsets are in truth.json.
  * numpy default_rng with a fixed seed per body (schedule and noise).
Estimates stored in truth.json ("nongrav_detectability"):
  * a linear (Fisher) estimate of sigma(A_i) for the models the fitter will
    try, from finite-difference partials of the clean astrometry with
    respect to the epoch state and the A_i at fixed emission times, the
    stated sigmas as weights and the outliers left out;
  * the cruder rule of thumb: RMS position difference with and without the
    A_i over the arc (same epoch state), compared with sigma/sqrt(N).
"""

import csv
import io
import json
import math
import os
import sys
import tomllib
import warnings

import erfa
import jplephem
import numpy as np
import rebound
from jplephem.spk import SPK

SCRIPT_VERSION = "1.0.0"

# erfa warns "dubious year" for dates past its leap-second knowledge.
warnings.simplefilter("ignore", erfa.ErfaWarning)

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
BSP = os.path.join(HERE, "data", "de421.bsp")
STATIONS_TOML = os.path.join(ROOT, "config", "stations.toml")
OUT = os.path.join(HERE, "fixtures", "synthetic")

# --- constants (docs SCIENCE: DE440 GM values, au^3/day^2) -----------------
AU_KM = 149597870.700  # IAU 2012 Resolution B2
C_AU_DAY = 173.144632674  # 299792.458 km/s in au/day
J2000_JD = 2451545.0
GM_SUN = 2.9591220828411956e-04
PERTURBERS = [
    # name, GM (au^3/day^2), SPK chain (center, target) pairs summed
    ("mercury", 4.9125001948893182e-11, [(0, 1)]),
    ("venus", 7.2434523326441187e-10, [(0, 2)]),
    ("earth", 8.8876924467071033e-10, [(0, 3), (3, 399)]),
    ("moon", 1.0931894624024351e-11, [(0, 3), (3, 301)]),
    ("mars_system", 9.5495488297258119e-11, [(0, 4)]),
    ("jupiter_system", 2.8253458252257917e-07, [(0, 5)]),
    ("saturn_system", 8.4597059933762903e-08, [(0, 6)]),
    ("uranus_system", 1.2920265649682399e-08, [(0, 7)]),
    ("neptune_system", 1.5243573478851939e-08, [(0, 8)]),
]
# Water-ice law, Marsden, Sekanina & Yeomans 1973 (AJ 78, 211).
WATER = dict(alpha=0.1112620426, r0_au=2.808, m=2.15, n=5.093, k=4.6142)
# J2000 obliquity for ecliptic elements (IAU 1976 value, common practice).
OBLIQUITY_RAD = math.radians(84381.448 / 3600.0)
ARCSEC = math.pi / (180.0 * 3600.0)

MOON_BRIGHT_DEG = 120.0  # Sun-Moon angle above which a night is lost
SUN_NIGHT_DEG = -12.0
MIN_ALT_DEG = 20.0


# --- ephemeris --------------------------------------------------------------
class Ephemeris:
    """de421 through jplephem, positions in au, time as TDB days since J2000."""

    def __init__(self, path):
        if not os.path.exists(path):
            sys.exit(f"{path} is missing: run `bash tests/reference/fetch-de421.sh`")
        self.kernel = SPK.open(path)
        self.seg = {}
        for _, _, chain in PERTURBERS:
            for pair in chain:
                self.seg[pair] = self.kernel[pair]
        for pair in [(0, 10), (0, 3), (3, 399), (3, 301)]:
            self.seg[pair] = self.kernel[pair]

    def pos(self, chain, t):
        return sum(self.seg[p].compute(J2000_JD, t) for p in chain) / AU_KM

    def sun_bary(self, t):
        return self.pos([(0, 10)], t)

    def earth_bary(self, t):
        return self.pos([(0, 3), (3, 399)], t)

    def moon_bary(self, t):
        return self.pos([(0, 3), (3, 301)], t)

    def perturbers_helio(self, t):
        # Each distinct segment once: Earth and Moon share 0->3.
        at = {pair: seg.compute(J2000_JD, t) for pair, seg in self.seg.items()}
        sun = at[(0, 10)]
        return [(gm, (sum(at[p] for p in chain) - sun) / AU_KM) for _, gm, chain in PERTURBERS]


# --- force model --------------------------------------------------------------
def g_of_r(law, r):
    if law == "inverse_square":
        return 1.0 / (r * r)
    if law == "water_ice":
        x = r / WATER["r0_au"]
        return WATER["alpha"] * x ** (-WATER["m"]) * (1.0 + x ** WATER["n"]) ** (-WATER["k"])
    raise ValueError(law)


def acceleration(eph, t_j2000, r, v, a_ng, law, planets=True, gr=True, memo=None):
    """Heliocentric acceleration (au/day^2) of a massless body.

    `memo` caches the perturbers by time: IAS15 evaluates the same substep
    times in every predictor-corrector iteration of a step.
    """
    rr = math.sqrt(r @ r)
    acc = -GM_SUN * r / rr**3
    if planets:
        if memo is None:
            bodies = eph.perturbers_helio(t_j2000)
        else:
            bodies = memo.get(t_j2000)
            if bodies is None:
                bodies = memo[t_j2000] = eph.perturbers_helio(t_j2000)
        for gm, rp in bodies:
            d = rp - r
            acc += gm * (d / (d @ d) ** 1.5 - rp / (rp @ rp) ** 1.5)
    if gr:
        v2 = v @ v
        acc += GM_SUN / (C_AU_DAY**2 * rr**3) * ((4.0 * GM_SUN / rr - v2) * r + 4.0 * (r @ v) * v)
    if a_ng is not None and any(a_ng):
        h = np.cross(r, v)
        r_hat = r / rr
        n_hat = h / math.sqrt(h @ h)
        t_hat = np.cross(n_hat, r_hat)
        acc += g_of_r(law, rr) * (a_ng[0] * r_hat + a_ng[1] * t_hat + a_ng[2] * n_hat)
    return acc


def propagate(eph, epoch, state, a_ng, law, times, planets=True, gr=True):
    """States (N x 6) at `times` (TDB days since J2000), any order.

    One massless particle; rebound's own gravity is off and the callback
    writes the whole acceleration (assignment, not addition, so nothing
    depends on what rebound leaves in ax..az).
    """
    times = np.asarray(times, dtype=float)
    out = np.empty((len(times), 6))
    rel = times - epoch
    for sign in (1.0, -1.0):
        idx = np.where(rel >= 0.0)[0] if sign > 0 else np.where(rel < 0.0)[0]
        if len(idx) == 0:
            continue
        idx = idx[np.argsort(sign * rel[idx])]
        sim = rebound.Simulation()
        sim.integrator = "ias15"
        sim.gravity = "none"
        sim.add(m=0.0, x=state[0], y=state[1], z=state[2], vx=state[3], vy=state[4], vz=state[5])
        sim.t = 0.0
        memo = {}

        def force(simp):
            s = simp.contents
            p = s.particles[0]
            r = np.array([p.x, p.y, p.z])
            v = np.array([p.vx, p.vy, p.vz])
            a = acceleration(eph, epoch + s.t, r, v, a_ng, law, planets, gr, memo)
            p.ax, p.ay, p.az = a[0], a[1], a[2]

        sim.additional_forces = force
        sim.force_is_velocity_dependent = 1
        if sign < 0:
            sim.dt = -0.01
        for i in idx:
            sim.integrate(rel[i], exact_finish_time=1)
            p = sim.particles[0]
            out[i] = [p.x, p.y, p.z, p.vx, p.vy, p.vz]
    return out


# --- two-body check: universal variables (Stumpff functions) -----------------
def stumpff(z):
    if z > 1e-8:
        s = math.sqrt(z)
        return (1 - math.cos(s)) / z, (s - math.sin(s)) / s**3
    if z < -1e-8:
        s = math.sqrt(-z)
        return (math.cosh(s) - 1) / (-z), (math.sinh(s) - s) / s**3
    return 0.5 - z / 24.0, 1.0 / 6.0 - z / 120.0


def kepler_universal(state, dt, mu=GM_SUN):
    r0v, v0v = np.array(state[:3]), np.array(state[3:])
    r0 = math.sqrt(r0v @ r0v)
    vr0 = (r0v @ v0v) / r0
    alpha = 2.0 / r0 - (v0v @ v0v) / mu
    sq = math.sqrt(mu)
    chi = sq * abs(alpha) * dt if alpha > 0 else sq * dt / r0
    for _ in range(200):
        z = alpha * chi * chi
        c2, c3 = stumpff(z)
        f = r0 * vr0 / sq * chi * chi * c2 + (1 - alpha * r0) * chi**3 * c3 + r0 * chi - sq * dt
        fp = r0 * vr0 / sq * chi * (1 - z * c3) + (1 - alpha * r0) * chi * chi * c2 + r0
        step = f / fp
        chi -= step
        if abs(step) < 1e-15 * max(1.0, abs(chi)):
            break
    z = alpha * chi * chi
    c2, c3 = stumpff(z)
    fl = 1 - chi * chi / r0 * c2
    gl = dt - chi**3 / sq * c3
    rv = fl * r0v + gl * v0v
    r = math.sqrt(rv @ rv)
    fd = sq / (r * r0) * (z * c3 - 1) * chi
    gd = 1 - chi * chi / r * c2
    return np.concatenate([rv, fd * r0v + gd * v0v])


def two_body_check(eph, epoch, state, times):
    got = propagate(eph, epoch, state, None, "inverse_square", times, planets=False, gr=False)
    worst = 0.0
    for t, s in zip(times, got):
        ref = kepler_universal(state, t - epoch)
        worst = max(worst, np.linalg.norm(s[:3] - ref[:3]) / np.linalg.norm(ref[:3]))
    return worst


# --- elements ---------------------------------------------------------------
def ecl_to_icrf(v):
    ce, se = math.cos(OBLIQUITY_RAD), math.sin(OBLIQUITY_RAD)
    return np.array([v[0], ce * v[1] - se * v[2], se * v[1] + ce * v[2]])


def icrf_to_ecl(v):
    ce, se = math.cos(OBLIQUITY_RAD), math.sin(OBLIQUITY_RAD)
    return np.array([v[0], ce * v[1] + se * v[2], -se * v[1] + ce * v[2]])


def state_from_elements(q, e, inc_deg, node_deg, peri_deg, tp, epoch):
    """Heliocentric ICRF state at `epoch` of ecliptic J2000 elements."""
    a = q / (1.0 - e)
    n = math.sqrt(GM_SUN / abs(a) ** 3)
    m = n * (epoch - tp)
    if e < 1.0:
        ea = m
        for _ in range(100):
            ea -= (ea - e * math.sin(ea) - m) / (1 - e * math.cos(ea))
        nu = 2 * math.atan2(math.sqrt(1 + e) * math.sin(ea / 2), math.sqrt(1 - e) * math.cos(ea / 2))
    else:
        fh = math.asinh(m / e)
        for _ in range(100):
            fh -= (e * math.sinh(fh) - fh - m) / (e * math.cosh(fh) - 1)
        nu = 2 * math.atan2(math.sqrt(e + 1) * math.sinh(fh / 2), math.sqrt(e - 1) * math.cosh(fh / 2))
    p = q * (1 + e)
    r = p / (1 + e * math.cos(nu))
    pf = np.array([r * math.cos(nu), r * math.sin(nu), 0.0])
    vf = math.sqrt(GM_SUN / p) * np.array([-math.sin(nu), e + math.cos(nu), 0.0])
    O, i, w = (math.radians(x) for x in (node_deg, inc_deg, peri_deg))
    rot = (
        np.array([[math.cos(O), -math.sin(O), 0], [math.sin(O), math.cos(O), 0], [0, 0, 1]])
        @ np.array([[1, 0, 0], [0, math.cos(i), -math.sin(i)], [0, math.sin(i), math.cos(i)]])
        @ np.array([[math.cos(w), -math.sin(w), 0], [math.sin(w), math.cos(w), 0], [0, 0, 1]])
    )
    return np.concatenate([ecl_to_icrf(rot @ pf), ecl_to_icrf(rot @ vf)])


def elements_from_state(state, epoch):
    """Osculating heliocentric ecliptic-J2000 q, e, i, node, peri, Tp."""
    r = icrf_to_ecl(state[:3])
    v = icrf_to_ecl(state[3:])
    rr = np.linalg.norm(r)
    h = np.cross(r, v)
    ev = np.cross(v, h) / GM_SUN - r / rr
    e = np.linalg.norm(ev)
    energy = (v @ v) / 2 - GM_SUN / rr
    a = -GM_SUN / (2 * energy)
    q = a * (1 - e)
    inc = math.degrees(math.acos(h[2] / np.linalg.norm(h)))
    nvec = np.array([-h[1], h[0], 0.0])
    node = math.degrees(math.atan2(nvec[1], nvec[0])) % 360
    peri = math.degrees(math.acos(np.clip(nvec @ ev / (np.linalg.norm(nvec) * e), -1, 1)))
    if ev[2] < 0:
        peri = 360 - peri
    nu = math.acos(np.clip(ev @ r / (e * rr), -1, 1))
    if r @ v < 0:
        nu = -nu
    n = math.sqrt(GM_SUN / abs(a) ** 3)
    if e < 1:
        ea = 2 * math.atan(math.sqrt((1 - e) / (1 + e)) * math.tan(nu / 2))
        m = ea - e * math.sin(ea)
    else:
        fh = 2 * math.atanh(math.sqrt((e - 1) / (e + 1)) * math.tan(nu / 2))
        m = e * math.sinh(fh) - fh
    return dict(
        frame="heliocentric ecliptic J2000 (obliquity 84381.448 arcsec), osculating at epoch",
        q_au=q,
        e=e,
        i_deg=inc,
        node_deg=node,
        peri_deg=peri,
        tp_tdb_days_j2000=epoch - m / n,
    )


# --- time scales and observers ------------------------------------------------
def load_stations():
    with open(STATIONS_TOML, "rb") as f:
        doc = tomllib.load(f)
    out = {}
    for s in doc["station"]:
        itrs_m = erfa.gd2gc(1, math.radians(s["longitude_deg"]), math.radians(s["latitude_deg"]), s["height_m"])
        lat, lon = math.radians(s["latitude_deg"]), math.radians(s["longitude_deg"])
        up = np.array([math.cos(lat) * math.cos(lon), math.cos(lat) * math.sin(lon), math.sin(lat)])
        out[s["code"]] = dict(
            itrs_au=np.asarray(itrs_m) / 1000.0 / AU_KM,
            up_itrs=up,
            sigma_arcsec=s.get("sigma_arcsec", 0.6),
            lon_deg=s["longitude_deg"],
            lat_deg=s["latitude_deg"],
            height_m=s["height_m"],
        )
    return out


class Instant:
    """One UTC instant given as MJD day number and milliseconds of day."""

    def __init__(self, mjd, ms):
        self.mjd, self.ms = int(mjd), int(ms)
        self.utc1 = 2400000.5 + self.mjd
        self.utc2 = self.ms / 86400000.0
        tai1, tai2 = erfa.utctai(self.utc1, self.utc2)
        self.tt1, self.tt2 = erfa.taitt(tai1, tai2)
        dtdb = erfa.dtdb(self.tt1, self.tt2, self.utc2, 0.0, 0.0, 0.0)
        tdb1, tdb2 = erfa.tttdb(self.tt1, self.tt2, dtdb)
        self.tdb = (tdb1 - J2000_JD) + tdb2  # TDB days since J2000

    def iso(self):
        iy, im, iday, hmsf = erfa.d2dtf("UTC", 3, self.utc1, self.utc2)
        h, m, s, f = (int(x) for x in hmsf)
        return f"{int(iy):04d}-{int(im):02d}-{int(iday):02d}T{h:02d}:{m:02d}:{s:02d}.{f:03d}Z"

    def celestial_from_terrestrial(self):
        # UT1 = UTC (no IERS table), no polar motion.
        return erfa.c2t06a(self.tt1, self.tt2, self.utc1, self.utc2, 0.0, 0.0).T


def observer_bary(eph, station, inst):
    m = inst.celestial_from_terrestrial()
    return eph.earth_bary(inst.tdb) + m @ station["itrs_au"], m @ station["up_itrs"]


# --- observation model ----------------------------------------------------------
def astrometry(eph, epoch, state, a_ng, law, insts, stations, obs_stn, track, exact=True):
    """Clean RA/Dec (rad), light time (day), range (au), emission times.

    The light-time iteration (tau = 0 start, three passes) runs on the dense
    Hermite interpolant of the truth (`track`); the final emission-time
    positions then come from the integrator itself (`exact`), and the light
    time recomputed from them is compared with the iterated one.
    """
    obs = np.array([observer_bary(eph, stations[s], i)[0] for s, i in zip(obs_stn, insts)])
    t_obs = np.array([i.tdb for i in insts])
    tau = np.zeros(len(insts))
    for _ in range(3):
        x = np.array([track.pos(t) for t in t_obs - tau])
        bary = x + eph.sun_bary(t_obs - tau).T
        tau = np.linalg.norm(bary - obs, axis=1) / C_AU_DAY
    t_emit = t_obs - tau
    x_interp = np.array([track.pos(t) for t in t_emit])
    x = propagate(eph, epoch, state, a_ng, law, t_emit)[:, :3] if exact else x_interp
    rho = x + eph.sun_bary(t_emit).T - obs
    dist = np.linalg.norm(rho, axis=1)
    ra = np.arctan2(rho[:, 1], rho[:, 0]) % (2 * math.pi)
    dec = np.arcsin(rho[:, 2] / dist)
    return dict(
        ra=ra,
        dec=dec,
        tau=tau,
        range=dist,
        t_emit=t_emit,
        obs=obs,
        x_helio=x,
        interp_error_au=float(np.max(np.linalg.norm(x - x_interp, axis=1))),
        light_time_residual_days=float(np.max(np.abs(dist / C_AU_DAY - tau))),
    )


# --- cadence -------------------------------------------------------------------
class Track:
    """Cubic Hermite interpolation of the truth's heliocentric positions on
    a regular grid (used for scheduling, the light-time iteration and the
    partials; the published positions come from the integrator)."""

    def __init__(self, eph, epoch, state, a_ng, law, t0, t1, step):
        self.grid = np.arange(math.floor(t0) - 1, math.ceil(t1) + 1 + step, step)
        self.states = propagate(eph, epoch, state, a_ng, law, self.grid)

    @classmethod
    def from_states(cls, grid, states):
        tr = cls.__new__(cls)
        tr.grid, tr.states = grid, states
        return tr

    def pos(self, t):
        t = np.asarray(t, dtype=float)
        j = np.clip(np.searchsorted(self.grid, t) - 1, 0, len(self.grid) - 2)
        h = self.grid[j + 1] - self.grid[j]
        s = ((t - self.grid[j]) / h)[..., None]
        p0, p1 = self.states[j, :3], self.states[j + 1, :3]
        m0, m1 = self.states[j, 3:] * h[..., None], self.states[j + 1, 3:] * h[..., None]
        return (
            (2 * s**3 - 3 * s**2 + 1) * p0
            + (s**3 - 2 * s**2 + s) * m0
            + (-2 * s**3 + 3 * s**2) * p1
            + (s**3 - s**2) * m1
        )


def altitudes_deg(vec, up):
    return np.degrees(np.arcsin(np.clip(np.sum(vec * up, axis=1) / np.linalg.norm(vec, axis=1), -1, 1)))


class NightSky:
    """Geometry on a 5-minute grid over one UTC day, shared by the sites."""

    def __init__(self, eph, track, mjd):
        self.minutes = np.arange(0, 1440, 5)
        utc1 = np.full(len(self.minutes), 2400000.5 + mjd)
        utc2 = self.minutes / 1440.0
        tt1, tt2 = erfa.taitt(*erfa.utctai(utc1, utc2))
        tdb1, tdb2 = erfa.tttdb(tt1, tt2, erfa.dtdb(tt1, tt2, utc2, 0.0, 0.0, 0.0))
        tdb = (tdb1 - J2000_JD) + tdb2
        self.c2t_t = np.transpose(erfa.c2t06a(tt1, tt2, utc1, utc2, 0.0, 0.0), (0, 2, 1))
        self.earth = eph.earth_bary(tdb).T
        self.sun = eph.sun_bary(tdb).T
        self.body = track.pos(tdb) + self.sun

    def visible_minutes(self, station):
        site = self.earth + self.c2t_t @ station["itrs_au"]
        up = self.c2t_t @ station["up_itrs"]
        ok = (altitudes_deg(self.sun - site, up) < SUN_NIGHT_DEG) & (
            altitudes_deg(self.body - site, up) > MIN_ALT_DEG
        )
        return [int(m) for m in self.minutes[ok]]


def moon_is_bright(eph, mjd):
    inst = Instant(mjd, 0)
    e = eph.earth_bary(inst.tdb)
    s = eph.sun_bary(inst.tdb) - e
    m = eph.moon_bary(inst.tdb) - e
    ang = math.degrees(math.acos(s @ m / (np.linalg.norm(s) * np.linalg.norm(m))))
    return ang > MOON_BRIGHT_DEG


def schedule(eph, track, stations, mjd0, mjd1, rng, p_second):
    """List of (Instant, station code, tracklet id, rms_ra, rms_dec)."""
    codes = sorted(stations)
    turn = 0
    cloudy = False
    rows = []
    tracklet = 0
    for mjd in range(mjd0, mjd1 + 1):
        cloudy = rng.random() < (0.55 if cloudy else 0.2)
        if cloudy or moon_is_bright(eph, mjd):
            continue
        wanted = 2 if rng.random() < p_second else 1
        used = 0
        sky = NightSky(eph, track, mjd)
        for attempt in range(len(codes)):
            if used == wanted:
                break
            code = codes[(turn + attempt) % len(codes)]
            n = int(rng.integers(3, 7))
            gap = rng.uniform(8.0, min(20.0, 60.0 / (n - 1)))
            span = gap * (n - 1)
            minutes = sky.visible_minutes(stations[code])
            mins = set(minutes)
            starts = [m for m in minutes if all((m + k) in mins for k in range(0, int(span) + 5, 5))]
            if not starts:
                continue
            start = starts[int(rng.integers(len(starts)))] + rng.uniform(0, 4.0)
            base = stations[code]["sigma_arcsec"]
            rms_ra = round(float(np.clip(base * rng.uniform(0.8, 1.2), 0.2, 0.8)), 2)
            rms_dec = round(float(np.clip(rms_ra * rng.uniform(0.9, 1.1), 0.2, 0.8)), 2)
            for k in range(n):
                ms = int(round((start + k * gap + rng.uniform(-0.3, 0.3)) * 60000.0))
                rows.append((Instant(mjd, ms), code, tracklet, rms_ra, rms_dec))
            tracklet += 1
            used += 1
        turn = (turn + 1) % len(codes)
    rows.sort(key=lambda r: r[0].tdb)
    return rows


# --- noise, magnitudes, files -----------------------------------------------------
def add_noise(ra, dec, rms_ra, rms_dec, rng, n_outliers):
    d_ra = rng.normal(0.0, rms_ra) * ARCSEC  # of RA*cos(Dec)
    d_dec = rng.normal(0.0, rms_dec) * ARCSEC
    idx = np.sort(rng.choice(len(ra), size=n_outliers, replace=False))
    outliers = []
    for i in idx:
        size = rng.uniform(5.0, 30.0)
        pa = rng.uniform(0.0, 2 * math.pi)
        o_ra, o_dec = size * math.sin(pa), size * math.cos(pa)
        d_ra[i] += o_ra * ARCSEC
        d_dec[i] += o_dec * ARCSEC
        outliers.append(dict(index=int(i), offset_ra_cosdec_arcsec=o_ra, offset_dec_arcsec=o_dec, size_arcsec=size))
    return (ra + d_ra / np.cos(dec)) % (2 * math.pi), dec + d_dec, outliers


def magnitudes(res, sun_bary, active):
    r = np.linalg.norm(res["x_helio"], axis=1)
    delta = res["range"]
    if active:
        return 12.5 + 5 * np.log10(delta) + 10 * np.log10(r)
    # Phase angle at the body between the Sun and the observer.
    to_sun = -res["x_helio"]
    to_obs = res["obs"] - (res["x_helio"] + sun_bary)
    cosb = np.sum(to_sun * to_obs, axis=1) / (r * delta)
    phase = np.degrees(np.arccos(np.clip(cosb, -1, 1)))
    return 16.0 + 5 * np.log10(r * delta) + 0.035 * phase


def write_clean(path, rows, res):
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        [
            "obs_time_utc",
            "station",
            "ra_deg",
            "dec_deg",
            "rms_ra_arcsec",
            "rms_dec_arcsec",
            "tdb_days_j2000",
            "light_time_days",
            "range_au",
        ]
    )
    for k, (inst, code, _, rms_ra, rms_dec) in enumerate(rows):
        w.writerow(
            [
                inst.iso(),
                code,
                f"{math.degrees(res['ra'][k]):.10f}",
                f"{math.degrees(res['dec'][k]):.10f}",
                f"{rms_ra:.2f}",
                f"{rms_dec:.2f}",
                f"{inst.tdb:.12f}",
                f"{res['tau'][k]:.12e}",
                f"{res['range'][k]:.12f}",
            ]
        )
    with open(path, "w") as f:
        f.write(buf.getvalue())


PSV_COLUMNS = ["provID", "mode", "stn", "obsTime", "ra", "dec", "rmsRA", "rmsDec", "astCat", "mag", "band"]


def psv_values(prov, rows, ra, dec, mag):
    out = []
    for k, (inst, code, _, rms_ra, rms_dec) in enumerate(rows):
        out.append(
            [
                prov,
                "CCD",
                code,
                inst.iso(),
                f"{math.degrees(ra[k]):.8f}",
                f"{math.degrees(dec[k]):.8f}",
                f"{rms_ra:.2f}",
                f"{rms_dec:.2f}",
                "Gaia3",
                f"{mag[k]:.1f}",
                "V",
            ]
        )
    return out


def write_psv(path, prov, rows, ra, dec, mag):
    values = psv_values(prov, rows, ra, dec, mag)
    widths = [max(len(c), *(len(v[j]) for v in values)) for j, c in enumerate(PSV_COLUMNS)]
    lines = [
        "# version=2022",
        "# comment",
        "! line Synthetic astrometry of an invented body, made by",
        "! line tests/reference/make_synthetic_astrometry.py (see truth.json).",
        "|".join(c.ljust(wd) for c, wd in zip(PSV_COLUMNS, widths)).rstrip(),
    ]
    for v in values:
        cells = (x.rjust(wd) if j in (4, 5, 6, 7, 9) else x.ljust(wd) for j, (x, wd) in enumerate(zip(v, widths)))
        lines.append("|".join(cells).rstrip())
    with open(path, "w") as f:
        f.write("\n".join(lines) + "\n")


def read_back_psv(path):
    """Minimal PSV reader for the self-check: header lines, keyword record,
    data records."""
    with open(path) as f:
        lines = [ln.rstrip("\n") for ln in f]
    if lines[0] != "# version=2022":
        raise AssertionError("first line")
    body = [ln for ln in lines[1:] if not ln.startswith(("#", "!"))]
    keys = [k.strip() for k in body[0].split("|")]
    return [dict(zip(keys, (x.strip() for x in ln.split("|")))) for ln in body[1:]]


def self_check_psv(path, prov, rows, ra, dec):
    recs = read_back_psv(path)
    assert len(recs) == len(rows), "row count"
    worst = 0.0
    for k, (rec, (inst, code, _, rms_ra, rms_dec)) in enumerate(zip(recs, rows)):
        assert rec["provID"] == prov and rec["stn"] == code and rec["mode"] == "CCD"
        assert rec["obsTime"] == inst.iso()
        assert float(rec["rmsRA"]) == rms_ra and float(rec["rmsDec"]) == rms_dec
        # The time string must give back the instant the model used.
        iy, im, iday = int(rec["obsTime"][0:4]), int(rec["obsTime"][5:7]), int(rec["obsTime"][8:10])
        hh, mm = int(rec["obsTime"][11:13]), int(rec["obsTime"][14:16])
        ss = float(rec["obsTime"][17:23])
        u1, u2 = erfa.dtf2d("UTC", iy, im, iday, hh, mm, ss)
        assert abs((u1 - inst.utc1) + (u2 - inst.utc2)) * 86400.0 < 1e-6, "time"
        d_ra = (float(rec["ra"]) - math.degrees(ra[k]) + 180.0) % 360.0 - 180.0
        d_dec = float(rec["dec"]) - math.degrees(dec[k])
        worst = max(worst, abs(d_ra), abs(d_dec))
    assert worst <= 5.0001e-9, f"PSV angles off by {worst} deg"
    return worst


# --- detectability estimate --------------------------------------------------------
def sky_partials(eph, epoch, state, a_ng, law, res, keep, t0, t1, step=2.0):
    """Finite-difference partials of (RA cos Dec, Dec) in arcsec with respect
    to the 6 state components and A1, A2, A3, at fixed emission times and
    observer positions. Each perturbed-minus-nominal trajectory is smooth,
    so it is sampled on a `step`-day grid and interpolated."""
    grid = np.arange(math.floor(t0) - step, math.ceil(t1) + 2 * step, step)
    t_emit = res["t_emit"][keep]
    rho0 = res["x_helio"][keep] + eph.sun_bary(t_emit).T - res["obs"][keep]
    nominal = propagate(eph, epoch, state, a_ng, law, grid)

    def sky(rho):
        return np.arctan2(rho[:, 1], rho[:, 0]), np.arcsin(rho[:, 2] / np.linalg.norm(rho, axis=1))

    dec0 = res["dec"][keep]
    steps = [1e-7] * 3 + [1e-9] * 3 + [1e-9] * 3
    cols = []
    for j, h in enumerate(steps):
        pair = []
        for sgn in (1.0, -1.0):
            s = np.array(state, dtype=float)
            a = np.array(a_ng, dtype=float)
            if j < 6:
                s[j] += sgn * h
            else:
                a[j - 6] += sgn * h
            diff = Track.from_states(grid, propagate(eph, epoch, s, a, law, grid) - nominal)
            pair.append(sky(rho0 + diff.pos(t_emit)))
        d_ra = ((pair[0][0] - pair[1][0] + math.pi) % (2 * math.pi) - math.pi) * np.cos(dec0)
        d_dec = pair[0][1] - pair[1][1]
        cols.append(np.concatenate([d_ra, d_dec]) / (2 * h) / ARCSEC)
    return np.array(cols).T  # (2N, 9), arcsec per unit parameter


def fisher_sigmas(jac, sig, params):
    """sigma of each A_i for a model = state + the listed A indices."""
    cols = list(range(6)) + [6 + p for p in params]
    a = jac[:, cols] / sig[:, None]
    scale = np.linalg.norm(a, axis=0)
    cov = np.linalg.inv((a / scale).T @ (a / scale)) / np.outer(scale, scale)
    return {f"A{p + 1}": math.sqrt(cov[6 + k, 6 + k]) for k, p in enumerate(params)}


def rule_of_thumb(eph, epoch, state, law, insts, stations, codes, res, rms_ra, rms_dec, t_first, t_last):
    """RMS sky offset between the truth and the same epoch state without
    the A_i (no refit), against sigma/sqrt(N): an upper bound on the
    detectability, since a refit absorbs most of the offset."""
    zero = [0.0, 0.0, 0.0]
    grav_track = Track(eph, epoch, state, zero, law, t_first - 1, t_last + 1, 0.25)
    grav = astrometry(eph, epoch, state, zero, law, insts, stations, codes, grav_track, exact=False)
    d_ra = ((res["ra"] - grav["ra"] + math.pi) % (2 * math.pi) - math.pi) * np.cos(res["dec"])
    sep = np.hypot(d_ra, res["dec"] - grav["dec"]) / ARCSEC
    rms_sep = float(np.sqrt(np.mean(sep**2)))
    sigma_mean = float(np.sqrt(np.mean(np.concatenate([rms_ra, rms_dec]) ** 2)))
    return dict(
        rms_position_difference_arcsec=rms_sep,
        max_position_difference_arcsec=float(sep.max()),
        ratio_to_sigma_over_sqrt_n=rms_sep / (sigma_mean / math.sqrt(len(insts))),
        note="no refit: the orbit absorbs most of this; the Fisher figures are the realistic ones",
    )


# --- one body -------------------------------------------------------------------
def library_versions():
    return dict(
        rebound=rebound.__version__,
        jplephem=jplephem.__version__,
        pyerfa=erfa.__version__,
        numpy=np.__version__,
        python=sys.version.split()[0],
    )


def initial_state(spec):
    return state_from_elements(*spec["elements"], spec["epoch"])


def make_schedule(eph, stations, spec):
    """Observation rows for `spec` from its own dynamics and seed."""
    state = initial_state(spec)
    track = Track(eph, spec["epoch"], state, spec["a_ng"], spec["law"], spec["arc"][0], spec["arc"][1], 0.5)
    mjd0 = int(math.floor(spec["arc"][0] + J2000_JD - 2400000.5))
    mjd1 = int(math.floor(spec["arc"][1] + J2000_JD - 2400000.5))
    rng = np.random.default_rng([spec["seed"], 1])
    return schedule(eph, track, stations, mjd0, mjd1, rng, spec["p_second"])


def make_body(eph, stations, spec, rows):
    print(f"== {spec['name']} ({spec['prov']})", flush=True)
    epoch = spec["epoch"]
    state = initial_state(spec)
    a_ng = spec["a_ng"]
    law = spec["law"]
    insts = [r[0] for r in rows]
    codes = [r[1] for r in rows]
    rms_ra = np.array([r[3] for r in rows])
    rms_dec = np.array([r[4] for r in rows])
    t_first, t_last = insts[0].tdb, insts[-1].tdb
    print(f"   {len(rows)} observations over {t_last - t_first:.1f} days", flush=True)
    track = Track(eph, epoch, state, a_ng, law, t_first - 1, t_last + 1, 0.25)
    res = astrometry(eph, epoch, state, a_ng, law, insts, stations, codes, track)
    print(
        f"   interpolant vs integrator {res['interp_error_au']:.1e} au, "
        f"light-time residual {res['light_time_residual_days']:.1e} d",
        flush=True,
    )

    # Two-body check of the truth integrator over the arc.
    check_times = np.linspace(t_first, t_last, 41)
    two_body = two_body_check(eph, epoch, state, check_times)
    print(f"   two-body check: worst |dr|/|r| = {two_body:.2e}", flush=True)

    # Noise and outliers.
    rng = np.random.default_rng([spec["seed"], 2])
    n_out = int(rng.integers(3, 7))
    ra_n, dec_n, outliers = add_noise(res["ra"], res["dec"], rms_ra, rms_dec, rng, n_out)
    sun_bary = np.array([eph.sun_bary(t) for t in res["t_emit"]])
    mag = magnitudes(res, sun_bary, spec["active"])

    d = os.path.join(OUT, spec["name"])
    os.makedirs(d, exist_ok=True)
    write_clean(os.path.join(d, "clean.csv"), rows, res)
    write_psv(os.path.join(d, "noisy.psv"), spec["prov"], rows, ra_n, dec_n, mag)
    worst_psv = self_check_psv(os.path.join(d, "noisy.psv"), spec["prov"], rows, ra_n, dec_n)
    print(f"   PSV read-back: worst angle difference {worst_psv:.1e} deg", flush=True)

    # Detectability of the non-gravitational terms (linear estimate).
    keep = np.setdiff1d(np.arange(len(rows)), [o["index"] for o in outliers])
    jac = sky_partials(eph, epoch, state, a_ng, law, res, keep, t_first - 1, t_last + 1)
    sig = np.concatenate([rms_ra[keep], rms_dec[keep]])
    models = {"A1": [0], "A2": [1], "A1,A2": [0, 1], "A1,A2,A3": [0, 1, 2]}
    fisher = {}
    for label, params in models.items():
        sg = fisher_sigmas(jac, sig, params)
        fisher[label] = {
            k: dict(sigma_au_per_day2=v, true_over_sigma=a_ng[int(k[1]) - 1] / v) for k, v in sg.items()
        }
    # Rule of thumb: positions with and without the A_i from the same state.
    thumb = None
    if any(a_ng):
        thumb = rule_of_thumb(eph, epoch, state, law, insts, stations, codes, res, rms_ra, rms_dec, t_first, t_last)
        print(f"   rule of thumb: {json.dumps(thumb)}", flush=True)
        print(f"   Fisher: {json.dumps(fisher)}", flush=True)

    elements = elements_from_state(state, epoch)
    truth = dict(
        designation=dict(provID=spec["prov"]),
        description=spec["description"],
        epoch=dict(tdb_jd=[J2000_JD, epoch], tdb_days_j2000=epoch),
        frame="heliocentric, ICRF axes (de421), units au and au/day, time TDB",
        state=dict(
            position_au=list(map(float, state[:3])),
            velocity_au_per_day=list(map(float, state[3:])),
        ),
        nongrav=dict(
            A1_au_per_day2=a_ng[0],
            A2_au_per_day2=a_ng[1],
            A3_au_per_day2=a_ng[2],
            law=law,
            law_constants=(WATER if law == "water_ice" else dict(formula="g(r) = (1 au / r)^2")),
            dt_days=0.0,
        ),
        osculating_elements_at_epoch=elements,
        constants=dict(
            gm_au3_per_day2=dict(sun=GM_SUN, **{n: gm for n, gm, _ in PERTURBERS}),
            gm_source="DE440 values as listed in docs SCIENCE",
            c_au_per_day=C_AU_DAY,
            au_km=AU_KM,
            perturber_spk_chains={n: chain for n, _, chain in PERTURBERS},
            sun_spk=[[0, 10]],
            post_newtonian="Sun only, PPN beta = gamma = 1",
            ephemeris="de421.bsp (skyfield-data 7.0.0) via jplephem",
        ),
        observations=dict(
            count=len(rows),
            tracklets=len({r[2] for r in rows}),
            nights=len({r[0].mjd for r in rows}),
            first_utc=insts[0].iso(),
            last_utc=insts[-1].iso(),
            arc_days=t_last - t_first,
            per_station={c: codes.count(c) for c in sorted(set(codes))},
            rms_arcsec_range=[float(min(rms_ra.min(), rms_dec.min())), float(max(rms_ra.max(), rms_dec.max()))],
            noise="independent Gaussian, rmsRA of RA*cos(Dec) and rmsDec as stated, no correlation",
            noise_seed=spec["seed"],
            outliers=outliers,
            files=dict(clean="clean.csv", noisy="noisy.psv"),
            row_order="time order, identical in clean.csv and noisy.psv; outlier indices are 0-based rows",
            observer="ITRS from erfa.gd2gc(1, ...), GCRS by erfa.c2t06a(tt, ut1=utc, xp=yp=0)^T, plus de421 Earth",
            time_scales="UTC -> TAI -> TT (erfa.utctai, erfa.taitt); TDB = TT + erfa.dtdb(elong=u=v=0)",
            light_time="tau from geometric start, 3 passes, integrator position at each emission time",
            aberration="none (astrometric positions)",
        ),
        checks=dict(
            two_body_worst_relative_position=two_body,
            two_body_note="callback with the Sun alone vs universal-variable Kepler, 41 times over the arc",
            psv_readback_worst_deg=worst_psv,
        ),
        nongrav_detectability=dict(
            fisher_linear=fisher,
            fisher_note=(
                "sigma(A_i) from finite-difference partials of the clean astrometry (state at epoch "
                "plus the listed A_i), stated rms as weights, outliers left out; "
                "true_over_sigma is the expected significance of the true A_i"
            ),
            rule_of_thumb=thumb,
        ),
        generator=dict(
            script="tests/reference/make_synthetic_astrometry.py",
            script_version=SCRIPT_VERSION,
            command="python3 tests/reference/make_synthetic_astrometry.py",
            libraries=library_versions(),
        ),
    )
    with open(os.path.join(d, "truth.json"), "w") as f:
        json.dump(truth, f, indent=2)
        f.write("\n")
    return rows, truth


# --- the three bodies -------------------------------------------------------------
# Elements: q (au), e, i, node, argument of perihelion (deg, ecliptic J2000),
# perihelion time (TDB days since J2000). Orientations were picked so that
# the bodies stay well away from the Sun in the sky over most of the arc.
HYPERBOLIC = (1.0, 2.0, 20.49, 347.21, 232.46, 9600.0)
BOUND = (1.4, 0.8, 17.78, 236.52, 317.47, 9965.25)

BODIES = [
    dict(
        name="hyperbolic_outgassing",
        prov="2026 ZB1",
        description="invented strongly hyperbolic body with radial outgassing (inverse-square law)",
        elements=HYPERBOLIC,
        epoch=9636.0,
        arc=(9536.0, 9736.0),
        a_ng=[1.0e-8, 0.0, 0.0],
        law="inverse_square",
        seed=20260101,
        p_second=0.65,
        active=True,
    ),
    dict(
        name="hyperbolic_gravity",
        prov="2026 ZC2",
        description="the same epoch state as 2026 ZB1 with gravity only; observed at the same epochs and stations",
        elements=HYPERBOLIC,
        epoch=9636.0,
        arc=(9536.0, 9736.0),
        a_ng=[0.0, 0.0, 0.0],
        law="inverse_square",
        schedule_of="hyperbolic_outgassing",
        seed=20260202,
        p_second=0.65,
        active=False,
    ),
    dict(
        name="bound_comet",
        prov="2026 ZD3",
        description="invented bound comet with water-ice-law A1 and A2",
        elements=BOUND,
        epoch=9966.0,
        arc=(9775.0, 10139.0),
        a_ng=[1.0e-8, 2.0e-9, 0.0],
        law="water_ice",
        seed=20260303,
        p_second=0.1,
        active=True,
    ),
]


def main():
    eph = Ephemeris(BSP)
    stations = load_stations()
    only = set(sys.argv[1:])
    by_name = {b["name"]: b for b in BODIES}
    schedules = {}
    for spec in BODIES:
        if only and spec["name"] not in only:
            continue
        # The gravity-only twin is observed at the outgassing body's epochs.
        source = by_name[spec.get("schedule_of", spec["name"])]
        if source["name"] not in schedules:
            schedules[source["name"]] = make_schedule(eph, stations, source)
        make_body(eph, stations, spec, schedules[source["name"]])


if __name__ == "__main__":
    main()
