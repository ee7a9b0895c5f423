//! Trajectories: a state and its partials at any epoch inside an arc.
