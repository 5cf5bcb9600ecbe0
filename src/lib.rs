//! # ampnote
//!
//! Bench measurements for audio power amplifiers (tube amplifiers above all): a recorded steady
//! tone becomes THD, THD+N, the harmonic profile with phases, noise, hum, DC offset and, with a
//! calibration, volts at the output and watts into the load.
//!
//! Every measurement is stimulus -> rig -> capture -> analysis -> result. This crate keeps the
//! analysis pure ([`analysis`]), reads captures ([`capture`]), converts levels ([`calibration`])
//! and renders results ([`report`]); the `ampnote` binary only parses arguments and dispatches.
//!
//! Conventions used everywhere:
//! - 0 dBFS is the RMS of a full-scale sine (AES17); integer samples scale to +/-1.0.
//! - THD is THD_F (harmonics over the fundamental); THD+N is AES17 (residual over total, in band).
//! - Harmonic phase is `phi_n - n phi_1` for `x = sum a_n sin(n w t + phi_n)`, in (-180, 180] degrees.

pub mod analysis;
pub mod calibration;
pub mod capture;
pub mod demo;
pub mod error;
pub mod files;
pub mod notebook;
pub mod procedure;
pub mod progress;
pub mod report;
pub mod results;
pub mod rig;
pub mod signal;
pub mod warning;

pub use error::{Error, Result};
