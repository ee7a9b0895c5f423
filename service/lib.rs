//! perihelix keeps a newly found small body's orbit right while
//! observations keep coming in.
//!
//! Data moves one way: files -> observations -> solutions -> alerts.
//! - [`astro`]: pure computation (time, frames, ephemerides, observers,
//!   forces, integrator, elements); no I/O beyond an ephemeris file.
//! - [`fit`]: orbit determination on astrometric observations (observation
//!   model, weights, initial orbits, least squares, the model ladder).
//! - [`ingest`]: observation formats and their validation.
//! - [`config`]: the one typed configuration.
//! - [`solve`]: from observation records to a fitted ladder of models and
//!   its documents (JSON and text), for the command line and the daemon.
//! - [`store`]: the daemon's journal (the truth) and its sled index.
//! - [`transfer`]: `perihelix export` and `import`: the store as a stream of
//!   JSON lines, for backups of a running daemon and moves.
//! - [`watch`]: the incoming directory; taking a file into the store.
//! - [`worker`]: refit scheduling and the refit job.
//! - [`alerts`]: rules over each stored solution, the words of an alert,
//!   and the outbox that delivers them by e-mail and webhook.
//! - [`api`]: the JSON endpoint.
//! - [`page`]: the read-only pages the daemon serves, and their SVG plots.
//! - [`daemon`]: `perihelix serve`, the stages wired together, shutdown,
//!   systemd notification and metrics.
//! - [`demo`]: `perihelix demo`, an invented visitor fed to the real
//!   daemon night by night.
// Constants are written with the digits their sources print (DE440 GM
// values, integrator coefficients), even where f64 keeps fewer: the text is
// then checkable against the source.
#![allow(clippy::excessive_precision)]

pub mod alerts;
pub mod api;
pub mod astro;
pub mod config;
pub mod daemon;
pub mod demo;
pub mod fit;
pub mod ingest;
pub mod page;
pub mod solve;
pub mod store;
pub mod transfer;
pub mod watch;
pub mod worker;
