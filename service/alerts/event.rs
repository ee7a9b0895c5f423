//! What the rules decide and what the outbox delivers: an alert event (a
//! rule's value crossed its threshold, or came back inside its clear
//! level), the per-object state of every rule, and the deliveries of an
//! event on each channel. All of it is journaled with the solution that
//! raised it.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

/// The conditions an analyst is told about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RuleKind {
    /// The original barycentric orbit is hyperbolic, beyond doubt.
    Unbound,
    /// Non-gravitational terms are needed.
    NgNeeded,
    /// Gravity alone no longer explains the data.
    GravityFails,
    /// The recommended model changed.
    ModelChanged,
    /// New observations disagree with the previous solution's prediction.
    BatchDisagrees,
    /// The place predicted some days ahead moved.
    PredictionShift,
    /// Measured brightness departs from the fitted brightness law.
    Outburst,
    /// The fit failed.
    FitFailed,
    /// No converged fit for too long while data arrive.
    NoSolution,
}

impl RuleKind {
    pub const ALL: [RuleKind; 9] = [
        RuleKind::Unbound,
        RuleKind::NgNeeded,
        RuleKind::GravityFails,
        RuleKind::ModelChanged,
        RuleKind::BatchDisagrees,
        RuleKind::PredictionShift,
        RuleKind::Outburst,
        RuleKind::FitFailed,
        RuleKind::NoSolution,
    ];

    pub fn name(self) -> &'static str {
        match self {
            RuleKind::Unbound => "unbound",
            RuleKind::NgNeeded => "ng_needed",
            RuleKind::GravityFails => "gravity_fails",
            RuleKind::ModelChanged => "model_changed",
            RuleKind::BatchDisagrees => "batch_disagrees",
            RuleKind::PredictionShift => "prediction_shift",
            RuleKind::Outburst => "outburst",
            RuleKind::FitFailed => "fit_failed",
            RuleKind::NoSolution => "no_solution",
        }
    }

    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|r| r.name() == text)
    }
}

/// Which way a rule's value went.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Edge {
    /// The value crossed its threshold (or, for a change, the change).
    Raised,
    /// The value came back inside its clear level.
    Cleared,
}

/// One rule's state for one object, after a solution.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RuleState {
    /// Raised and not cleared since.
    pub active: bool,
    /// The rule's value at the last solution that could compute it, in
    /// the rule's own unit.
    pub value: Option<f64>,
    /// The solution at which it last changed from inactive to active or
    /// back.
    pub since_seq: u64,
}

/// Every rule's state for one object, by rule key (the rule's name, with
/// the days ahead for a prediction shift: `prediction_shift_7d`).
pub type RuleStates = BTreeMap<String, RuleState>;

/// Where an alert goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Channel {
    Email,
    Webhook,
}

impl Channel {
    pub fn name(self) -> &'static str {
        match self {
            Channel::Email => "email",
            Channel::Webhook => "webhook",
        }
    }
}

/// One alert: a rule's crossing at one solution of one object, with its
/// words as they will be sent.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlertEvent {
    /// Stable: `OBJECT.SEQ.RULE_KEY`, the same after a rebuild.
    pub id: String,
    pub object_id: String,
    /// The name a person knows the object by.
    pub designation: String,
    /// The solution that raised it, and the one before.
    pub solution_seq: u64,
    pub previous_seq: Option<u64>,
    pub rule: RuleKind,
    pub rule_key: String,
    pub edge: Edge,
    pub raised_utc: String,
    /// The rule's value before and after, in `unit`, and its threshold.
    pub value_before: Option<f64>,
    pub value_after: Option<f64>,
    pub threshold: Option<f64>,
    pub unit: String,
    /// One line, plain words: the object and what happened.
    pub subject: String,
    /// The plain-text message.
    pub text: String,
    /// The numbers the text quotes, for machines (webhooks, tests).
    pub details: serde_json::Value,
    /// The channels it is to be delivered on.
    pub channels: Vec<Channel>,
}

impl AlertEvent {
    pub fn id_for(object_id: &str, seq: u64, rule_key: &str) -> String {
        format!("{object_id}.{seq}.{rule_key}")
    }

    /// The stable id of this event's delivery on `channel`: the e-mail's
    /// Message-ID and the webhook's delivery header, so that a receiver
    /// can drop a repeat.
    pub fn delivery_id(&self, channel: Channel) -> String {
        format!("{}.{}", self.id, channel.name())
    }
}

/// An analyst's acknowledgement of an alert.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Acknowledgement {
    pub alert_id: String,
    pub by: String,
    pub at_utc: String,
}

/// An alert as the store keeps it: the event and whether it was
/// acknowledged.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlertRecord {
    #[serde(flatten)]
    pub event: AlertEvent,
    /// The journal entry of the solution that raised it (orders alerts).
    pub journal_seq: u64,
    pub acknowledged: Option<Acknowledgement>,
}

/// What became of one delivery attempt.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "outcome", rename_all = "snake_case")]
pub enum AttemptOutcome {
    Delivered,
    /// Failed; tried again at `retry_at_unix_ms`.
    Failed {
        error: String,
        retry_at_unix_ms: u64,
    },
    /// Failed for the last time: given up, and shown as dead.
    Dead {
        error: String,
    },
}

/// One attempt, as journaled.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DeliveryAttempt {
    pub delivery_id: String,
    pub attempt: u32,
    pub at_utc: String,
    #[serde(flatten)]
    pub outcome: AttemptOutcome,
}

/// Where a delivery stands.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "state", rename_all = "snake_case")]
pub enum DeliveryStatus {
    Pending { not_before_unix_ms: u64 },
    Delivered { at_utc: String },
    Dead { at_utc: String },
}

/// One delivery of one alert on one channel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Delivery {
    pub id: String,
    pub alert_id: String,
    pub channel: Channel,
    pub attempts: u32,
    pub last_error: Option<String>,
    #[serde(flatten)]
    pub status: DeliveryStatus,
}

impl Delivery {
    /// A delivery not yet attempted.
    pub fn new(event: &AlertEvent, channel: Channel) -> Self {
        Self {
            id: event.delivery_id(channel),
            alert_id: event.id.clone(),
            channel,
            attempts: 0,
            last_error: None,
            status: DeliveryStatus::Pending {
                not_before_unix_ms: 0,
            },
        }
    }

    /// This delivery after `attempt` (attempts are applied in journal
    /// order, and one already applied changes nothing).
    pub fn after(&self, attempt: &DeliveryAttempt) -> Self {
        if attempt.attempt <= self.attempts {
            return self.clone();
        }
        let mut next = self.clone();
        next.attempts = attempt.attempt;
        match &attempt.outcome {
            AttemptOutcome::Delivered => {
                next.status = DeliveryStatus::Delivered {
                    at_utc: attempt.at_utc.clone(),
                };
            }
            AttemptOutcome::Failed {
                error,
                retry_at_unix_ms,
            } => {
                next.last_error = Some(error.clone());
                next.status = DeliveryStatus::Pending {
                    not_before_unix_ms: *retry_at_unix_ms,
                };
            }
            AttemptOutcome::Dead { error } => {
                next.last_error = Some(error.clone());
                next.status = DeliveryStatus::Dead {
                    at_utc: attempt.at_utc.clone(),
                };
            }
        }
        next
    }

    pub fn is_pending(&self) -> bool {
        matches!(self.status, DeliveryStatus::Pending { .. })
    }
}
