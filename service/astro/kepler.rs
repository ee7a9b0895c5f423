//! Two-body motion in universal variables.
