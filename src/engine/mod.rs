//! The coincidence engine: one integer rule, delay histograms, window sweeps, accidentals;
//! parallel over time slices and streaming over chunks, bit-identical for any thread count.

pub mod tables;
