//! Output impedance and damping factor by the two-load method.
//!
//! With the same drive, the output voltage is `V1` into `R1` and `V2` into `R2`:
//! `Z_out = (V2 - V1) / (V1 / R1 - V2 / R2)`; damping factor = `R_nominal / Z_out`
//! (REFERENCES.md, Output impedance). Two loaded measurements, never an open circuit: a tube
//! amplifier's output transformer must not run unloaded (common practice). The voltages may be in
//! any unit common to both (dBFS through the same interface and attenuator will do).

use crate::error::{Error, Result};
use serde::Serialize;

/// The two-load formula.
pub fn two_load(v1: f64, r1: f64, v2: f64, r2: f64) -> Result<f64> {
    for (name, r) in [("first load", r1), ("second load", r2)] {
        if !(r.is_finite() && r > 0.0) {
            return Err(Error::InvalidSetting(format!(
                "the {name} must be above 0 ohm, got {r}"
            )));
        }
    }
    if (r1 - r2).abs() < 1e-9 * r1.max(r2) {
        return Err(Error::InvalidSetting(
            "the two loads must differ (for example the rated load and twice it)".into(),
        ));
    }
    let den = v1 / r1 - v2 / r2;
    if den.abs() < 1e-300 {
        return Err(Error::InvalidSetting(
            "the two readings do not differ enough to give an impedance".into(),
        ));
    }
    Ok((v2 - v1) / den)
}

/// Output impedance at one frequency, or one point of the curve across the band.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct ZoutPoint {
    pub frequency_hz: f64,
    pub zout_ohms: f64,
    pub damping_factor: f64,
}

/// The result of a two-load measurement.
#[derive(Debug, Clone, Serialize)]
pub struct ZoutResult {
    pub channel: usize,
    pub load_a_ohms: f64,
    pub load_b_ohms: f64,
    /// The load the damping factor refers to (the lower of the two, taken as the rated one).
    pub nominal_load_ohms: f64,
    /// At the tone's frequency, or at 1 kHz for sweeps.
    pub frequency_hz: f64,
    pub zout_ohms: f64,
    pub damping_factor: f64,
    /// Across the band (sweep captures only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub points: Vec<ZoutPoint>,
    pub warnings: Vec<String>,
}

/// Common-practice cautions and sanity checks on a result.
pub fn zout_warnings(load_a: f64, load_b: f64, z: f64) -> Vec<String> {
    let mut w = Vec::new();
    if load_a.max(load_b) > 100.0 * load_a.min(load_b) {
        w.push("one load is nearly an open circuit: never run a tube amplifier unloaded; use the rated load and about twice it".into());
    }
    if z < 0.0 {
        w.push("a negative output impedance: the readings are noisy or the loads were swapped; check which capture went with which load".into());
    }
    w
}

/// Build a result from the two voltages (any common unit) at one frequency.
pub fn from_levels(
    channel: usize,
    frequency_hz: f64,
    v_a: f64,
    load_a: f64,
    v_b: f64,
    load_b: f64,
) -> Result<ZoutResult> {
    let z = two_load(v_a, load_a, v_b, load_b)?;
    let nominal = load_a.min(load_b);
    Ok(ZoutResult {
        channel,
        load_a_ohms: load_a,
        load_b_ohms: load_b,
        nominal_load_ohms: nominal,
        frequency_hz,
        zout_ohms: z,
        damping_factor: nominal / z,
        points: Vec::new(),
        warnings: zout_warnings(load_a, load_b, z),
    })
}
