//! What an ingest run found: counts per object and station, each object's
//! arc, and every rejected line with its reason.

use std::collections::BTreeMap;

use serde::Serialize;

use super::error::{group_rejections, Rejection, GROUP_LINES_SHOWN};
use super::identity::{DesignationKey, ObjectId};

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FileSummary {
    pub file: String,
    pub format: &'static str,
    pub observations_read: usize,
    pub lines_rejected: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ObjectSummary {
    pub object_id: ObjectId,
    pub designations: Vec<String>,
    pub observations: usize,
    pub first_obs_time_utc: String,
    pub last_obs_time_utc: String,
    pub per_station: BTreeMap<String, usize>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct IngestSummary {
    pub files: Vec<FileSummary>,
    pub observations_read: usize,
    pub observations_kept: usize,
    pub duplicates_dropped: usize,
    pub objects: Vec<ObjectSummary>,
    pub per_station: BTreeMap<String, usize>,
    pub first_obs_time_utc: Option<String>,
    pub last_obs_time_utc: Option<String>,
    /// Ids retired because their objects merged: (absorbed, kept).
    pub merged_ids: Vec<(ObjectId, ObjectId)>,
    pub rejected: Vec<Rejection>,
}

pub(super) fn designation_texts(keys: &[DesignationKey]) -> Vec<String> {
    keys.iter().map(ToString::to_string).collect()
}

impl std::fmt::Display for IngestSummary {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        for file in &self.files {
            writeln!(
                f,
                "{} ({}): {} observations read, {} lines rejected",
                file.file, file.format, file.observations_read, file.lines_rejected
            )?;
        }
        writeln!(
            f,
            "kept {} of {} observations ({} exact duplicates dropped), {} objects",
            self.observations_kept,
            self.observations_read,
            self.duplicates_dropped,
            self.objects.len()
        )?;
        if let (Some(a), Some(b)) = (&self.first_obs_time_utc, &self.last_obs_time_utc) {
            writeln!(f, "arc: {a} .. {b}")?;
        }
        for o in &self.objects {
            writeln!(
                f,
                "  {}  {} obs  {} .. {}  [{}]",
                o.object_id,
                o.observations,
                o.first_obs_time_utc,
                o.last_obs_time_utc,
                o.designations.join(", ")
            )?;
        }
        if !self.per_station.is_empty() {
            let s: Vec<String> = self
                .per_station
                .iter()
                .map(|(k, v)| format!("{k}: {v}"))
                .collect();
            writeln!(f, "stations: {}", s.join(", "))?;
        }
        for (old, new) in &self.merged_ids {
            writeln!(f, "merged: {old} is now {new}")?;
        }
        if !self.rejected.is_empty() {
            writeln!(f, "rejected lines:")?;
            // One line per reason, not per rejected line: the JSON form
            // keeps every rejection.
            for g in group_rejections(&self.rejected, GROUP_LINES_SHOWN) {
                writeln!(f, "  {g}")?;
            }
        }
        Ok(())
    }
}
