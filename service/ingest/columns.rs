//! What each ADES element or PSV column name means to the service.

use super::error::ObsKind;
use super::field::Field;

/// The role of one ADES element name inside an observation record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    /// A field the service keeps.
    Kept(Field),
    /// A valid ADES optical field the service reads past.
    Ignored,
    /// A field that only observations of another kind carry.
    OtherKind(ObsKind),
}

/// ADES optical-record elements the service does not use (the OpticalType
/// sequence of the ADES `general.xsd` schema, residual groups included).
const IGNORED: &[&str] = &[
    "artSat",
    "trkID",
    "trkMPC",
    "vel1",
    "vel2",
    "vel3",
    "posCov11",
    "posCov12",
    "posCov13",
    "posCov22",
    "posCov23",
    "posCov33",
    "fltr",
    "photAp",
    "nucMag",
    "seeing",
    "exp",
    "rmsFit",
    "nStars",
    "ref",
    "disc",
    "subFrm",
    "subFmt",
    "precTime",
    "precRA",
    "precDec",
    "uncTime",
    "deprecated",
    "localUse",
    "orbProd",
    "orbID",
    "resRA",
    "resDec",
    "selAst",
    "sigRA",
    "sigDec",
    "sigCorr",
    "sigTime",
    "biasRA",
    "biasDec",
    "biasTime",
    "photProd",
    "resMag",
    "selPhot",
    "sigMag",
    "biasMag",
    "photMod",
    "trx",
    "rcv",
];

/// Elements that mark offset, occultation and radar records (the ADES
/// OffsetType, OccultationType and RadarType sequences).
fn other_kind(name: &str) -> Option<ObsKind> {
    match name {
        "obsCenter" | "deltaRA" | "deltaDec" | "dist" | "pa" | "rmsDist" | "rmsPA" => {
            Some(ObsKind::Offset)
        }
        "raStar" | "decStar" | "shapeOcc" => Some(ObsKind::Occultation),
        "delay" | "rmsDelay" | "doppler" | "rmsDoppler" | "frq" | "com" | "resDelay"
        | "selDelay" | "sigDelay" | "resDoppler" | "selDoppler" | "sigDoppler" => {
            Some(ObsKind::Radar)
        }
        _ => None,
    }
}

pub fn role(name: &str) -> Option<Role> {
    if let Some(f) = Field::from_ades_name(name) {
        return Some(Role::Kept(f));
    }
    if let Some(k) = other_kind(name) {
        return Some(Role::OtherKind(k));
    }
    IGNORED.contains(&name).then_some(Role::Ignored)
}

/// The kind a set of columns describes: occultation wins over offset,
/// since occultation records carry offset fields too.
pub fn block_kind(roles: impl IntoIterator<Item = Role>) -> Option<ObsKind> {
    let mut kind = None;
    for r in roles {
        if let Role::OtherKind(k) = r {
            kind = match (kind, k) {
                (Some(ObsKind::Occultation), _) | (_, ObsKind::Occultation) => {
                    Some(ObsKind::Occultation)
                }
                (Some(ObsKind::Radar), _) => Some(ObsKind::Radar),
                _ => Some(k),
            };
        }
    }
    kind
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roles() {
        assert_eq!(role("dec"), Some(Role::Kept(Field::Dec)));
        assert_eq!(role("seeing"), Some(Role::Ignored));
        assert_eq!(role("deltaRA"), Some(Role::OtherKind(ObsKind::Offset)));
        assert_eq!(role("declination"), None);
        let occ = [
            Role::OtherKind(ObsKind::Offset),
            Role::OtherKind(ObsKind::Occultation),
        ];
        assert_eq!(block_kind(occ), Some(ObsKind::Occultation));
        assert_eq!(block_kind([Role::Kept(Field::Ra)]), None);
    }
}
