//! Procedures: several stimuli, runs and analyses put together into one bench figure.

pub mod align;
pub mod dc;
pub mod drive;
pub mod power;
pub mod zout;
