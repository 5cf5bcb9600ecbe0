//! The simulated bench's models, read from TOML (`models/*.toml`; format in `models/README.md`).
//!
//! A model is an invented single-ended triode amplifier: a linear driver feeding the grid of a
//! Koren triode on its load line ([`super::triode`]), grid current softening the positive grid
//! swing, an output transformer (primary-inductance bass roll-off, core distortion that grows as
//! the frequency falls, leakage treble roll-off, winding resistance), hum and noise; plus the bench
//! around it: the interface's converters, the attenuator and the dummy load.

use super::triode::{LoadLine, Triode};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};

/// The simulated interface, attenuator and load.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Bench {
    pub output_fs_vrms: f64,
    pub input_fs_vrms: f64,
    pub attenuation: f64,
    pub load_ohms: f64,
    /// Converter noise, dBFS (RMS re full-scale sine), white over the whole band.
    pub dac_noise_dbfs: f64,
    pub adc_noise_dbfs: f64,
    /// Converter word length.
    pub bits: u16,
    pub seed: u64,
}

/// One channel of the amplifier.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Channel {
    /// Voltage gain from the amplifier input to the output tube's grid.
    pub driver_gain: f64,
    /// The driver's own curvature: its output is `g + k g^2` for a linear output `g` (volts at
    /// the grid), `k` in 1/V. A positive `k` adds second harmonic in the output valve's phase; a
    /// negative one cancels part of it (a common rework of single-ended amplifiers).
    pub driver_h2_per_v: f64,
    /// Driver output resistance (ohm) against the grid's conduction resistance (ohm): above 0 V
    /// the grid swing is divided by `grid_ohms / (grid_ohms + driver_ohms)`.
    pub driver_ohms: f64,
    pub grid_ohms: f64,
    pub triode: Triode,
    pub b_plus_v: f64,
    pub bias_v: f64,
    /// Primary impedance for the nominal load (the transformer's ratio is sqrt(primary / load)).
    pub primary_ohms: f64,
    pub nominal_load_ohms: f64,
    /// Secondary winding resistance (ohm).
    pub winding_ohms: f64,
    /// Primary inductance (H): the bass corner is (rp || R_primary) / (2 pi L).
    pub primary_inductance_h: f64,
    /// Core distortion: the third harmonic (as a fraction) for a full-power sine at 20 Hz; it
    /// falls 18 dB per octave of frequency (flux goes as V / f, its cube-law current as flux^3).
    pub core_h3_at_20hz: f64,
    /// The level (V rms at the output) that `core_h3_at_20hz` refers to.
    pub core_reference_vrms: f64,
    /// Leakage roll-off: second-order low-pass corner (Hz) and Q.
    pub treble_corner_hz: f64,
    pub treble_q: f64,
    /// Mains hum at the output (V rms) and its rectifier ripple (twice mains), and white noise
    /// (V rms over 20 Hz - 20 kHz) at the output.
    pub mains_hz: f64,
    pub hum_vrms: f64,
    pub ripple_vrms: f64,
    pub noise_vrms: f64,
}

/// What of one channel's output reaches the other channel's output terminals (both ways
/// alike): a flat part (a shared supply and ground return) and a part through the stray
/// capacitance between the channels' wiring, rising 6 dB per octave. At f the path is
/// `flat + j capacitive (f / 1 kHz)` (amplitudes from the dB values).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Crosstalk {
    pub flat_db: f64,
    pub capacitive_db_at_1khz: f64,
}

impl Crosstalk {
    /// The path's complex gain at `f` Hz.
    pub fn at(&self, f: f64) -> realfft::num_complex::Complex64 {
        realfft::num_complex::Complex64::new(
            10f64.powf(self.flat_db / 20.0),
            10f64.powf(self.capacitive_db_at_1khz / 20.0) * f / 1000.0,
        )
    }
}

/// A whole model: its name, the bench, the two channels and what leaks between them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Model {
    pub name: String,
    pub bench: Bench,
    pub left: Channel,
    pub right: Channel,
    /// None: the channels share nothing (the separation is the converters' own).
    #[serde(default)]
    pub crosstalk: Option<Crosstalk>,
}

/// The models shipped inside the binary.
pub const BUILT_IN: &[(&str, &str)] = &[
    ("stock", include_str!("../../models/stock.toml")),
    ("reworked", include_str!("../../models/reworked.toml")),
];

impl Model {
    /// A built-in model by name, or a TOML file by path.
    pub fn load(spec: &str) -> Result<Model> {
        if let Some((_, text)) = BUILT_IN.iter().find(|(n, _)| *n == spec) {
            return Self::parse(text, spec);
        }
        let path = std::path::Path::new(spec);
        if !path.exists() {
            let names: Vec<&str> = BUILT_IN.iter().map(|(n, _)| *n).collect();
            return Err(Error::InvalidSetting(format!(
                "no simulated model `{spec}`: built in are {}; or give a model file (see models/README.md)",
                names.join(", ")
            )));
        }
        let text = std::fs::read_to_string(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        Self::parse(&text, spec)
    }

    pub fn parse(text: &str, origin: &str) -> Result<Model> {
        let m: Model = toml::from_str(text).map_err(|e| {
            Error::InvalidSetting(format!(
                "model {origin}: {}; see models/README.md",
                e.to_string().trim()
            ))
        })?;
        m.check()
            .map_err(|d| Error::InvalidSetting(format!("model {origin}: {d}")))?;
        Ok(m)
    }

    fn check(&self) -> std::result::Result<(), String> {
        let b = &self.bench;
        for (name, v) in [
            ("bench.output_fs_vrms", b.output_fs_vrms),
            ("bench.input_fs_vrms", b.input_fs_vrms),
            ("bench.attenuation", b.attenuation),
            ("bench.load_ohms", b.load_ohms),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(format!("{name} must be above 0, got {v}"));
            }
        }
        if !(8..=32).contains(&b.bits) {
            return Err(format!("bench.bits must be 8..32, got {}", b.bits));
        }
        if let Some(x) = &self.crosstalk {
            for (name, v) in [
                ("crosstalk.flat_db", x.flat_db),
                ("crosstalk.capacitive_db_at_1khz", x.capacitive_db_at_1khz),
            ] {
                if !(v.is_finite() && v <= -20.0) {
                    return Err(format!(
                        "{name} must be -20 dB or below (a leak, not a second drive), got {v}"
                    ));
                }
            }
        }
        for (side, c) in [("left", &self.left), ("right", &self.right)] {
            for (name, v) in [
                ("driver_gain", c.driver_gain),
                ("grid_ohms", c.grid_ohms),
                ("b_plus_v", c.b_plus_v),
                ("primary_ohms", c.primary_ohms),
                ("nominal_load_ohms", c.nominal_load_ohms),
                ("primary_inductance_h", c.primary_inductance_h),
                ("treble_corner_hz", c.treble_corner_hz),
                ("treble_q", c.treble_q),
                ("triode.mu", c.triode.mu),
                ("triode.kg1", c.triode.kg1),
                ("triode.kp", c.triode.kp),
                ("mains_hz", c.mains_hz),
            ] {
                if !(v.is_finite() && v > 0.0) {
                    return Err(format!("{side}.{name} must be above 0, got {v}"));
                }
            }
            if c.bias_v >= 0.0 {
                return Err(format!(
                    "{side}.bias_v must be negative (grid bias), got {}",
                    c.bias_v
                ));
            }
        }
        Ok(())
    }

    /// The calibration that matches the simulated bench (what a user's profile would hold).
    pub fn calibration(&self) -> Calibration {
        Calibration {
            input_fs_vrms: Some(self.bench.input_fs_vrms),
            output_fs_vrms: Some(self.bench.output_fs_vrms),
            attenuation: Some(self.bench.attenuation),
            load_ohms: Some(self.bench.load_ohms),
            ..Calibration::default()
        }
    }
}

impl Channel {
    /// The output stage for a given dummy load.
    pub fn load_line(&self, load_ohms: f64) -> LoadLine {
        LoadLine {
            triode: self.triode,
            b_plus_v: self.b_plus_v,
            bias_v: self.bias_v,
            reflected_ohms: self.primary_ohms / self.nominal_load_ohms
                * (load_ohms + self.winding_ohms),
        }
    }

    /// Transformer voltage ratio (primary / secondary).
    pub fn turns_ratio(&self) -> f64 {
        (self.primary_ohms / self.nominal_load_ohms).sqrt()
    }
}
