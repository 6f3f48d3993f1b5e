//! Analysis: CHSH, visibility fits and the statistics under them. Floats live here.

pub mod bell3;
pub mod chsh;
pub mod clock_fit;
pub mod stats;
pub mod visibility;
