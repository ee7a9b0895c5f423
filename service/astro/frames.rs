//! Rotations between the ICRF, the J2000 ecliptic and the frames of date.
