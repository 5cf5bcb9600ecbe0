//! Typed read-back of stored results: the fields the comparison and the match check use, read
//! with serde from a run's `result.json` (of this schema or the one before), never picked out of
//! the JSON by key. A result that does not parse as the view asked for is treated as absent.

use serde::de::DeserializeOwned;
use serde::Deserialize;
use serde_json::Value;

/// Read `v` as `T`; `None` when it is not one.
pub fn view<T: DeserializeOwned>(v: &Value) -> Option<T> {
    T::deserialize(v).ok()
}

/// A tone run.
#[derive(Debug, Clone, Deserialize)]
pub struct ToneView {
    pub fundamental_hz: f64,
    pub fundamental_dbfs: f64,
    #[serde(default)]
    pub fundamental_vrms: Option<f64>,
    #[serde(default)]
    pub output_w: Option<f64>,
    /// `null` when not measurable (schema 2); a number in schema 1.
    #[serde(default)]
    pub thd_percent: Option<f64>,
    #[serde(default)]
    pub thd_upper_bound: bool,
    pub thdn_percent: f64,
    #[serde(default)]
    pub harmonics: Vec<LineView>,
    pub noise_dbfs: f64,
    #[serde(default)]
    pub hum: Vec<LineView>,
}

/// A harmonic or hum line: its level, and whether that level is only a detection limit.
#[derive(Debug, Clone, Deserialize)]
pub struct LineView {
    #[serde(default)]
    pub order: usize,
    pub level_dbc: f64,
    /// `at_noise_floor` in schema 1.
    #[serde(default, alias = "at_noise_floor")]
    pub upper_bound: bool,
    #[serde(default = "yes")]
    pub in_band: bool,
}

fn yes() -> bool {
    true
}

/// A staircase run.
#[derive(Debug, Clone, Deserialize)]
pub struct PowerView {
    pub frequency_hz: f64,
    pub steps: Vec<StepView>,
    pub power_at_thd: Vec<PowerAtView>,
}

#[derive(Debug, Clone, Deserialize)]
pub struct StepView {
    #[serde(default)]
    pub output_w: Option<f64>,
    #[serde(default)]
    pub thd_percent: Option<f64>,
    #[serde(default)]
    pub thd_upper_bound: bool,
    #[serde(default)]
    pub excluded: bool,
}

#[derive(Debug, Clone, Deserialize)]
pub struct PowerAtView {
    pub thd_percent: f64,
    #[serde(default)]
    pub output_w: Option<f64>,
    pub output_dbfs: f64,
}

/// A response run.
#[derive(Debug, Clone, Deserialize)]
pub struct ResponseView {
    pub reference_gain_db: f64,
    pub points: Vec<PointView>,
    #[serde(default)]
    pub low_3db_hz: Option<f64>,
    #[serde(default)]
    pub high_3db_hz: Option<f64>,
    pub max_deviation_db: f64,
    #[serde(default)]
    pub harmonics: Vec<CurveView>,
}

#[derive(Debug, Clone, Deserialize)]
pub struct PointView {
    pub frequency_hz: f64,
    pub magnitude_db: f64,
    #[serde(default)]
    pub phase_deg: f64,
}

#[derive(Debug, Clone, Deserialize)]
pub struct CurveView {
    pub order: usize,
    pub points: Vec<CurvePointView>,
}

#[derive(Debug, Clone, Deserialize)]
pub struct CurvePointView {
    pub frequency_hz: f64,
    pub level_dbc: f64,
}

/// A noise run.
#[derive(Debug, Clone, Deserialize)]
pub struct NoiseView {
    pub noise_dbfs: f64,
    pub noise_a_dbfs: f64,
    pub hum_and_noise_dbfs: f64,
    #[serde(default)]
    pub snr_a_re_1w_db: Option<f64>,
}

/// An output-impedance run.
#[derive(Debug, Clone, Deserialize)]
pub struct ZoutView {
    pub zout_ohms: f64,
    #[serde(default)]
    pub zout_sigma_ohms: Option<f64>,
    pub damping_factor: f64,
}

/// An intermodulation run.
#[derive(Debug, Clone, Deserialize)]
pub struct ImdView {
    pub low_hz: f64,
    pub high_hz: f64,
    #[serde(default)]
    pub imd_percent: Option<f64>,
    #[serde(default)]
    pub dd2_percent: Option<f64>,
    #[serde(default)]
    pub dd3_percent: Option<f64>,
}

impl ImdView {
    /// One line: the total (modulation method) or d2 and d3 (difference-frequency).
    pub fn headline(&self) -> String {
        match (self.imd_percent, self.dd2_percent, self.dd3_percent) {
            (Some(t), _, _) => {
                format!("IMD {t:.3} % ({:.0} + {:.0} Hz)", self.low_hz, self.high_hz)
            }
            (None, Some(d2), Some(d3)) => format!(
                "d2 {d2:.4} %, d3 {d3:.4} % ({:.0} + {:.0} Hz)",
                self.low_hz, self.high_hz
            ),
            _ => format!("IMD ({:.0} + {:.0} Hz)", self.low_hz, self.high_hz),
        }
    }
}
