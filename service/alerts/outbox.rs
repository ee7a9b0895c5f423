//! The outbox: delivers every pending alert delivery, records each
//! attempt in the journal, retries failures with doubling waits, and gives
//! a delivery up (dead: counted and shown, never silently dropped) after
//! the configured number of attempts. It works from the store alone, so
//! fitting never waits on it, and after a restart it carries on where the
//! journal says it was. A crash between a send and its record repeats that
//! send under the same delivery id, which receivers use to drop it.

use std::sync::Arc;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use tokio::sync::Notify;

use crate::config::AlertSettings;
use crate::daemon::metrics::Metrics;
use crate::daemon::shutdown::Shutdown;
use crate::store::{Store, StoreError};

use super::email::{self, Mailer};
use super::event::{AttemptOutcome, Channel, Delivery, DeliveryAttempt, DeliveryStatus};
use super::webhook::{self, Webhook};

/// Idle passes still turn this often (a delivery's wait may end).
const IDLE_PASS: Duration = Duration::from_secs(30);

pub struct Outbox {
    pub store: Arc<dyn Store>,
    pub settings: AlertSettings,
    pub mailer: Mailer,
    pub webhook: Option<Webhook>,
    pub metrics: Arc<Metrics>,
}

fn unix_ms() -> u64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| d.as_millis() as u64)
}

fn earliest(a: Option<u64>, b: Option<u64>) -> Option<u64> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.min(b)),
        (a, b) => a.or(b),
    }
}

/// The wait before attempt `attempt + 1` after `attempt` failed.
pub fn backoff(settings: &AlertSettings, attempt: u32) -> Duration {
    let doubled = settings.retry_first_s * 2f64.powi(attempt.saturating_sub(1).min(30) as i32);
    Duration::from_secs_f64(doubled.min(settings.retry_max_s))
}

impl Outbox {
    pub fn new(
        store: Arc<dyn Store>,
        settings: &AlertSettings,
        metrics: Arc<Metrics>,
    ) -> Result<Self, String> {
        let mailer = Mailer::new(&settings.email).map_err(|e| e.to_string())?;
        let webhook = match &settings.webhook {
            Some(w) => Some(Webhook::new(
                &w.url,
                w.secret.as_deref().unwrap_or_default(),
            )?),
            None => None,
        };
        Ok(Self {
            store,
            settings: settings.clone(),
            mailer,
            webhook,
            metrics,
        })
    }

    /// Runs until shutdown; `wake` is notified when new alerts are stored.
    pub async fn run(self, wake: Arc<Notify>, mut shutdown: Shutdown) {
        // The pass watches its own copy, so the wait below can hold this one.
        let watched = shutdown.clone();
        loop {
            // A stop does not wait for a send in progress: one abandoned
            // between its send and its record is sent again after the
            // restart, under the same delivery id.
            let result = tokio::select! {
                r = self.pass(&watched) => r,
                _ = shutdown.wait() => return,
            };
            let next = match result {
                Ok(next) => next,
                Err(e) => {
                    tracing::error!("alert outbox: {e}");
                    Some(unix_ms() + IDLE_PASS.as_millis() as u64)
                }
            };
            if shutdown.is_set() {
                return;
            }
            let wait = next
                .map(|at| Duration::from_millis(at.saturating_sub(unix_ms())))
                .unwrap_or(IDLE_PASS)
                .min(IDLE_PASS);
            tokio::select! {
                _ = shutdown.wait() => return,
                _ = wake.notified() => {},
                _ = tokio::time::sleep(wait) => {},
            }
        }
    }

    /// Attempts every delivery that is due; returns when the next one
    /// waiting falls due (unix ms).
    async fn pass(&self, shutdown: &Shutdown) -> Result<Option<u64>, StoreError> {
        let pending = self.refresh_gauges().await?;
        // Each channel goes its own way: a mail relay that hangs until its
        // timeout does not hold the webhook back, nor the other way round.
        let (email, webhook): (Vec<Delivery>, Vec<Delivery>) = pending
            .into_iter()
            .partition(|d| d.channel == Channel::Email);
        let (a, b) = tokio::join!(
            self.attempt_due(email, shutdown),
            self.attempt_due(webhook, shutdown)
        );
        self.refresh_gauges().await?;
        Ok(earliest(a?, b?))
    }

    /// Attempts, one after another, those of `deliveries` that are due;
    /// returns when the next one waiting falls due (unix ms).
    async fn attempt_due(
        &self,
        deliveries: Vec<Delivery>,
        shutdown: &Shutdown,
    ) -> Result<Option<u64>, StoreError> {
        let mut next: Option<u64> = None;
        for d in deliveries {
            if shutdown.is_set() {
                break;
            }
            let DeliveryStatus::Pending { not_before_unix_ms } = d.status else {
                continue;
            };
            let wait_until = if not_before_unix_ms > unix_ms() {
                Some(not_before_unix_ms)
            } else {
                self.attempt(&d).await?
            };
            next = earliest(next, wait_until);
        }
        Ok(next)
    }

    /// Sets the pending and dead gauges from the store; returns the
    /// deliveries pending.
    async fn refresh_gauges(&self) -> Result<Vec<Delivery>, StoreError> {
        let store = self.store.clone();
        let (pending, dead) = tokio::task::spawn_blocking(move || {
            let pending = store.pending_deliveries()?;
            let dead = store
                .deliveries()?
                .iter()
                .filter(|d| matches!(d.status, DeliveryStatus::Dead { .. }))
                .count();
            Ok::<_, StoreError>((pending, dead))
        })
        .await
        .map_err(|e| StoreError::Sled(e.to_string()))??;
        Metrics::set(&self.metrics.deliveries_pending, pending.len() as u64);
        Metrics::set(&self.metrics.deliveries_dead, dead as u64);
        Ok(pending)
    }

    /// One attempt, recorded; the time of the retry when it failed.
    async fn attempt(&self, d: &Delivery) -> Result<Option<u64>, StoreError> {
        let store = self.store.clone();
        let alert_id = d.alert_id.clone();
        let alert = tokio::task::spawn_blocking(move || store.alert(&alert_id))
            .await
            .map_err(|e| StoreError::Sled(e.to_string()))??;
        let result = match &alert {
            None => Err(format!("alert {} is not in the store", d.alert_id)),
            Some(a) => self.send(d, &a.event).await,
        };
        let attempt = d.attempts + 1;
        let outcome = match result {
            Ok(()) => {
                Metrics::add(&self.metrics.deliveries_made, 1);
                tracing::info!(delivery = %d.id, attempt, "alert delivered");
                AttemptOutcome::Delivered
            }
            Err(error) if attempt >= self.settings.give_up_after => {
                Metrics::add(&self.metrics.delivery_failures, 1);
                tracing::error!(delivery = %d.id, attempt, "alert delivery given up: {error}");
                AttemptOutcome::Dead { error }
            }
            Err(error) => {
                Metrics::add(&self.metrics.delivery_failures, 1);
                let wait = backoff(&self.settings, attempt);
                tracing::warn!(delivery = %d.id, attempt, retry_in_s = wait.as_secs_f64(), "alert delivery failed: {error}");
                AttemptOutcome::Failed {
                    error,
                    retry_at_unix_ms: unix_ms() + wait.as_millis() as u64,
                }
            }
        };
        let retry = match &outcome {
            AttemptOutcome::Failed {
                retry_at_unix_ms, ..
            } => Some(*retry_at_unix_ms),
            _ => None,
        };
        let record = DeliveryAttempt {
            delivery_id: d.id.clone(),
            attempt,
            at_utc: crate::watch::clock::now_utc().0,
            outcome,
        };
        let store = self.store.clone();
        tokio::task::spawn_blocking(move || store.record_attempt(record))
            .await
            .map_err(|e| StoreError::Sled(e.to_string()))??;
        Ok(retry)
    }

    async fn send(&self, d: &Delivery, event: &super::event::AlertEvent) -> Result<(), String> {
        match d.channel {
            Channel::Email => {
                let message = email::message(&self.settings.email, event, &d.id)
                    .map_err(|e| e.to_string())?;
                self.mailer
                    .send(&message, &d.id)
                    .await
                    .map_err(|e| e.to_string())
            }
            Channel::Webhook => match &self.webhook {
                Some(w) => w.post(&webhook::payload(event, &d.id), &d.id).await,
                None => Err("no webhook is configured now".into()),
            },
        }
    }
}

/// One channel's answer to a test message.
pub struct ChannelCheck {
    pub channel: Channel,
    pub destination: String,
    pub result: Result<(), String>,
}

/// Sends one test message on every configured channel, now (no retries):
/// what an operator runs after setting up mail or a webhook.
pub async fn test_every_channel(
    config: &crate::config::Config,
) -> Result<Vec<ChannelCheck>, String> {
    let settings = &config.alerts;
    let (now, _) = crate::watch::clock::now_utc();
    let id = format!("test.{}", now.replace([':', '-'], "").replace('.', "_"));
    let subject = "perihelix: test message";
    let body = format!(
        "A test of the alert channels, sent by `perihelix alert-test` at {now}.\n\
         The API is configured at http://{}.\n\n{}",
        config.api.bind,
        super::text::CAUTION
    );
    let mut out = Vec::new();
    let mailer = Mailer::new(&settings.email).map_err(|e| e.to_string())?;
    let delivery = format!("{id}.email");
    let result = match email::compose(&settings.email, subject, &body, &delivery, &now) {
        Ok(m) => mailer.send(&m, &delivery).await.map_err(|e| e.to_string()),
        Err(e) => Err(e.to_string()),
    };
    out.push(ChannelCheck {
        channel: Channel::Email,
        destination: mailer.describe(),
        result,
    });
    if let Some(w) = &settings.webhook {
        let hook = Webhook::new(&w.url, w.secret.as_deref().unwrap_or_default())?;
        let delivery = format!("{id}.webhook");
        let payload = serde_json::json!({
            "delivery_id": delivery,
            "test": true,
            "subject": subject,
            "text": body,
        });
        out.push(ChannelCheck {
            channel: Channel::Webhook,
            destination: w.url.clone(),
            result: hook.post(&payload, &delivery).await,
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 10 s, doubling, capped at 900 s (the defaults).
    #[test]
    fn waits_double_up_to_the_cap() {
        let s = AlertSettings::defaults("mail".into());
        let waits: Vec<u64> = (1..=9).map(|a| backoff(&s, a).as_secs()).collect();
        assert_eq!(waits, [10, 20, 40, 80, 160, 320, 640, 900, 900]);
    }
}
