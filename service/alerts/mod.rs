//! Alerts: the stage after a solution is made and before it is stored.
//!
//! - [`facts`]: the numbers a solution offers the rules (with the
//!   predictions they compare), built from the fit's document.
//! - [`rules`]: one threshold-and-clear-level mechanism over every rule.
//! - [`text`]: the words, made once when an alert is raised.
//! - [`event`]: alerts, rule states and deliveries, as journaled.
//! - [`outbox`]: the task that delivers, retries with backoff and gives
//!   up loudly ([`email`], [`webhook`]).
//!
//! The worker raises alerts and stores them in the same journal entry as
//! the solution that raised them, so an alert is never lost nor raised
//! twice across a crash; the outbox then works from the store alone, so
//! fitting never waits on a mail server.

pub mod email;
pub mod event;
pub mod facts;
pub mod outbox;
pub mod rules;
pub mod text;
pub mod webhook;

use crate::config::AlertSettings;

use event::{AlertEvent, Channel, RuleStates};
use facts::SolutionFacts;

/// The channels alerts are delivered on under `settings`: e-mail always
/// (to files by default), the webhook when one is configured.
pub fn channels(settings: &AlertSettings) -> Vec<Channel> {
    let mut out = vec![Channel::Email];
    if settings.webhook.is_some() {
        out.push(Channel::Webhook);
    }
    out
}

/// The alerts a solution raises against the object's rule states, and
/// the states after it. `api_base` (such as `http://127.0.0.1:8620`) makes
/// the link to the solution.
pub fn raise(
    settings: &AlertSettings,
    facts: &SolutionFacts,
    states: &RuleStates,
    api_base: &str,
    raised_utc: &str,
) -> (Vec<AlertEvent>, RuleStates) {
    let (crossings, next) = rules::evaluate(settings, facts, states);
    let url = format!(
        "{api_base}/v1/objects/{}/solutions/{}",
        facts.object_id, facts.seq
    );
    let events = crossings
        .iter()
        .map(|c| {
            let subject = text::subject(c, facts);
            let body = text::body(c, facts, settings, &url);
            AlertEvent {
                id: AlertEvent::id_for(&facts.object_id, facts.seq, &c.measure.key),
                object_id: facts.object_id.clone(),
                designation: facts.designation.clone(),
                solution_seq: facts.seq,
                previous_seq: facts.previous_seq,
                rule: c.measure.rule,
                rule_key: c.measure.key.clone(),
                edge: c.edge,
                raised_utc: raised_utc.to_string(),
                value_before: c.before,
                value_after: Some(c.measure.value),
                threshold: c.measure.threshold,
                unit: c.measure.unit.to_string(),
                subject,
                text: body,
                details: serde_json::json!({
                    "solution_url": url,
                    "facts": facts,
                }),
                channels: channels(settings),
            }
        })
        .collect();
    (events, next)
}
