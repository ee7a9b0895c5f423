//! Adaptive high-order integrator with dense output.
