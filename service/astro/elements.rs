//! Cartesian state <-> heliocentric ecliptic J2000 cometary elements, with Jacobians.
