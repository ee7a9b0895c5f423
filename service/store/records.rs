//! What the store keeps: the journal's entries and the index's values.
//!
//! Every type here is plain serde data. Observations are kept as the text
//! of their fields exactly as read (ADES names), with where they came from,
//! and are validated again when read back, so the store never holds a
//! number the readers would not have produced.

use std::collections::BTreeMap;
use std::sync::Arc;

use serde::{Deserialize, Serialize};

use crate::alerts::event::{Acknowledgement, AlertEvent, DeliveryAttempt, RuleStates};

use crate::config::StationList;
use crate::ingest::{
    revalidate, BlockContext, ContentKey, DesignationKey, Field, ObjectId, Observation, RecordText,
    Source,
};

/// One observation as stored: its fields' text and its origin.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct StoredObservation {
    /// ADES field name -> text as read.
    pub fields: BTreeMap<String, String>,
    /// The file (or API request) it came from, and its line there.
    pub file: String,
    pub line: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub submitter: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub observatory_code: Option<String>,
}

impl StoredObservation {
    pub fn of(o: &Observation) -> Self {
        Self {
            fields: o
                .text
                .iter()
                .map(|(f, t)| (f.ades_name().to_string(), t.to_string()))
                .collect(),
            file: o.source.file.to_string(),
            line: o.source.line,
            submitter: o.context.as_ref().and_then(|c| c.submitter.clone()),
            observatory_code: o.context.as_ref().and_then(|c| c.observatory_code.clone()),
        }
    }

    /// The observation again, validated as when it was read.
    pub fn observation(&self, stations: &StationList) -> Result<Observation, String> {
        let mut text = RecordText::with_capacity(128);
        for (name, value) in &self.fields {
            let field = Field::from_ades_name(name)
                .ok_or_else(|| format!("unknown field '{name}' in the store"))?;
            text.set(field, value);
        }
        let context = (self.submitter.is_some() || self.observatory_code.is_some()).then(|| {
            Arc::new(BlockContext {
                observatory_code: self.observatory_code.clone(),
                submitter: self.submitter.clone(),
            })
        });
        let source = Source {
            file: Arc::from(self.file.as_str()),
            line: self.line,
        };
        revalidate(text, source, context, stations)
    }
}

/// An observation as journaled: the record and the keys derived from it
/// when it was read (so applying the journal never needs to validate).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ObservationEntry {
    /// SHA-256 content key, hex (see [`ContentKey`]).
    pub content_key: String,
    /// Designation keys, spelt as the configuration spells them.
    pub designations: Vec<String>,
    /// The time in one normal form (sorts as text).
    pub obs_time_utc: String,
    pub station: String,
    pub record: StoredObservation,
}

impl ObservationEntry {
    pub fn of(o: &Observation) -> Self {
        let (content, keys) = keys_of(o);
        Self {
            content_key: content.hex(),
            designations: keys.iter().map(ToString::to_string).collect(),
            obs_time_utc: o.time.normalized(),
            station: o.station().to_string(),
            record: StoredObservation::of(o),
        }
    }

    /// The content key as bytes.
    pub fn content_bytes(&self) -> Result<[u8; 32], String> {
        let b = self.content_key.as_bytes();
        if b.len() != 64 {
            return Err(format!(
                "content key '{}' is not 64 hex digits",
                self.content_key
            ));
        }
        let mut out = [0u8; 32];
        for (i, pair) in b.chunks(2).enumerate() {
            let text = std::str::from_utf8(pair).map_err(|e| e.to_string())?;
            out[i] = u8::from_str_radix(text, 16)
                .map_err(|_| format!("content key '{}' is not hex", self.content_key))?;
        }
        Ok(out)
    }

    /// The designation keys again.
    pub fn designation_keys(&self) -> Result<Vec<DesignationKey>, String> {
        self.designations
            .iter()
            .map(|t| DesignationKey::parse(t))
            .collect()
    }
}

/// A content key's 64 hex digits as its 32 bytes.
pub fn content_key_bytes(hex: &str) -> Result<[u8; 32], String> {
    let b = hex.as_bytes();
    if b.len() != 64 {
        return Err(format!("content key '{hex}' is not 64 hex digits"));
    }
    let mut out = [0u8; 32];
    for (i, pair) in b.chunks(2).enumerate() {
        let text = std::str::from_utf8(pair).map_err(|e| e.to_string())?;
        out[i] =
            u8::from_str_radix(text, 16).map_err(|_| format!("content key '{hex}' is not hex"))?;
    }
    Ok(out)
}

/// A stored observation with the journal entry that brought it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IndexedObservation {
    pub journal_seq: u64,
    #[serde(flatten)]
    pub entry: ObservationEntry,
}

/// Why a fit was run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Trigger {
    NewObservations,
    Override,
    Manual,
}

/// Where a batch of observations came from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Origin {
    /// The name the file had in the incoming directory (or "api").
    pub name: String,
    /// Its path under the archive, relative to the archive directory.
    pub archived_as: String,
    pub received_utc: String,
}

/// One entry of the journal. The journal is the truth; the index is
/// rebuilt from it and the archive.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum JournalEntry {
    /// Observations accepted from one file (only those not already
    /// stored when it was read).
    Observations {
        origin: Origin,
        observations: Vec<ObservationEntry>,
    },
    /// One fit of one object, successful or not.
    Solution { record: Box<SolutionRecord> },
    /// An analyst's decision about an object.
    Override { record: OverrideRecord },
    /// One attempt to deliver an alert.
    Delivery { attempt: DeliveryAttempt },
    /// An analyst acknowledged an alert.
    Acknowledge { ack: Acknowledgement },
}

/// What an analyst decided, by whom, when and why.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct OverrideRecord {
    pub object_id: String,
    #[serde(flatten)]
    pub action: OverrideAction,
    pub by: String,
    pub reason: String,
    pub at_utc: String,
    /// The journal entry that holds it (0 until journaled).
    #[serde(default)]
    pub journal_seq: u64,
}

/// The decisions an analyst can make.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "action", rename_all = "snake_case")]
pub enum OverrideAction {
    /// Leave an observation out of every fit.
    ExcludeObservation { content_key: String },
    /// Keep an observation in every fit: never rejected as an outlier.
    IncludeObservation { content_key: String },
    /// Undo either of the above.
    ClearObservation { content_key: String },
    /// Recommend this model whenever it converges.
    PinModel { model: String },
    /// Take this model off the ladder (not gravity alone).
    ExcludeModel { model: String },
    /// Undo a pin or an exclusion of this model.
    ClearModel { model: String },
    /// These designations name this object.
    Link { designations: Vec<String> },
    /// Refit now. Decides nothing else; journaled like a decision so that
    /// a refit asked for survives a stop before it ran, and so the history
    /// says who asked and why.
    Refit,
}

/// The overrides in force after a list of them, in journal order.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct OverrideState {
    pub excluded_observations: std::collections::BTreeSet<String>,
    pub included_observations: std::collections::BTreeSet<String>,
    pub pinned_model: Option<String>,
    pub excluded_models: std::collections::BTreeSet<String>,
}

impl OverrideState {
    pub fn of(records: &[OverrideRecord]) -> Self {
        let mut s = Self::default();
        for r in records {
            match &r.action {
                OverrideAction::ExcludeObservation { content_key } => {
                    s.included_observations.remove(content_key);
                    s.excluded_observations.insert(content_key.clone());
                }
                OverrideAction::IncludeObservation { content_key } => {
                    s.excluded_observations.remove(content_key);
                    s.included_observations.insert(content_key.clone());
                }
                OverrideAction::ClearObservation { content_key } => {
                    s.excluded_observations.remove(content_key);
                    s.included_observations.remove(content_key);
                }
                OverrideAction::PinModel { model } => {
                    s.excluded_models.remove(model);
                    s.pinned_model = Some(model.clone());
                }
                OverrideAction::ExcludeModel { model } => {
                    if s.pinned_model.as_ref() == Some(model) {
                        s.pinned_model = None;
                    }
                    s.excluded_models.insert(model.clone());
                }
                OverrideAction::ClearModel { model } => {
                    if s.pinned_model.as_ref() == Some(model) {
                        s.pinned_model = None;
                    }
                    s.excluded_models.remove(model);
                }
                OverrideAction::Link { .. } | OverrideAction::Refit => {}
            }
        }
        s
    }
}

/// A journal entry with its sequence number.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct JournalLine {
    pub seq: u64,
    #[serde(flatten)]
    pub entry: JournalEntry,
}

/// The figures of a solution that its list and the object summary show.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SolutionSummary {
    pub seq: u64,
    pub created_utc: String,
    pub trigger: Trigger,
    pub converged: bool,
    pub observations: usize,
    pub used: usize,
    pub arc_days: Option<f64>,
    pub recommended: Option<String>,
    pub e: Option<crate::solve::document::ValueSigma>,
    pub one_over_a_original_per_au: Option<crate::solve::document::ValueSigma>,
    pub ng_significance_sigma: Option<f64>,
    pub rms_arcsec: Option<f64>,
    pub normalized_rms: Option<f64>,
    /// Why there is no solution, when the fit failed.
    pub failure: Option<String>,
    /// Gravity alone's normalised RMS: above 1 and rising while the
    /// recommended model's stays near 1 is gravity failing to explain.
    #[serde(default)]
    pub gravity_normalized_rms: Option<f64>,
    /// Every non-gravitational term the ladder measured, with the model
    /// it was measured in (the verdict's `terms`).
    #[serde(default)]
    pub terms: Vec<TermPoint>,
    /// How far the model-averaged place at each alert horizon moved from
    /// the previous solution's prediction for the same instant (empty for
    /// the first solution or when either could not predict).
    #[serde(default)]
    pub place_shifts: Vec<PlaceShift>,
}

/// One non-gravitational term of a solution, as the history plots it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TermPoint {
    /// "A1", "A2", "A3", ...
    pub term: String,
    /// The model the figure is from.
    pub model: String,
    /// au/d^2 at 1 au.
    pub value: crate::solve::document::ValueSigma,
    /// A term of the recommended model; the others are measured in a
    /// richer model the data did not choose.
    pub justified: bool,
}

/// The move of one predicted place between two solutions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceShift {
    /// Days after the new solution was made (an alert horizon).
    pub days: f64,
    pub shift_arcsec: f64,
    /// The same in sigmas of the previous ellipse along the move.
    pub shift_sigma: Option<f64>,
}

impl SolutionSummary {
    /// The summary of a fit that gave no solution, with the reason.
    pub fn failed(
        seq: u64,
        created_utc: &str,
        trigger: Trigger,
        observations: usize,
        failure: String,
    ) -> Self {
        Self {
            seq,
            created_utc: created_utc.to_string(),
            trigger,
            converged: false,
            observations,
            used: 0,
            arc_days: None,
            recommended: None,
            e: None,
            one_over_a_original_per_au: None,
            ng_significance_sigma: None,
            rms_arcsec: None,
            normalized_rms: None,
            failure: Some(failure),
            gravity_normalized_rms: None,
            terms: Vec::new(),
            place_shifts: Vec::new(),
        }
    }
}

/// Every fit of an object, kept for ever under its sequence number.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SolutionRecord {
    pub object_id: String,
    /// Per object, from 1, without gaps.
    pub seq: u64,
    pub summary: SolutionSummary,
    /// The observations' journal position the fit saw: every observation
    /// journaled up to here was in the fit's input.
    pub inputs_journal_seq: u64,
    pub duration_s: f64,
    pub software_version: String,
    /// SHA-256 of the fit configuration, the ephemeris' identity, the GM
    /// set and the leap-second table, each as hex.
    pub identity: BTreeMap<String, String>,
    /// The fit's whole document (as `perihelix fit --json` prints it);
    /// absent when the fit failed.
    pub document: Option<serde_json::Value>,
    /// The object's reference epoch the document's `reference_elements`
    /// are at (fixed at its first solution), TDB days since J2000.
    #[serde(default)]
    pub reference_epoch_tdb_days_j2000: Option<f64>,
    /// The observations new since the previous solution, tested against
    /// that solution's prediction.
    #[serde(default)]
    pub new_batch: Option<BatchCheck>,
    /// The analysts' decisions in force for this fit.
    #[serde(default)]
    pub overrides: Vec<OverrideRecord>,
    /// The alerts this solution raised (journaled with it, so neither is
    /// ever stored without the other).
    #[serde(default)]
    pub alerts: Vec<AlertEvent>,
    /// Every alert rule's state for the object after this solution.
    #[serde(default)]
    pub alert_states: RuleStates,
    /// The nights of the coming month that would best tell the
    /// recommended model from its strongest rival.
    #[serde(default)]
    pub plan: Option<crate::solve::plan::Plan>,
    /// Why there is no plan (e.g. a single converged model).
    #[serde(default)]
    pub plan_problem: Option<String>,
}

/// New observations against the previous solution's prediction.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BatchCheck {
    /// The solution they were tested against.
    pub against_solution: u64,
    pub observations: usize,
    /// chi^2 with the prediction covariance, its degrees of freedom, the
    /// tail probability (as log10 too, for batches far off) and the same
    /// tail as Gaussian sigma; absent with the reason when the test could
    /// not be made.
    pub chi2: Option<f64>,
    pub dof: Option<usize>,
    pub p_value: Option<f64>,
    pub log10_p_value: Option<f64>,
    pub sigma: Option<f64>,
    pub not_made: Option<String>,
    /// New observations the new solution rejected as outliers, left out of
    /// the test: one gross outlier says nothing about the orbit, and would
    /// otherwise make the whole batch "disagree".
    #[serde(default)]
    pub outliers_left_out: usize,
    /// The files and stations the new observations came from.
    #[serde(default)]
    pub files: Vec<String>,
    #[serde(default)]
    pub stations: Vec<String>,
}

/// What the index knows of an object.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ObjectState {
    pub id: String,
    pub designations: Vec<String>,
    pub observations: u64,
    pub first_obs_utc: Option<String>,
    pub last_obs_utc: Option<String>,
    /// The latest journal entry that added observations to this object.
    pub last_obs_journal_seq: u64,
    pub solutions: u64,
    pub latest: Option<SolutionSummary>,
    /// The journal position of the latest solution's inputs.
    pub latest_inputs_journal_seq: u64,
    /// The latest analyst's decision about this object.
    #[serde(default)]
    pub last_override_journal_seq: u64,
    /// Where elements are compared across solutions: the first converged
    /// solution's fit epoch, TDB days since J2000.
    #[serde(default)]
    pub reference_epoch_tdb_days_j2000: Option<f64>,
    /// Set when this object was merged into another by a designation link.
    pub merged_into: Option<String>,
}

impl ObjectState {
    pub fn new(id: &ObjectId) -> Self {
        Self {
            id: id.0.clone(),
            designations: Vec::new(),
            observations: 0,
            first_obs_utc: None,
            last_obs_utc: None,
            last_obs_journal_seq: 0,
            solutions: 0,
            latest: None,
            latest_inputs_journal_seq: 0,
            last_override_journal_seq: 0,
            reference_epoch_tdb_days_j2000: None,
            merged_into: None,
        }
    }

    /// Observations arrived, or an analyst decided, since the latest fit
    /// saw its inputs.
    pub fn needs_refit(&self) -> bool {
        self.due().is_some()
    }

    /// Why the object is due for a refit, if it is: new observations
    /// first, else an analyst's decision (or a refit asked for).
    pub fn due(&self) -> Option<Trigger> {
        if self.merged_into.is_some() || self.observations == 0 {
            None
        } else if self.last_obs_journal_seq > self.latest_inputs_journal_seq {
            Some(Trigger::NewObservations)
        } else if self.last_override_journal_seq > self.latest_inputs_journal_seq {
            Some(Trigger::Override)
        } else {
            None
        }
    }
}

/// The content key and designations of an observation as the index keys
/// them.
pub fn keys_of(o: &Observation) -> (ContentKey, Vec<DesignationKey>) {
    (ContentKey::of(o), DesignationKey::of(o))
}
