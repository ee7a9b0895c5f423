//! The embedded default ephemeris: analytic theories sampled into Chebyshev segments.
