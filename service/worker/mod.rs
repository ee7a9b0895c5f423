//! Refit scheduling: objects marked dirty by ingest (or by an analyst)
//! wait out their quiet period ([`debounce`]), then are refitted on
//! blocking threads ([`job`]), at most `workers` at once and one fit per
//! object at a time. Marks that arrive during an object's fit wait for the
//! next one, so a burst is coalesced.
//!
//! On shutdown the running fits are cancelled at their next iteration and
//! nothing of theirs is stored; the objects stay due in the store (their
//! newest observations, or an analyst's newest decision or refit request,
//! are newer than their latest solution's inputs), so the next start
//! refits them: the queue is persisted by construction.

pub mod debounce;
pub mod job;

use std::collections::{BTreeSet, HashMap};
use std::sync::Arc;
use std::time::Duration;

use tokio::sync::mpsc;
use tokio::task::JoinSet;
use tokio::time::Instant;

use crate::daemon::metrics::Metrics;
use crate::daemon::shutdown::Shutdown;
use crate::fit::lsq::Cancel;
use crate::store::Trigger;

use debounce::Debounce;
use job::JobContext;

/// How long a stopping daemon waits for cancelled fits to notice.
const CANCEL_GRACE: Duration = Duration::from_secs(20);

/// Idle loops still turn this often, so the watchdog sees them alive.
const HEARTBEAT: Duration = Duration::from_secs(5);

/// A request to the scheduler.
#[derive(Debug, Clone)]
pub struct Dirty {
    pub object: String,
    pub trigger: Trigger,
}

/// The way into the refit queue; cheap to clone. The queue is behind this
/// narrow handle so that a distributed queue can later stand in for it.
#[derive(Debug, Clone)]
pub struct RefitQueue(mpsc::UnboundedSender<Dirty>);

impl RefitQueue {
    pub fn mark(&self, object: &str, trigger: Trigger) {
        // Fails only when the scheduler has stopped, i.e. at shutdown,
        // when the store keeps the object due anyway.
        let _ = self.0.send(Dirty {
            object: object.to_string(),
            trigger,
        });
    }
}

pub fn queue() -> (RefitQueue, mpsc::UnboundedReceiver<Dirty>) {
    let (tx, rx) = mpsc::unbounded_channel();
    (RefitQueue(tx), rx)
}

/// The scheduler: runs until shutdown.
pub async fn run(
    ctx: Arc<JobContext>,
    mut requests: mpsc::UnboundedReceiver<Dirty>,
    metrics: Arc<Metrics>,
    mut shutdown: Shutdown,
) {
    let refit = &ctx.config.refit;
    let mut debounce = Debounce::new(
        Duration::from_secs_f64(refit.quiet_period_s),
        Duration::from_secs_f64(refit.max_delay_s),
    );
    let workers = refit.workers.max(1);
    let cancel = Cancel::new();
    let mut running: BTreeSet<String> = BTreeSet::new();
    let mut jobs: JoinSet<(Outcome, f64)> = JoinSet::new();
    // Which object each task fits, so a task that panics still frees it.
    let mut task_objects: HashMap<tokio::task::Id, String> = HashMap::new();

    // Objects left due by the last run (or by files taken while stopped).
    match ctx.store.objects() {
        Ok(objects) => {
            let now = std::time::Instant::now();
            for o in &objects {
                if let Some(trigger) = o.due() {
                    debounce.mark(&o.id, now, trigger);
                }
            }
        }
        Err(e) => tracing::error!("cannot list the objects due for a refit: {e}"),
    }

    loop {
        metrics.beat(&metrics.scheduler_heartbeat_ms);
        let now = std::time::Instant::now();
        if !shutdown.is_set() {
            for id in debounce.due(now, &running) {
                if running.len() >= workers {
                    break;
                }
                let Some(waiting) = debounce.take(&id) else {
                    continue;
                };
                running.insert(id.clone());
                let (ctx, cancel) = (ctx.clone(), cancel.clone());
                let object = id.clone();
                let handle = jobs.spawn_blocking(move || {
                    let span = tracing::info_span!("fit", object = %object);
                    let _enter = span.enter();
                    let started = std::time::Instant::now();
                    let result = job::refit(&ctx, &object, waiting.trigger, &cancel);
                    (result, started.elapsed().as_secs_f64())
                });
                task_objects.insert(handle.id(), id);
            }
        }
        Metrics::set(&metrics.queue_depth, debounce.len() as u64);
        Metrics::set(&metrics.fits_running, running.len() as u64);
        let wake = debounce
            .next_due(&running)
            .map(Instant::from_std)
            .unwrap_or_else(|| Instant::now() + HEARTBEAT)
            .min(Instant::now() + HEARTBEAT);
        tokio::select! {
            _ = shutdown.wait(), if !shutdown.is_set() => {
                cancel.set();
            }
            Some(request) = requests.recv(), if !shutdown.is_set() => {
                debounce.mark(&request.object, std::time::Instant::now(), request.trigger);
            }
            Some(done) = jobs.join_next_with_id(), if !jobs.is_empty() => {
                let (task, outcome) = match done {
                    Ok((task, outcome)) => (task, Some(outcome)),
                    Err(e) => (e.id(), None),
                };
                let id = task_objects.remove(&task).unwrap_or_default();
                running.remove(&id);
                match outcome {
                    Some((result, seconds)) => report(&id, result, seconds, &metrics),
                    None => tracing::error!(object = %id, "a fit task failed (panicked or aborted)"),
                }
            }
            _ = tokio::time::sleep_until(wake), if !shutdown.is_set() => {}
        }
        if shutdown.is_set() {
            break;
        }
    }
    // Stopping: running fits see the cancel flag at their next iteration.
    let deadline = Instant::now() + CANCEL_GRACE;
    while !jobs.is_empty() {
        match tokio::time::timeout_at(deadline, jobs.join_next_with_id()).await {
            Ok(Some(Ok((task, (result, seconds))))) => {
                let id = task_objects.remove(&task).unwrap_or_default();
                report(&id, result, seconds, &metrics);
            }
            Ok(Some(Err(e))) => tracing::error!("a fit task failed: {e}"),
            Ok(None) => break,
            Err(_) => {
                tracing::warn!(fits = jobs.len(), "fits did not stop in time; leaving them");
                break;
            }
        }
    }
}

/// What one fit task gives back.
type Outcome = Result<Option<crate::store::SolutionSummary>, job::JobError>;

fn report(id: &str, result: Outcome, seconds: f64, metrics: &Metrics) {
    match result {
        Ok(Some(s)) => {
            metrics.observe_fit(seconds);
            if s.converged {
                Metrics::add(&metrics.refits_converged, 1);
            } else {
                Metrics::add(&metrics.refits_failed, 1);
            }
            tracing::info!(
                object = %id,
                solution = s.seq,
                converged = s.converged,
                recommended = s.recommended.as_deref().unwrap_or("-"),
                failure = s.failure.as_deref().unwrap_or(""),
                "solution stored"
            );
        }
        Ok(None) => tracing::info!(object = %id, "fit cancelled; the object stays due"),
        Err(e) => tracing::error!(object = %id, "refit failed: {e}"),
    }
}
