//! Warnings: what a result says beside its figures, each with a stable code.
//!
//! A warning is a [`WarningCode`] (stable, for scripts and for the report to place it beside the
//! figure it concerns) and a message (plain words, with the numbers and the next step; it may be
//! reworded between versions, the code is not). In JSON: `{"code": "input-overload", "message":
//! "..."}`. Runs kept before codes existed stored bare strings; they read back with the code
//! `unclassified`.

use serde::{Deserialize, Serialize};
use std::fmt;

/// What a warning is about. The kebab-case names are stable: add codes, never rename one.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WarningCode {
    // --- the capture and the interface ---
    /// Samples at or beyond full scale: the interface clipped.
    InputOverload,
    /// Too short to resolve hum and low-frequency noise.
    ShortCapture,
    /// A level so low that the interface's own noise weighs on the figures.
    LowLevel,
    /// A reading within 10 dB of the interface's own loopback floor.
    InterfaceFloor,
    /// THD+N at the resolution floor of the file's samples.
    ResolutionFloor,
    /// A DC offset at the interface input.
    DcOffset,
    /// The file was cut short, or its header gave no length.
    FileLength,
    /// Something the rig noticed while playing and recording (gaps, retries, a drive that missed
    /// its power).
    Rig,
    // --- the tone and its steadiness ---
    /// The level jumps between two steady values.
    LevelJump,
    /// The signal drops out for a moment.
    Dropout,
    /// Only part of the tone is steady.
    PartlySteady,
    /// The level moves across the analysed span.
    LevelDrift,
    /// The fundamental's phase wanders (a player's clock).
    FrequencyUnstable,
    /// The fundamental lies outside the measurement band.
    OutsideBand,
    /// Harmonics lie past the band's top: THD counts fewer orders, or none.
    HarmonicsOutOfBand,
    /// The dominant harmonics are under the noise: THD is an upper bound.
    UnderNoise,
    /// Mains hum dominates the THD+N residual.
    HumDominates,
    /// The mains family detected differs between parts of a capture.
    MainsDiffers,
    /// Figures move from block to block of a long capture.
    FiguresMove,
    // --- oscillation ---
    /// A line no stimulus, harmonic, mains or noise explains (ultrasonic or sub-audio).
    Oscillation,
    /// The level pumps periodically at a few hertz.
    Motorboating,
    // --- sweeps and two tones ---
    /// The impulse response stands too little above its noise.
    NoisySweep,
    /// Player's and recorder's clocks differ.
    ClockOffset,
    /// The reference frequency lies outside the sweep.
    ReferenceOutsideSweep,
    /// The sweep does not cover the deviation band.
    SweepNarrow,
    /// A two-tone product cannot be measured (off the spectrum, or on another line).
    ProductLost,
    /// The two tones do not stand in the ratio the method assumes.
    ToneRatio,
    /// The two tones differ between parts of a capture.
    PairDiffers,
    /// Crosstalk under the noise: separation is a lower bound.
    SeparationBound,
    // --- staircases, loads, calibration ---
    /// No calibration: levels are in dBFS.
    Uncalibrated,
    /// No load given: volts but no watts.
    NoLoad,
    /// The analysis band was widened or cannot hold H3.
    BandNote,
    /// Steps left out of the staircase figures.
    StepsExcluded,
    /// The staircase never reached a THD level.
    LevelNotReached,
    /// The staircase was stopped early.
    Stopped,
    /// A load is nearly an open circuit.
    OpenLoad,
    /// A reading that cannot be physical (a negative impedance).
    Implausible,
    /// A part dissipates more than its rating.
    OverRating,
    /// A value that does not add up (a current with no resistor, a negative voltage...).
    DcPoint,
    // --- comparisons and channel matches ---
    /// The two sides were measured into different loads.
    UnlikeLoads,
    /// One side calibrated and the other not, or different calibrations.
    UnlikeCalibration,
    /// Tone runs at different levels: distortion is not compared like for like.
    UnlikeLevels,
    /// A figure only one side measured, or measured differently: left out.
    NotCompared,
    /// The two sides share no measurement.
    NothingShared,
    /// Only magnitudes were available: a phase (or a reactive part) was not measured.
    PhaseUnknown,
    /// A warning stored before codes existed.
    #[serde(other)]
    Unclassified,
}

impl WarningCode {
    /// The stable name (as in JSON).
    pub fn name(self) -> String {
        serde_json::to_value(self)
            .ok()
            .and_then(|v| v.as_str().map(str::to_string))
            .unwrap_or_default()
    }

    /// A warning of this code.
    pub fn say(self, message: impl Into<String>) -> Warning {
        Warning {
            code: self,
            message: message.into(),
        }
    }
}

/// One warning.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(from = "Stored")]
pub struct Warning {
    pub code: WarningCode,
    pub message: String,
}

/// How warnings were stored: bare strings before codes existed, objects since.
#[derive(Deserialize)]
#[serde(untagged)]
enum Stored {
    Coded { code: WarningCode, message: String },
    Plain(String),
}

impl From<Stored> for Warning {
    fn from(s: Stored) -> Warning {
        match s {
            Stored::Coded { code, message } => Warning { code, message },
            Stored::Plain(message) => Warning {
                code: WarningCode::Unclassified,
                message,
            },
        }
    }
}

impl fmt::Display for Warning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}
