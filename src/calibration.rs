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
    /// The interface's own loopback THD+N (dB) and noise (dBFS): readings within 10 dB of these
    /// measure the interface, not the amplifier.
    pub loopback_thdn_db: Option<f64>,
    pub loopback_noise_dbfs: Option<f64>,
}

impl Calibration {
    /// Checks every given figure against one rule set, shared by the flags and the profile (each
    /// message names both): finite, and within what a bench can have. The ranges are wide on
    /// purpose (they catch typos and units off by a thousand, not unusual benches): interface full
    /// scales 1 mV to 1 kV RMS, an attenuator ratio 1 (none) to 100 000 (a resistive divider
    /// cannot raise the voltage), a load 0.1 ohm to 100 kohm, loopback figures -250 to 0 dB.
    pub fn validated(self) -> Result<Self> {
        let check = |names: &str, unit: &str, v: Option<f64>, lo: f64, hi: f64| -> Result<()> {
            match v {
                Some(x) if !(x.is_finite() && x >= lo && x <= hi) => {
                    Err(Error::InvalidSetting(format!(
                        "{names} must lie between {lo} and {hi} {unit}, got {}",
                        crate::error::shown(x)
                    )))
                }
                _ => Ok(()),
            }
        };
        check(
            "--input-fs-vrms ([interface] input_fs_vrms)",
            "V",
            self.input_fs_vrms,
            1e-3,
            1e3,
        )?;
        check(
            "--output-fs-vrms ([interface] output_fs_vrms)",
            "V",
            self.output_fs_vrms,
            1e-3,
            1e3,
        )?;
        check(
            "--attenuation ([attenuator] ratio; a resistive attenuator cannot raise the voltage, so at least 1)",
            "(amplifier volts / interface volts)",
            self.attenuation,
            1.0,
            1e5,
        )?;
        check("--load-ohms ([load] ohms)", "ohm", self.load_ohms, 0.1, 1e5)?;
        check(
            "[loopback] thdn_db",
            "dB",
            self.loopback_thdn_db,
            -250.0,
            0.0,
        )?;
        check(
            "[loopback] noise_dbfs",
            "dBFS",
            self.loopback_noise_dbfs,
            -250.0,
            0.0,
        )?;
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

/// A calibration profile as stored in TOML (format: `calibration/README.md`). Every section and
/// value is optional; unknown keys are refused, so a typo cannot pass silently.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    pub name: Option<String>,
    pub interface: Option<InterfaceSection>,
    pub attenuator: Option<AttenuatorSection>,
    pub load: Option<LoadSection>,
    pub loopback: Option<LoopbackSection>,
}

#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InterfaceSection {
    pub output_fs_vrms: Option<f64>,
    pub input_fs_vrms: Option<f64>,
}

/// The attenuator: its measured ratio, or the divider's resistors and the interface's input
/// impedance (which loads the bottom resistor).
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AttenuatorSection {
    pub ratio: Option<f64>,
    pub r_top_ohms: Option<f64>,
    pub r_bottom_ohms: Option<f64>,
    pub interface_input_ohms: Option<f64>,
}

#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoadSection {
    pub ohms: Option<f64>,
}

/// The interface measuring itself (output looped to input).
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoopbackSection {
    pub thdn_db: Option<f64>,
    pub noise_dbfs: Option<f64>,
    /// Optional loopback response for correction: `[frequency_hz, magnitude_db]` pairs.
    pub response: Option<Vec<[f64; 2]>>,
}

/// Voltage ratio of a resistive divider loaded by the interface input:
/// `(R_top + R_b) / R_b` with `R_b = R_bottom || Z_in` (Ohm's law).
pub fn divider_ratio(r_top: f64, r_bottom: f64, input_ohms: Option<f64>) -> f64 {
    let rb = match input_ohms {
        Some(z) => r_bottom * z / (r_bottom + z),
        None => r_bottom,
    };
    (r_top + rb) / rb
}

impl Profile {
    /// Read and check a profile.
    pub fn load(path: &std::path::Path) -> Result<Profile> {
        let text = std::fs::read_to_string(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        Self::parse(&text, path)
    }

    pub fn parse(text: &str, path: &std::path::Path) -> Result<Profile> {
        let bad = |detail: String| Error::BadProfile {
            path: path.to_path_buf(),
            detail,
        };
        let p: Profile = toml::from_str(text).map_err(|e| bad(e.to_string().trim().to_string()))?;
        p.calibration().map_err(|e| match e {
            Error::InvalidSetting(d) => bad(d),
            other => other,
        })?;
        Ok(p)
    }

    /// The calibration this profile describes (checked).
    pub fn calibration(&self) -> Result<Calibration> {
        let iface = self.interface.clone().unwrap_or_default();
        let att = self.attenuator.clone().unwrap_or_default();
        let attenuation = match (att.ratio, att.r_top_ohms, att.r_bottom_ohms) {
            (Some(_), Some(_), _) | (Some(_), _, Some(_)) => {
                return Err(Error::InvalidSetting(
                    "[attenuator] gives both a ratio and resistor values; keep one".into(),
                ))
            }
            (Some(r), None, None) => Some(r),
            (None, Some(top), Some(bottom)) => {
                let input = att.interface_input_ohms;
                for (name, v) in [
                    ("r_top_ohms", Some(top)),
                    ("r_bottom_ohms", Some(bottom)),
                    ("interface_input_ohms", input),
                ] {
                    if let Some(v) = v.filter(|v| !(v.is_finite() && *v >= 1.0 && *v <= 1e9)) {
                        return Err(Error::InvalidSetting(format!(
                            "[attenuator] {name} must lie between 1 ohm and 1 Gohm, got {}",
                            crate::error::shown(v)
                        )));
                    }
                }
                Some(divider_ratio(top, bottom, att.interface_input_ohms))
            }
            (None, None, None) => None,
            _ => {
                return Err(Error::InvalidSetting(
                    "[attenuator] needs both r_top_ohms and r_bottom_ohms".into(),
                ))
            }
        };
        if let Some(resp) = self.loopback.as_ref().and_then(|l| l.response.as_ref()) {
            if resp
                .iter()
                .any(|[f, db]| !(f.is_finite() && *f > 0.0 && db.is_finite()))
            {
                return Err(Error::InvalidSetting(
                    "[loopback] response takes [frequency_hz, magnitude_db] pairs with frequencies above 0".into(),
                ));
            }
        }
        if let Some(r) = attenuation {
            if r < 1.0 {
                return Err(Error::InvalidSetting(format!(
                    "[attenuator] ratio {r} is below 1: a resistive attenuator cannot raise the voltage (ratio = amplifier volts / interface volts)"
                )));
            }
        }
        let loop_ = self.loopback.clone().unwrap_or_default();
        Calibration {
            input_fs_vrms: iface.input_fs_vrms,
            output_fs_vrms: iface.output_fs_vrms,
            attenuation,
            load_ohms: self.load.as_ref().and_then(|l| l.ohms),
            loopback_thdn_db: loop_.thdn_db,
            loopback_noise_dbfs: loop_.noise_dbfs,
        }
        .validated()
    }

    /// The profile as TOML text.
    pub fn to_toml(&self) -> String {
        toml::to_string_pretty(self).expect("profile serializes")
    }
}

impl Calibration {
    /// `self` with every value `over` gives replacing the one here (flags over a profile).
    pub fn overridden_by(self, over: Calibration) -> Calibration {
        Calibration {
            input_fs_vrms: over.input_fs_vrms.or(self.input_fs_vrms),
            attenuation: over.attenuation.or(self.attenuation),
            load_ohms: over.load_ohms.or(self.load_ohms),
            output_fs_vrms: over.output_fs_vrms.or(self.output_fs_vrms),
            loopback_thdn_db: over.loopback_thdn_db.or(self.loopback_thdn_db),
            loopback_noise_dbfs: over.loopback_noise_dbfs.or(self.loopback_noise_dbfs),
        }
    }

    /// Peak voltage at the interface input when the amplifier delivers `watts` into the load:
    /// `sqrt(2 P R) / attenuation`. `None` without a load.
    pub fn input_peak_at_power(&self, watts: f64) -> Option<f64> {
        let r = self.load_ohms?;
        Some((2.0 * watts * r).sqrt() / self.attenuation.unwrap_or(1.0))
    }

    /// Peak voltage of the interface input's full scale, `sqrt 2 * V_fs`.
    pub fn input_full_scale_peak(&self) -> Option<f64> {
        self.input_fs_vrms.map(|v| v * std::f64::consts::SQRT_2)
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
