//! systemd's notification protocol: readiness, stopping, and the watchdog
//! fed only while the daemon's loops make progress. Without systemd
//! (`NOTIFY_SOCKET` unset) every call is a no-op.

use std::sync::atomic::Ordering;
use std::sync::Arc;
use std::time::Duration;

use sd_notify::NotifyState;

use super::metrics::Metrics;
use super::shutdown::Shutdown;

pub fn ready(address: std::net::SocketAddr) {
    let status = format!("STATUS=serving on {address}");
    let _ = sd_notify::notify(
        false,
        &[NotifyState::Ready, NotifyState::Custom(status.as_str())],
    );
}

pub fn stopping() {
    let _ = sd_notify::notify(false, &[NotifyState::Stopping]);
}

/// Pings the watchdog at half its interval while both loops have turned
/// within the interval; a stuck loop stops the pings and lets systemd
/// restart the service.
pub async fn watchdog(metrics: Arc<Metrics>, mut shutdown: Shutdown) {
    let mut usec = 0;
    if !sd_notify::watchdog_enabled(false, &mut usec) || usec == 0 {
        return;
    }
    let interval = Duration::from_micros(usec);
    let mut tick = tokio::time::interval(interval / 2);
    loop {
        tokio::select! {
            _ = shutdown.wait() => return,
            _ = tick.tick() => {}
        }
        let now = metrics.since_start_ms();
        let limit = interval.as_millis() as u64;
        let fresh = |beat: &std::sync::atomic::AtomicU64| {
            now.saturating_sub(beat.load(Ordering::Relaxed)) < limit
        };
        if fresh(&metrics.intake_heartbeat_ms) && fresh(&metrics.scheduler_heartbeat_ms) {
            let _ = sd_notify::notify(false, &[NotifyState::Watchdog]);
        } else {
            tracing::warn!("a loop has not turned within the watchdog interval; not pinging");
        }
    }
}
