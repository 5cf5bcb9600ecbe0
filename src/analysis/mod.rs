//! Pure computation on samples: no I/O, no printing.

pub mod blocks;
pub mod fit;
pub mod imd;
pub mod noise;
pub mod oscillation;
pub mod separation;
pub mod spectrum;
pub mod square;
pub mod steady;
pub mod sweep;
pub mod tone;
pub mod views;
pub mod weighting;
pub mod window;
