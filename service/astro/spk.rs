//! Reader for JPL ephemeris files in the SPK/DAF format (segment types 2 and 3).
