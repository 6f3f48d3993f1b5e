//! The source model: a polarization-entangled pair source read by four detectors, deterministic per seed.
