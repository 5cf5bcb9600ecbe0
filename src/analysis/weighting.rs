//! Frequency weightings applied to noise figures.

use serde::Serialize;

/// Which weighting a noise figure carries.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Weighting {
    /// Flat across the measurement band.
    #[default]
    None,
    /// IEC 61672-1 A-weighting.
    A,
}

impl Weighting {
    /// Power gain (linear, `|H|^2`) at `f_hz`.
    pub fn power_gain(self, f_hz: f64) -> f64 {
        match self {
            Weighting::None => 1.0,
            Weighting::A => a_weighting_power(f_hz),
        }
    }

    pub fn label(self) -> &'static str {
        match self {
            Weighting::None => "unweighted",
            Weighting::A => "A-weighted",
        }
    }
}

// IEC 61672-1:2013, Annex E, eq. (E.1)-(E.6): pole frequencies in Hz.
const F1: f64 = 20.598_997;
const F2: f64 = 107.652_65;
const F3: f64 = 737.862_23;
const F4: f64 = 12_194.217;
/// IEC 61672-1 Annex E: A_1000 = -2.000 dB normalises the weighting to 0 dB at 1 kHz.
const A1000_DB: f64 = -2.000;

/// A-weighting in dB at `f_hz` (IEC 61672-1:2013 Annex E).
pub fn a_weighting_db(f_hz: f64) -> f64 {
    10.0 * a_weighting_power(f_hz).log10()
}

/// A-weighting as a linear power gain.
pub fn a_weighting_power(f_hz: f64) -> f64 {
    let f2 = f_hz * f_hz;
    // R_A(f)^2 with R_A = F4^2 f^4 / ((f^2+F1^2) sqrt((f^2+F2^2)(f^2+F3^2)) (f^2+F4^2))
    let num = F4.powi(4) * f2 * f2 * f2 * f2;
    let den = (f2 + F1 * F1).powi(2) * (f2 + F2 * F2) * (f2 + F3 * F3) * (f2 + F4 * F4).powi(2);
    if den == 0.0 {
        return 0.0;
    }
    num / den * 10f64.powf(-A1000_DB / 10.0)
}
