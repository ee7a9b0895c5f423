//! Physical constants, each with its source.

/// Astronomical unit in km, exact by definition (IAU 2012 Resolution B2).
pub const AU_KM: f64 = 149_597_870.700;

/// Seconds in a day.
pub const SECONDS_PER_DAY: f64 = 86_400.0;

/// Speed of light in km/s, exact (SI definition of the metre).
pub const C_KM_PER_S: f64 = 299_792.458;

/// Speed of light in au/day, derived from the two exact values above.
pub const C_AU_PER_DAY: f64 = C_KM_PER_S * SECONDS_PER_DAY / AU_KM;

/// Obliquity of the ecliptic at J2000 used for ecliptic elements, in arcsec:
/// the IAU 1976 value kept by convention for J2000 ecliptic elements
/// (common practice; see docs/science.md).
pub const OBLIQUITY_J2000_ARCSEC: f64 = 84_381.448;

/// Julian date of the J2000.0 epoch (2000 January 1, 12h TDB).
pub const J2000_JD: f64 = 2_451_545.0;

/// Days per Julian century.
pub const DAYS_PER_JULIAN_CENTURY: f64 = 36_525.0;

/// Gravitational parameters GM in au^3/day^2, from the JPL DE440 constants
/// (Park et al. 2021, AJ 161, 105; the values as written in the DE440 header,
/// carried in ../shared/SCIENCE.md). The planet values for Mars..Neptune are
/// planet-system values (planet plus satellites), matching the system
/// barycentres that DE files provide.
pub mod gm {
    pub const SUN: f64 = 2.959_122_082_841_195_6e-4;
    pub const MERCURY: f64 = 4.912_500_194_889_318_2e-11;
    pub const VENUS: f64 = 7.243_452_332_644_118_7e-10;
    pub const EARTH: f64 = 8.887_692_446_707_103_3e-10;
    pub const MOON: f64 = 1.093_189_462_402_435_1e-11;
    pub const MARS_SYSTEM: f64 = 9.549_548_829_725_811_9e-11;
    pub const JUPITER_SYSTEM: f64 = 2.825_345_825_225_791_7e-7;
    pub const SATURN_SYSTEM: f64 = 8.459_705_993_376_290_3e-8;
    pub const URANUS_SYSTEM: f64 = 1.292_026_564_968_239_9e-8;
    pub const NEPTUNE_SYSTEM: f64 = 1.524_357_347_885_193_9e-8;

    /// Sum of the Sun and all planet systems including Earth and Moon: the
    /// central mass for barycentric original and future orbits.
    pub const SOLAR_SYSTEM_TOTAL: f64 = SUN
        + MERCURY
        + VENUS
        + EARTH
        + MOON
        + MARS_SYSTEM
        + JUPITER_SYSTEM
        + SATURN_SYSTEM
        + URANUS_SYSTEM
        + NEPTUNE_SYSTEM;
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn light_speed_in_au_per_day() {
        // 173.144 632 674 au/day: ../shared/SCIENCE.md "Units", derived from
        // the exact c and au.
        assert!((C_AU_PER_DAY - 173.144_632_674).abs() < 1e-9);
    }
}
