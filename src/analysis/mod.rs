//! Pure computation on samples: no I/O, no printing.

pub mod fit;
pub mod spectrum;
pub mod tone;
pub mod weighting;
pub mod window;
