//! Observation input: ADES PSV and XML, JSON lines, validation.
