//! The daemon's counters, served in the Prometheus text format at
//! `/metrics`, and the heartbeats the systemd watchdog is fed from.

use std::fmt::Write;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

/// Upper bounds of the fit-duration histogram, s.
const FIT_BUCKETS_S: [f64; 9] = [0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 60.0, 120.0, 600.0];

#[derive(Debug)]
pub struct Metrics {
    started: Instant,
    pub files_taken: AtomicU64,
    pub files_rejected: AtomicU64,
    pub observations_accepted: AtomicU64,
    pub observations_duplicate: AtomicU64,
    pub lines_rejected: AtomicU64,
    pub refits_converged: AtomicU64,
    pub refits_failed: AtomicU64,
    pub queue_depth: AtomicU64,
    pub fits_running: AtomicU64,
    pub alerts_raised: AtomicU64,
    pub deliveries_made: AtomicU64,
    pub delivery_failures: AtomicU64,
    /// Gauges the outbox sets from the store after every pass.
    pub deliveries_pending: AtomicU64,
    pub deliveries_dead: AtomicU64,
    fit_buckets: [AtomicU64; FIT_BUCKETS_S.len()],
    fit_count: AtomicU64,
    /// Sum of fit durations in ms.
    fit_sum_ms: AtomicU64,
    /// Milliseconds since start at the last turn of each loop.
    pub intake_heartbeat_ms: AtomicU64,
    pub scheduler_heartbeat_ms: AtomicU64,
}

impl Default for Metrics {
    fn default() -> Self {
        Self::new()
    }
}

impl Metrics {
    pub fn new() -> Self {
        Self {
            started: Instant::now(),
            files_taken: AtomicU64::new(0),
            files_rejected: AtomicU64::new(0),
            observations_accepted: AtomicU64::new(0),
            observations_duplicate: AtomicU64::new(0),
            lines_rejected: AtomicU64::new(0),
            refits_converged: AtomicU64::new(0),
            refits_failed: AtomicU64::new(0),
            queue_depth: AtomicU64::new(0),
            fits_running: AtomicU64::new(0),
            alerts_raised: AtomicU64::new(0),
            deliveries_made: AtomicU64::new(0),
            delivery_failures: AtomicU64::new(0),
            deliveries_pending: AtomicU64::new(0),
            deliveries_dead: AtomicU64::new(0),
            fit_buckets: Default::default(),
            fit_count: AtomicU64::new(0),
            fit_sum_ms: AtomicU64::new(0),
            intake_heartbeat_ms: AtomicU64::new(0),
            scheduler_heartbeat_ms: AtomicU64::new(0),
        }
    }

    pub fn add(counter: &AtomicU64, n: u64) {
        counter.fetch_add(n, Ordering::Relaxed);
    }

    pub fn set(gauge: &AtomicU64, v: u64) {
        gauge.store(v, Ordering::Relaxed);
    }

    pub fn since_start_ms(&self) -> u64 {
        self.started.elapsed().as_millis() as u64
    }

    /// A loop turned: the watchdog may be fed.
    pub fn beat(&self, heartbeat: &AtomicU64) {
        heartbeat.store(self.since_start_ms(), Ordering::Relaxed);
    }

    pub fn observe_fit(&self, seconds: f64) {
        for (bound, bucket) in FIT_BUCKETS_S.iter().zip(&self.fit_buckets) {
            if seconds <= *bound {
                bucket.fetch_add(1, Ordering::Relaxed);
            }
        }
        self.fit_count.fetch_add(1, Ordering::Relaxed);
        self.fit_sum_ms
            .fetch_add((seconds * 1000.0) as u64, Ordering::Relaxed);
    }

    /// The Prometheus text exposition (version 0.0.4).
    pub fn render(&self) -> String {
        let mut out = String::new();
        let get = |c: &AtomicU64| c.load(Ordering::Relaxed);
        let mut counter = |name: &str, help: &str, v: u64| {
            let _ = writeln!(
                out,
                "# HELP {name} {help}\n# TYPE {name} counter\n{name} {v}"
            );
        };
        counter(
            "perihelix_files_taken_total",
            "Files archived after their observations were stored.",
            get(&self.files_taken),
        );
        counter(
            "perihelix_files_rejected_total",
            "Files with no usable observation, moved to the rejected directory.",
            get(&self.files_rejected),
        );
        counter(
            "perihelix_observations_accepted_total",
            "Observations stored.",
            get(&self.observations_accepted),
        );
        counter(
            "perihelix_observations_duplicate_total",
            "Observations already stored, skipped.",
            get(&self.observations_duplicate),
        );
        counter(
            "perihelix_lines_rejected_total",
            "Input lines rejected with a reason.",
            get(&self.lines_rejected),
        );
        counter(
            "perihelix_refits_converged_total",
            "Refits that gave a converged solution.",
            get(&self.refits_converged),
        );
        counter(
            "perihelix_refits_failed_total",
            "Refits that gave no converged solution (kept with the reason).",
            get(&self.refits_failed),
        );
        counter(
            "perihelix_alerts_raised_total",
            "Alerts raised (a rule crossed its threshold or cleared).",
            get(&self.alerts_raised),
        );
        counter(
            "perihelix_alert_deliveries_total",
            "Alert deliveries made (e-mail or webhook).",
            get(&self.deliveries_made),
        );
        counter(
            "perihelix_alert_delivery_failures_total",
            "Alert delivery attempts that failed (each is retried, until given up).",
            get(&self.delivery_failures),
        );
        let _ = writeln!(
            out,
            "# HELP perihelix_alert_deliveries_pending Alert deliveries waiting to be made.\n# TYPE perihelix_alert_deliveries_pending gauge\nperihelix_alert_deliveries_pending {}",
            get(&self.deliveries_pending)
        );
        let _ = writeln!(
            out,
            "# HELP perihelix_alert_deliveries_dead Alert deliveries given up after every retry.\n# TYPE perihelix_alert_deliveries_dead gauge\nperihelix_alert_deliveries_dead {}",
            get(&self.deliveries_dead)
        );
        let _ = writeln!(
            out,
            "# HELP perihelix_refit_queue_depth Objects waiting for a refit.\n# TYPE perihelix_refit_queue_depth gauge\nperihelix_refit_queue_depth {}",
            get(&self.queue_depth)
        );
        let _ = writeln!(
            out,
            "# HELP perihelix_fits_running Fits in progress.\n# TYPE perihelix_fits_running gauge\nperihelix_fits_running {}",
            get(&self.fits_running)
        );
        let _ = writeln!(
            out,
            "# HELP perihelix_fit_duration_seconds Duration of one refit.\n# TYPE perihelix_fit_duration_seconds histogram"
        );
        for (bound, bucket) in FIT_BUCKETS_S.iter().zip(&self.fit_buckets) {
            let _ = writeln!(
                out,
                "perihelix_fit_duration_seconds_bucket{{le=\"{bound}\"}} {}",
                get(bucket)
            );
        }
        let count = get(&self.fit_count);
        let _ = writeln!(
            out,
            "perihelix_fit_duration_seconds_bucket{{le=\"+Inf\"}} {count}\nperihelix_fit_duration_seconds_sum {:.3}\nperihelix_fit_duration_seconds_count {count}",
            get(&self.fit_sum_ms) as f64 / 1000.0
        );
        out
    }
}
