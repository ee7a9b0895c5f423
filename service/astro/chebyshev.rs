//! Chebyshev series: fitting sampled functions and evaluating them with derivatives.
