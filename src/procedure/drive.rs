//! The drive that gives a set power: "THD at 1 W" is how bench results are logged, so a rig run
//! can ask for watts into the load instead of a drive level in dBFS.
//!
//! A short probe tone well below any clipping (-40 dBFS) gives the chain's gain; the drive for
//! the target follows from it (power goes as the square of the drive while the amplifier is
//! linear), and one confirming tone at that drive corrects for any compression on the way up.

use crate::analysis::tone::{ToneAnalyzer, ToneConfig};
use crate::error::{Error, Result};
use crate::procedure::power::{check_input_headroom, tone_on_rig};
use crate::rig::Rig;

/// The probe's drive: far below where any power amplifier with a line-level input clips.
pub const PROBE_DBFS: f64 = -40.0;

/// A miss of the target beyond this (0.2 dB, the scatter of a bench reading of a tube amplifier's
/// level from one minute to the next; common practice) is said with the result.
pub const TOLERANCE_DB: f64 = 0.2;

/// The confirming tone's miss is corrected once when it passes this (0.01 dB: so "1 W" reads
/// 1.00 W, not 995 mW).
const CORRECT_ABOVE_DB: f64 = 0.01;

/// A correction larger than this (3 dB) is not applied: the amplifier is then far from linear
/// (clipping or a fault), and driving harder to chase the target is not safe.
const MAX_CORRECTION_DB: f64 = 3.0;

/// What the search found on one channel.
#[derive(Debug, Clone, Copy)]
pub struct DriveForPower {
    pub drive_dbfs: f64,
    /// Watts the probe read at [`PROBE_DBFS`].
    pub probe_w: f64,
    /// Watts the confirming tone read at `drive_dbfs`.
    pub confirmed_w: f64,
    /// The load the watts are into.
    pub load_ohms: f64,
}

impl DriveForPower {
    /// One line for the user: the drive found, the power it gives, and into what.
    pub fn describe(&self, asked_w: f64) -> String {
        format!(
            "{:.2} dBFS of drive gives {:.3} W into {} ohm (asked {asked_w} W; the {PROBE_DBFS} dBFS probe read {:.3e} W)",
            self.drive_dbfs, self.confirmed_w, self.load_ohms, self.probe_w
        )
    }
}

/// Find the drive (dBFS at the interface output) that gives `watts` into the rig's load from
/// `channel`, with a tone at `frequency_hz`. Needs a calibration with volts and a load, and an
/// interface input that survives `watts`.
pub fn drive_for_power(
    rig: &mut dyn Rig,
    channel: usize,
    frequency_hz: f64,
    rate: u32,
    watts: f64,
) -> Result<DriveForPower> {
    if !(watts.is_finite() && watts > 0.0) {
        return Err(Error::InvalidSetting(format!(
            "--watts takes a power above 0 W, got {watts}"
        )));
    }
    let cal = rig.calibration();
    if !cal.has_volts() || cal.load_ohms.is_none() {
        return Err(Error::InvalidSetting(
            "--watts needs the calibration (interface input full scale, attenuation and load) to know what a watt reads; give --profile or the flags, or use --level".into(),
        ));
    }
    check_input_headroom(&cal, watts)?;
    let analyzer = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: Some(frequency_hz),
        ..ToneConfig::default()
    })?;
    // A quarter second to settle, a quarter second analysed.
    let quarter = (0.25 * rate as f64) as usize;
    let power_at = |rig: &mut dyn Rig, drive: f64| -> Result<f64> {
        let r = tone_on_rig(
            rig,
            channel,
            &analyzer,
            &cal,
            (frequency_hz, rate),
            drive,
            (quarter, quarter),
        )?;
        Ok(r.output_w.expect("calibrated with a load"))
    };
    let probe_w = power_at(rig, PROBE_DBFS)?;
    let mut drive = PROBE_DBFS + 10.0 * (watts / probe_w).log10();
    let full_scale_w = probe_w * 10f64.powf(-PROBE_DBFS / 10.0);
    let out_of_reach = |drive: f64| Error::PowerOutOfReach {
        watts,
        channel,
        drive_dbfs: drive,
        probe_dbfs: PROBE_DBFS,
        probe_w,
        full_scale_w,
    };
    if drive > 0.0 {
        return Err(out_of_reach(drive));
    }
    let mut confirmed_w = power_at(rig, drive)?;
    let miss_db = 10.0 * (watts / confirmed_w).log10();
    if miss_db.abs() > CORRECT_ABOVE_DB && miss_db.abs() <= MAX_CORRECTION_DB {
        drive += miss_db;
        if drive > 0.0 {
            return Err(out_of_reach(drive));
        }
        confirmed_w = power_at(rig, drive)?;
    }
    Ok(DriveForPower {
        drive_dbfs: drive,
        probe_w,
        confirmed_w,
        load_ohms: cal.load_ohms.expect("checked above"),
    })
}

/// `signal` made at `from_dbfs` brought to `to_dbfs` (a plain gain: every stimulus is linear in
/// its amplitude).
pub fn rescaled(signal: &[f64], from_dbfs: f64, to_dbfs: f64) -> Vec<f64> {
    let g = 10f64.powf((to_dbfs - from_dbfs) / 20.0);
    signal.iter().map(|v| v * g).collect()
}
