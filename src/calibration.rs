//! From dBFS at the interface to volts at the amplifier output and watts into the load.
//!
//! 0 dBFS is the RMS of a full-scale sine (AES17). With the interface input's full-scale RMS voltage
//! `V_fs` (the RMS of the sine that just reaches full scale) and the attenuator's ratio
//! `attenuation = V_amplifier / V_interface`, a level `L` dBFS is
//! `V = 10^(L/20) * V_fs * attenuation` volts RMS at the amplifier output, and `P = V^2 / R_load`.
//! dBV is referred to 1 V RMS; dBu to 0.7746 V RMS (the voltage giving 1 mW in 600 ohm).

use crate::error::{Error, Result};

/// dBu reference: sqrt(0.001 W * 600 ohm) = 0.774597 V RMS.
pub const DBU_REFERENCE_VRMS: f64 = 0.774_596_669_241_483_4;

/// The figures that turn dBFS into volts and watts. All optional: without `input_fs_vrms` results
/// stay in dBFS; without `load_ohms` there are volts but no watts.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize, serde::Deserialize)]
pub struct Calibration {
    /// RMS voltage at the interface input that reads as a full-scale sine (0 dBFS).
    pub input_fs_vrms: Option<f64>,
    /// Amplifier output voltage divided by interface input voltage (1 without an attenuator).
    pub attenuation: Option<f64>,
    /// Dummy-load resistance in ohms.
    pub load_ohms: Option<f64>,
    /// RMS voltage of a full-scale sine at the interface output (what the amplifier is fed).
    pub output_fs_vrms: Option<f64>,
}

impl Calibration {
    /// Checks that every given figure is finite and positive.
    pub fn validated(self) -> Result<Self> {
        let check = |name: &str, v: Option<f64>| -> Result<()> {
            match v {
                Some(x) if !(x.is_finite() && x > 0.0) => Err(Error::InvalidSetting(format!(
                    "{name} must be a positive number, got {x}"
                ))),
                _ => Ok(()),
            }
        };
        check("--input-fs-vrms", self.input_fs_vrms)?;
        check("--attenuation", self.attenuation)?;
        check("--load-ohms", self.load_ohms)?;
        check("--output-fs-vrms", self.output_fs_vrms)?;
        if self.input_fs_vrms.is_none() && (self.attenuation.is_some() || self.load_ohms.is_some())
        {
            return Err(Error::InvalidSetting(
                "--attenuation and --load-ohms need --input-fs-vrms (the interface input's full-scale RMS voltage) to turn dBFS into volts".into(),
            ));
        }
        Ok(self)
    }

    /// True when volts can be computed.
    pub fn has_volts(&self) -> bool {
        self.input_fs_vrms.is_some()
    }

    /// RMS volts at the amplifier output for a level in dBFS.
    pub fn vrms_from_dbfs(&self, dbfs: f64) -> Option<f64> {
        self.input_fs_vrms
            .map(|fs| 10f64.powf(dbfs / 20.0) * fs * self.attenuation.unwrap_or(1.0))
    }

    /// Amplifier voltage gain in dB from a digital gain (capture dBFS minus stimulus dBFS), when
    /// both interface full scales are known: `g + 20 lg(V_in_fs * attenuation / V_out_fs)`.
    pub fn absolute_gain_db(&self, digital_gain_db: f64) -> Option<f64> {
        let (fs_in, fs_out) = (self.input_fs_vrms?, self.output_fs_vrms?);
        Some(digital_gain_db + 20.0 * (fs_in * self.attenuation.unwrap_or(1.0) / fs_out).log10())
    }

    /// Watts into the load for a level in dBFS.
    pub fn watts_from_dbfs(&self, dbfs: f64) -> Option<f64> {
        let v = self.vrms_from_dbfs(dbfs)?;
        self.load_ohms.map(|r| v * v / r)
    }
}

/// dBV of an RMS voltage.
pub fn dbv(vrms: f64) -> f64 {
    20.0 * vrms.log10()
}

/// dBu of an RMS voltage.
pub fn dbu(vrms: f64) -> f64 {
    20.0 * (vrms / DBU_REFERENCE_VRMS).log10()
}
