//! Rigs turn a stimulus into a capture. `file` is the user's own player and recorder (the capture
//! arrives as a WAV file); `sim` is the built-in simulated bench ([`sim::SimRig`]).

pub mod framing;
pub mod model;
pub mod sim;
pub mod triode;

use crate::calibration::Calibration;
use crate::error::Result;

/// Something that can play a stimulus into the amplifier and record its output.
pub trait Rig {
    /// A line saying what the rig is.
    fn describe(&self) -> String;
    /// The calibration that goes with the rig.
    fn calibration(&self) -> Calibration;
    /// Amplifier channels the rig can measure.
    fn channels(&self) -> usize;
    /// Magnitude at or beyond which a captured sample counts as overload.
    fn overload_threshold(&self) -> f64;
    /// Word length of the capture, for resolution-floor warnings.
    fn resolution_bits(&self) -> u32;
    /// Switch the dummy load (the simulated bench does it itself; a real bench asks the user).
    fn set_load(&mut self, ohms: f64) -> Result<()>;
    /// Play `stimulus` (full scale 1.0) into amplifier channel `channel` (1-based) and return the
    /// capture of that channel's output, same length and rate.
    fn play_and_record(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>>;
}

/// Parse `--rig sim[:MODEL]`: the model name or file (default `stock`).
pub fn parse_rig(spec: &str) -> Result<Box<dyn Rig>> {
    let (kind, arg) = spec.split_once(':').unwrap_or((spec, ""));
    match kind {
        "sim" => {
            let name = if arg.is_empty() { "stock" } else { arg };
            Ok(Box::new(sim::SimRig::new(model::Model::load(name)?)))
        }
        "card" => Err(crate::error::Error::InvalidSetting(
            "the live rig (`--rig card`) needs the `live` feature, which this build does not have yet; record with any recorder and analyse the file, or use --rig sim".into(),
        )),
        other => Err(crate::error::Error::InvalidSetting(format!(
            "unknown rig `{other}`: use sim[:MODEL] (the simulated bench) or analyse a capture file"
        ))),
    }
}
