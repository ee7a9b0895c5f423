//! Where the observer is: station sites and explicit positions.
