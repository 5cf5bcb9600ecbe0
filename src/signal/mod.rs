//! Signals ampnote makes: test tones, dither, and WAV writing.

pub mod dither;
pub mod stimulus;
pub mod wav;
