//! The one shutdown signal every task listens to.

use tokio::sync::watch;

/// Held by whoever may stop the daemon (the signal handler).
#[derive(Debug)]
pub struct ShutdownTrigger(watch::Sender<bool>);

/// Held by every task; cheap to clone.
#[derive(Debug, Clone)]
pub struct Shutdown(watch::Receiver<bool>);

pub fn channel() -> (ShutdownTrigger, Shutdown) {
    let (tx, rx) = watch::channel(false);
    (ShutdownTrigger(tx), Shutdown(rx))
}

impl ShutdownTrigger {
    pub fn trigger(&self) {
        let _ = self.0.send(true);
    }
}

impl Shutdown {
    pub fn is_set(&self) -> bool {
        *self.0.borrow()
    }

    /// Returns once the daemon is stopping (at once if it already is).
    pub async fn wait(&mut self) {
        // An error means the trigger is gone, which is a stop too.
        let _ = self.0.wait_for(|stop| *stop).await;
    }
}
