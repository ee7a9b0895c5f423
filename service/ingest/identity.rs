//! Which observations belong to one object.
//!
//! An observation may carry several designations: a trkSub (the observer's
//! own temporary name), a provisional designation (provID) and a permanent
//! number (permID). Observations whose designations link, directly or
//! through others, are the same object; a configuration may add links.
//! A trkSub is unique only at its station, so its key includes the
//! station code.
//!
//! Object ids: the id of a group is derived from the earliest-seen
//! designation key in the group (configured links count first, in their
//! order, then observations in reading order). When two groups merge, the
//! merged object keeps the id of the group seen first; the other id is
//! reported as absorbed. An object's id therefore never changes while its
//! designations accumulate, and only a merge retires the younger of two ids.

use std::collections::HashMap;

use serde::Serialize;
use sha2::{Digest, Sha256};

use super::record::{Observation, ObserverLocation};

/// One designation, as the linker keys it.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub enum DesignationKey {
    TrkSub { name: String, station: String },
    ProvId(String),
    PermId(String),
}

impl DesignationKey {
    /// The name a person knows an object by, of all its designations: the
    /// permanent one, else the provisional one, else the tracklet name
    /// with its station (`NAME@STATION`, as the API looks it up); without
    /// the field prefix.
    pub fn best_name<'a>(keys: impl IntoIterator<Item = &'a DesignationKey>) -> Option<String> {
        let keys: Vec<&DesignationKey> = keys.into_iter().collect();
        let rank = |k: &DesignationKey| match k {
            DesignationKey::PermId(_) => 0,
            DesignationKey::ProvId(_) => 1,
            DesignationKey::TrkSub { .. } => 2,
        };
        let best = keys.iter().min_by_key(|k| rank(k))?;
        Some(match best {
            DesignationKey::PermId(t) | DesignationKey::ProvId(t) => t.clone(),
            DesignationKey::TrkSub { name, station } => format!("{name}@{station}"),
        })
    }

    /// Parses the configuration's spelling: `permID:<text>`,
    /// `provID:<text>` or `trkSub:<name>@<station>`.
    pub fn parse(s: &str) -> Result<Self, String> {
        let (kind, rest) = s.split_once(':').ok_or_else(|| {
            format!("'{s}': expected permID:, provID: or trkSub: before the name")
        })?;
        let rest = rest.trim();
        if rest.is_empty() {
            return Err(format!("'{s}': empty designation"));
        }
        match kind.trim() {
            "permID" => Ok(DesignationKey::PermId(rest.to_string())),
            "provID" => Ok(DesignationKey::ProvId(rest.to_string())),
            "trkSub" => match rest.rsplit_once('@') {
                Some((name, station)) if !name.is_empty() && !station.is_empty() => {
                    Ok(DesignationKey::TrkSub {
                        name: name.to_string(),
                        station: station.to_string(),
                    })
                }
                _ => Err(format!(
                    "'{s}': a trkSub needs its station, as trkSub:<name>@<station>"
                )),
            },
            other => Err(format!("'{s}': unknown designation kind '{other}'")),
        }
    }

    /// The observation's designations, trkSub first, then provID, then permID.
    pub fn of(obs: &Observation) -> Vec<DesignationKey> {
        let mut keys = Vec::with_capacity(3);
        if let Some(t) = obs.trk_sub() {
            keys.push(DesignationKey::TrkSub {
                name: t.to_string(),
                station: obs.station().to_string(),
            });
        }
        if let Some(p) = obs.prov_id() {
            keys.push(DesignationKey::ProvId(p.to_string()));
        }
        if let Some(p) = obs.perm_id() {
            keys.push(DesignationKey::PermId(p.to_string()));
        }
        keys
    }
}

impl std::fmt::Display for DesignationKey {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            DesignationKey::TrkSub { name, station } => write!(f, "trkSub:{name}@{station}"),
            DesignationKey::ProvId(p) => write!(f, "provID:{p}"),
            DesignationKey::PermId(p) => write!(f, "permID:{p}"),
        }
    }
}

/// A stable object id: `obj-` and the first 16 hex digits of the SHA-256
/// of the founding designation key's text.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub struct ObjectId(pub String);

impl ObjectId {
    pub fn from_key(key: &DesignationKey) -> Self {
        let digest = Sha256::digest(key.to_string().as_bytes());
        let hex: String = digest[..8].iter().map(|b| format!("{b:02x}")).collect();
        ObjectId(format!("obj-{hex}"))
    }
}

impl std::fmt::Display for ObjectId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// Union-find over designation keys; the root of each set is its
/// earliest-seen key, which is what keeps ids stable.
#[derive(Debug, Default, Clone)]
pub struct Linker {
    index: HashMap<DesignationKey, usize>,
    keys: Vec<DesignationKey>,
    parent: Vec<usize>,
    absorbed: Vec<(ObjectId, ObjectId)>,
}

impl Linker {
    /// A linker that starts from configured links, each a group of
    /// designations known to be one object.
    pub fn new(links: &[Vec<DesignationKey>]) -> Self {
        let mut l = Self::default();
        for group in links {
            l.link_all(group);
        }
        l
    }

    fn intern(&mut self, key: &DesignationKey) -> usize {
        if let Some(&i) = self.index.get(key) {
            return i;
        }
        let i = self.keys.len();
        self.index.insert(key.clone(), i);
        self.keys.push(key.clone());
        self.parent.push(i);
        i
    }

    fn root(&mut self, mut i: usize) -> usize {
        while self.parent[i] != i {
            self.parent[i] = self.parent[self.parent[i]];
            i = self.parent[i];
        }
        i
    }

    fn union(&mut self, a: usize, b: usize) {
        let (ra, rb) = (self.root(a), self.root(b));
        if ra == rb {
            return;
        }
        let (older, younger) = if ra < rb { (ra, rb) } else { (rb, ra) };
        self.parent[younger] = older;
        self.absorbed.push((
            ObjectId::from_key(&self.keys[younger]),
            ObjectId::from_key(&self.keys[older]),
        ));
    }

    /// Links every key of the group to the first.
    pub fn link_all(&mut self, group: &[DesignationKey]) {
        let Some(first) = group.first() else { return };
        let a = self.intern(first);
        for k in &group[1..] {
            let b = self.intern(k);
            self.union(a, b);
        }
    }

    /// The object a key belongs to now (after all links so far).
    pub fn object_of(&mut self, key: &DesignationKey) -> ObjectId {
        let i = self.intern(key);
        let r = self.root(i);
        ObjectId::from_key(&self.keys[r])
    }

    /// Every designation of an object, in first-seen order.
    pub fn designations(&mut self, id: &ObjectId) -> Vec<DesignationKey> {
        let members: Vec<usize> = (0..self.keys.len())
            .filter(|&i| {
                let r = self.root(i);
                ObjectId::from_key(&self.keys[r]) == *id
            })
            .collect();
        members.into_iter().map(|i| self.keys[i].clone()).collect()
    }

    /// Designation keys known so far.
    pub fn key_count(&self) -> usize {
        self.keys.len()
    }

    /// Ids retired by merges so far: (absorbed id, id it merged into).
    pub fn absorbed(&self) -> &[(ObjectId, ObjectId)] {
        &self.absorbed
    }
}

/// A content key that recognises the same measurement read twice: SHA-256
/// over the station, the time in one normal form, RA and Dec as numbers
/// (so `215.6560` and `215.656` agree) and any explicit observer position.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct ContentKey(pub [u8; 32]);

impl ContentKey {
    pub fn of(obs: &Observation) -> Self {
        let mut h = Sha256::new();
        h.update(obs.station().as_bytes());
        h.update(b"|");
        h.update(obs.time.normalized().as_bytes());
        // +0.0 and -0.0 are the same position.
        for v in [obs.ra_deg + 0.0, obs.dec_deg + 0.0] {
            h.update(b"|");
            h.update(v.to_bits().to_be_bytes());
        }
        let loc: Option<[f64; 3]> = obs.location.map(|l| match l {
            ObserverLocation::Geodetic {
                longitude_deg,
                latitude_deg,
                height_m,
            } => [longitude_deg, latitude_deg, height_m],
            ObserverLocation::EarthFixed { x_m, y_m, z_m } => [x_m, y_m, z_m],
            ObserverLocation::Inertial { position, .. } => match position {
                super::InertialPosition::Km { x_km, y_km, z_km } => [x_km, y_km, z_km],
                super::InertialPosition::Au { x_au, y_au, z_au } => [x_au, y_au, z_au],
            },
        });
        if let (Some(p), Some(l)) = (loc, obs.location) {
            h.update(format!("|{:?}", std::mem::discriminant(&l)).as_bytes());
            for v in p {
                h.update((v + 0.0).to_bits().to_be_bytes());
            }
        }
        ContentKey(h.finalize().into())
    }

    pub fn hex(&self) -> String {
        self.0.iter().map(|b| format!("{b:02x}")).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn trk(n: &str, s: &str) -> DesignationKey {
        DesignationKey::TrkSub {
            name: n.into(),
            station: s.into(),
        }
    }

    #[test]
    fn parse_spellings() {
        assert_eq!(
            DesignationKey::parse("trkSub:qx01@XQ1"),
            Ok(trk("qx01", "XQ1"))
        );
        assert_eq!(
            DesignationKey::parse("provID:2031 QA7"),
            Ok(DesignationKey::ProvId("2031 QA7".into()))
        );
        assert!(DesignationKey::parse("trkSub:qx01").is_err());
        assert!(DesignationKey::parse("name:x").is_err());
        assert!(DesignationKey::parse("qx01").is_err());
    }

    #[test]
    fn ids_stay_with_the_earliest_key() {
        let mut l = Linker::new(&[]);
        let a = l.object_of(&trk("qx01", "XQ1"));
        let b = l.object_of(&trk("qx01", "XQ2"));
        assert_ne!(a, b, "a trkSub is unique only per station");
        let p = DesignationKey::ProvId("2031 QA7".into());
        l.link_all(&[trk("qx01", "XQ2"), p.clone()]);
        assert_eq!(l.object_of(&p), b);
        l.link_all(&[p.clone(), trk("qx01", "XQ1")]);
        assert_eq!(l.object_of(&p), a, "merged group keeps the older id");
        assert_eq!(l.object_of(&trk("qx01", "XQ2")), a);
        assert_eq!(l.absorbed().last(), Some(&(b.clone(), a.clone())));
        assert_eq!(l.designations(&a).len(), 3);
    }
}
