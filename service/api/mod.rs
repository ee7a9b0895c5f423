//! The JSON API: the store read over HTTP, and the few writes (posting
//! observations, asking for a refit) that go through the same ingest and
//! queue as everything else.
//!
//! - [`routes`]: the handlers and the router.
//! - [`predict`]: predictions from a stored solution.
//! - [`plan`]: the nights that would settle the rival models.
//! - [`overrides`]: an analyst's decisions about an object.
//! - [`alerts`]: the alerts and their deliveries; acknowledgements.
//! - [`auth`]: the bearer token writes need.
//! - [`error`]: errors as JSON with a stable code.
//!
//! Every request has a timeout and every body a size limit; the server
//! binds loopback unless configured otherwise (and then a token is
//! required by the configuration itself).

pub mod alerts;
pub mod auth;
pub mod error;
pub mod overrides;
pub mod plan;
pub mod predict;
pub mod routes;

pub use routes::{router, ApiState, READS_IN_FLIGHT};
