//! The read-only pages the daemon serves (issue 13); `svg` draws the plots.
//!
//! - [`svg`]: a small SVG chart writer (points, error bars, reference
//!   lines, legend) whose output can be checked by parsing it.

pub mod svg;
