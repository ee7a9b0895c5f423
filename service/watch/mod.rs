//! The incoming directory: which files to take and when.
//!
//! - File-system events (notify): a file is complete when it was closed
//!   after writing, renamed or moved in, or hard-linked in. A bare create
//!   or a write is not complete: the writer may not be done.
//! - Scans: at start, every `rescan_interval_s`, and whenever notify says
//!   it lost events (its rescan flag) or our own bounded queue overflowed.
//!   A scan takes a file only once it has not changed for [`SETTLE`], so a
//!   file still being written in place is left for the next look.
//! - Hidden and temporary names (`.*`, `*.part`, `*.tmp`) are never taken:
//!   write under such a name and rename when done.
//!
//! Files are taken one at a time ([`take`]), off the async executor, a big
//! one in chunks: each chunk feeds the watchdog's heartbeat, and a stop
//! between chunks leaves the file for the next start. Taking is
//! idempotent, so a file seen by an event and by a scan is harmless.
//! When the store cannot write (a full disk), the file stays and is tried
//! again after [`RETRY`].

pub mod clock;
pub mod take;

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, SystemTime};

use notify::event::{AccessKind, AccessMode, CreateKind, ModifyKind, RenameMode};
use notify::{Event, EventKind, RecursiveMode, Watcher};
use tokio::sync::{mpsc, oneshot};
use tokio::time::Instant;

use crate::config::Config;
use crate::daemon::metrics::Metrics;
use crate::daemon::shutdown::Shutdown;
use crate::store::{Store, Trigger};
use crate::worker::RefitQueue;

use take::{is_candidate, take_file_with, Hooks, Progress, Taken};

/// A scan leaves files younger than this for the next look.
pub const SETTLE: Duration = Duration::from_secs(2);

/// A file the store could not take is tried again after this.
pub const RETRY: Duration = Duration::from_secs(5);

/// Events waiting between notify's thread and the intake task.
const EVENT_CAPACITY: usize = 4096;

const HEARTBEAT: Duration = Duration::from_secs(5);

/// What the notify thread tells the intake task.
#[derive(Debug)]
enum Signal {
    /// A complete file.
    File(PathBuf),
    /// Look at the whole directory.
    Scan,
}

/// The paths of an event that are complete files, if any.
fn complete_paths(event: &Event) -> Vec<PathBuf> {
    match event.kind {
        EventKind::Access(AccessKind::Close(AccessMode::Write)) => event.paths.clone(),
        EventKind::Modify(ModifyKind::Name(RenameMode::To)) => event.paths.clone(),
        EventKind::Modify(ModifyKind::Name(RenameMode::Both)) => {
            event.paths.last().cloned().into_iter().collect()
        }
        // A hard link arrives as a bare create of a file that already has
        // more than one name; a new file being written also starts with a
        // create, and is left for its close.
        EventKind::Create(CreateKind::File | CreateKind::Any) => event
            .paths
            .iter()
            .filter(|p| has_other_links(p))
            .cloned()
            .collect(),
        _ => Vec::new(),
    }
}

#[cfg(unix)]
fn has_other_links(path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    std::fs::metadata(path).is_ok_and(|m| m.nlink() > 1)
}

#[cfg(not(unix))]
fn has_other_links(_: &Path) -> bool {
    false
}

/// Starts notify on `dir`; its events go to `tx`, and a full queue or a
/// lost-events report raises `overflow` (the next turn scans).
fn start_notify(
    dir: &Path,
    tx: mpsc::Sender<Signal>,
    overflow: Arc<AtomicBool>,
) -> notify::Result<notify::RecommendedWatcher> {
    let mut watcher = notify::recommended_watcher(move |res: notify::Result<Event>| {
        let send = |s: Signal| {
            if tx.try_send(s).is_err() {
                overflow.store(true, Ordering::Relaxed);
            }
        };
        match res {
            Ok(event) if event.need_rescan() => send(Signal::Scan),
            Ok(event) => {
                for p in complete_paths(&event) {
                    send(Signal::File(p));
                }
            }
            Err(_) => send(Signal::Scan),
        }
    })?;
    watcher.watch(dir, RecursiveMode::NonRecursive)?;
    Ok(watcher)
}

/// Candidate files of `dir` that have settled, and whether any did not.
fn scan(dir: &Path) -> (Vec<PathBuf>, bool) {
    let mut files = Vec::new();
    let mut unsettled = false;
    let entries = match std::fs::read_dir(dir) {
        Ok(e) => e,
        Err(e) => {
            tracing::error!(dir = %dir.display(), "cannot scan the incoming directory: {e}");
            return (files, false);
        }
    };
    let now = SystemTime::now();
    for entry in entries.flatten() {
        let path = entry.path();
        let Ok(meta) = entry.metadata() else { continue };
        if !meta.is_file() || !is_candidate(&path) {
            continue;
        }
        let age = meta
            .modified()
            .ok()
            .and_then(|m| now.duration_since(m).ok())
            .unwrap_or(SETTLE);
        if age >= SETTLE {
            files.push(path);
        } else {
            unsettled = true;
        }
    }
    files.sort();
    (files, unsettled)
}

/// What the intake task needs.
pub struct Intake {
    pub config: Arc<Config>,
    pub store: Arc<dyn Store>,
    pub queue: RefitQueue,
    pub metrics: Arc<Metrics>,
}

/// Takes one file off the executor and reports it.
pub async fn take_one(intake: &Intake, path: PathBuf) -> Result<Taken, take::TakeError> {
    take_one_until(intake, path, None).await
}

/// [`take_one`], stopping between the chunks of a big file once `stop` is
/// set (the file stays in the incoming directory). Every chunk feeds the
/// intake's heartbeat: a big file is progress, not a stuck loop.
pub async fn take_one_until(
    intake: &Intake,
    path: PathBuf,
    stop: Option<Shutdown>,
) -> Result<Taken, take::TakeError> {
    let (config, store) = (intake.config.clone(), intake.store.clone());
    let metrics = intake.metrics.clone();
    let p = path.clone();
    let result = tokio::task::spawn_blocking(move || {
        let span = tracing::info_span!("file", file = %p.display());
        let _enter = span.enter();
        let beat = |_: &Progress| metrics.beat(&metrics.intake_heartbeat_ms);
        let stopping = || stop.as_ref().is_some_and(Shutdown::is_set);
        let hooks = Hooks {
            progress: &beat,
            stop: &stopping,
        };
        take_file_with(&p, &config, store.as_ref(), hooks)
    })
    .await
    .unwrap_or_else(|e| {
        Err(take::TakeError::Io {
            file: path.clone(),
            why: format!("the intake task failed: {e}"),
        })
    });
    let m = &intake.metrics;
    match &result {
        Ok(Taken::Archived {
            to,
            added,
            duplicates,
            lines_rejected,
            ..
        }) => {
            Metrics::add(&m.files_taken, 1);
            Metrics::add(
                &m.observations_accepted,
                added.values().sum::<usize>() as u64,
            );
            Metrics::add(&m.observations_duplicate, *duplicates as u64);
            Metrics::add(&m.lines_rejected, *lines_rejected as u64);
            for object in added.keys() {
                intake.queue.mark(object, Trigger::NewObservations);
            }
            tracing::info!(
                file = %path.display(),
                archived = %to.display(),
                objects = added.len(),
                accepted = added.values().sum::<usize>(),
                duplicates,
                lines_rejected,
                "file taken"
            );
        }
        Ok(Taken::Rejected { to, reason, .. }) => {
            Metrics::add(&m.files_rejected, 1);
            tracing::warn!(file = %path.display(), moved = %to.display(), "file rejected: {reason}");
        }
        Ok(Taken::Gone) => {}
        Err(e @ take::TakeError::Stopped { .. }) => tracing::info!("{e}"),
        Err(e) => tracing::error!("{e}"),
    }
    result
}

/// The intake task: runs until shutdown. `ready` is sent once the first
/// scan has listed the directory.
pub async fn run(intake: Intake, ready: oneshot::Sender<()>, mut shutdown: Shutdown) {
    let dir = intake.config.directories.incoming.clone();
    let (tx, mut rx) = mpsc::channel(EVENT_CAPACITY);
    let overflow = Arc::new(AtomicBool::new(false));
    // Kept alive for the task's life; without it, the periodic scans
    // still find every file.
    let watcher = match start_notify(&dir, tx, overflow.clone()) {
        Ok(w) => Some(w),
        Err(e) => {
            tracing::error!(dir = %dir.display(), "cannot watch the incoming directory ({e}); relying on scans");
            None
        }
    };
    let mut events_open = watcher.is_some();
    let rescan = Duration::from_secs_f64(intake.config.refit.rescan_interval_s);
    let mut pending: BTreeSet<PathBuf> = BTreeSet::new();
    let (files, unsettled) = scan(&dir);
    pending.extend(files);
    let _ = ready.send(());
    let mut next_scan = Instant::now() + rescan;
    if unsettled {
        next_scan = next_scan.min(Instant::now() + SETTLE);
    }
    loop {
        intake.metrics.beat(&intake.metrics.intake_heartbeat_ms);
        if overflow.swap(false, Ordering::Relaxed) {
            next_scan = Instant::now();
        }
        if Instant::now() >= next_scan {
            let (files, unsettled) = scan(&dir);
            pending.extend(files);
            next_scan = Instant::now() + if unsettled { SETTLE } else { rescan };
        }
        // One file per turn, so a stop or new events are seen between
        // files of a long backlog.
        if let Some(path) = pending.pop_first() {
            if shutdown.is_set() {
                break;
            }
            if let Err(e) = take_one_until(&intake, path, Some(shutdown.clone())).await {
                if e.is_disk_full() {
                    tracing::warn!("the disk is full; files wait in the incoming directory");
                }
                next_scan = next_scan.min(Instant::now() + RETRY);
            }
            continue;
        }
        let wake = next_scan.min(Instant::now() + HEARTBEAT);
        tokio::select! {
            _ = shutdown.wait() => break,
            signal = rx.recv(), if events_open => match signal {
                Some(Signal::File(p)) if is_candidate(&p) => { pending.insert(p); }
                Some(Signal::File(_)) => {}
                Some(Signal::Scan) => next_scan = Instant::now(),
                None => events_open = false,
            },
            _ = tokio::time::sleep_until(wake) => {}
        }
        if shutdown.is_set() {
            break;
        }
    }
    drop(watcher);
}
