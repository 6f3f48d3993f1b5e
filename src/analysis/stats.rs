//! Statistics: Poisson intervals, normal p-values, error propagation.
