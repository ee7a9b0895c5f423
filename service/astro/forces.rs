//! Accelerations on the small body and their partial derivatives.
