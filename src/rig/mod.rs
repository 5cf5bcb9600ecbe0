//! Rigs turn a stimulus into a capture: [`file::FileRig`] is the user's own player and recorder
//! (the capture arrives as a file), [`sim::SimRig`] the built-in simulated bench, and
//! `card::CardRig` (feature `live`) the audio interface. A procedure written against [`Rig`]
//! runs the same on all three.

#[cfg(feature = "live")]
pub mod card;
pub mod file;
pub mod framing;
pub mod model;
pub mod sim;
pub mod spice;
pub mod triode;

use crate::calibration::Calibration;
use crate::error::Result;

/// A dummy load a rig can switch to: above 0 ohm and finite.
pub fn checked_load(ohms: f64) -> Result<f64> {
    if ohms.is_finite() && ohms > 0.0 {
        Ok(ohms)
    } else {
        Err(crate::error::Error::InvalidSetting(format!(
            "the dummy load must be above 0 ohm, got {}",
            crate::error::shown(ohms)
        )))
    }
}

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
    /// capture of that channel's output at that rate: the simulated and live rigs return it
    /// aligned and of the same length, the file rig the recording as it is (see [`file`]).
    fn play_and_record(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>>;

    /// Whether the captures are predicted (a simulator run on the user's netlist) rather than
    /// measured; kept with every run, so a prediction is never read as a measurement.
    fn predicts(&self) -> bool {
        false
    }

    /// How many captures this rig takes at once: a simulator one per core; a bench with an
    /// amplifier on it, one (a procedure never plays a step it may not need on a real amplifier).
    fn parallel(&self) -> usize {
        1
    }

    /// One capture per stimulus of `stimuli`, in order, into amplifier channel `channel`; a rig
    /// whose [`Rig::parallel`] is more than one takes them at once, any other one after another.
    fn play_and_record_each(
        &mut self,
        channel: usize,
        stimuli: &[Vec<f64>],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        stimuli
            .iter()
            .map(|s| self.play_and_record(channel, s, sample_rate_hz))
            .collect()
    }

    /// One capture of `stimulus` into each of `loads` (ohms), in order; the rig is left on the
    /// last load. A bench switches its dummy load between captures ([`Rig::set_load`]); a
    /// simulator takes them all at once.
    fn play_and_record_loads(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
        loads: &[f64],
    ) -> Result<Vec<Vec<f64>>> {
        loads
            .iter()
            .map(|&r| {
                self.set_load(r)?;
                self.play_and_record(channel, stimulus, sample_rate_hz)
            })
            .collect()
    }

    /// Play `stimulus` into amplifier channel `channel` and record every channel's output at once
    /// (channel separation): one capture per amplifier channel, index 0 for channel 1, each
    /// aligned and of the stimulus's length like [`Rig::play_and_record`]'s. A rig that records
    /// one channel at a time refuses.
    fn play_and_record_all(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        let _ = (channel, stimulus, sample_rate_hz);
        Err(crate::error::Error::RecordsOneChannel {
            rig: self.describe(),
        })
    }

    /// Whether every capture shares one time base with the stimulus (the simulated bench and the
    /// live rig align each capture to what they played), so phases of two captures can be set
    /// against each other. Separate recordings do not: their relative timing is unknown.
    fn shares_clock(&self) -> bool {
        true
    }

    /// What the rig noticed on `channel` since the last call (a retried capture, clock drift),
    /// for the result's warnings.
    fn take_notes(&mut self, channel: usize) -> Vec<crate::warning::Warning> {
        let _ = channel;
        Vec::new()
    }

    /// Play `table` (a whole number of periods) over and over into `channel` and hand `look` the
    /// latest `window` captured samples, again and again, until it returns false or Ctrl-C. The
    /// default plays a fresh stretch each time (fine for a bench that has no clock of its own);
    /// a live rig streams and calls back every `hop` new samples.
    fn watch(
        &mut self,
        channel: usize,
        table: &[f64],
        sample_rate_hz: u32,
        window: usize,
        hop: usize,
        look: &mut dyn FnMut(&[f64]) -> bool,
    ) -> Result<()> {
        // A bench faster than real time is paced to one reading per `hop` samples.
        let period = std::time::Duration::from_secs_f64(hop as f64 / sample_rate_hz as f64);
        let start = std::time::Instant::now();
        let settle = window / 4;
        let mut pos = 0;
        for k in 1u32.. {
            let due = start + period * k;
            let now = std::time::Instant::now();
            if due > now {
                std::thread::sleep(due - now);
            }
            let chunk: Vec<f64> = (0..settle + window)
                .map(|i| table[(pos + i) % table.len()])
                .collect();
            pos = (pos + settle + window) % table.len();
            let y = self.play_and_record(channel, &chunk, sample_rate_hz)?;
            if interrupted() || !look(&y[settle..]) {
                return Ok(());
            }
        }
        Ok(())
    }
}

static INTERRUPTED: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// Catch Ctrl-C from now on: the first press asks the run to stop cleanly (output silenced first,
/// what was captured kept); a second press leaves at once.
pub fn catch_interrupt() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        let _ = ctrlc::set_handler(|| {
            if INTERRUPTED.swap(true, std::sync::atomic::Ordering::Relaxed) {
                std::process::exit(130);
            }
        });
    });
}

/// Whether Ctrl-C was pressed since [`catch_interrupt`].
pub fn interrupted() -> bool {
    INTERRUPTED.load(std::sync::atomic::Ordering::Relaxed)
}

/// How a live rig is set up (ignored by the simulated bench).
#[derive(Debug, Clone)]
pub struct RigOptions {
    /// Audio host (alsa, jack, ...); the system's default when `None`.
    pub host: Option<String>,
    /// Input device when it is not the output device.
    pub input_device: Option<String>,
    /// Interface output and input channel (1-based) for each amplifier channel.
    pub outputs: Vec<usize>,
    pub inputs: Vec<usize>,
    /// JACK: connect ampnote's outputs to its inputs (checking the rig with no amplifier).
    pub self_patch: bool,
    /// Frames per buffer to ask for (the host's default when `None`).
    pub buffer_frames: Option<u32>,
    /// Where partial captures are kept.
    pub keep_dir: std::path::PathBuf,
    /// The user's calibration (profile and flags).
    pub calibration: Calibration,
    /// The simulated bench only: a capacitance across the dummy load, microfarads.
    pub load_uf: Option<f64>,
    /// The circuit rig only: parts changed for this run.
    pub parts: Vec<spice::rig::PartChange>,
    /// For tests of the gap detection only: the live rig throws away this many input frames
    /// once, half way through the first stimulus after the pre-flight (0: never).
    pub test_drop_frames: usize,
}

impl Default for RigOptions {
    fn default() -> Self {
        RigOptions {
            host: None,
            input_device: None,
            outputs: vec![1, 2],
            inputs: vec![1, 2],
            self_patch: false,
            buffer_frames: None,
            keep_dir: "ampnote-captures".into(),
            calibration: Calibration::default(),
            load_uf: None,
            parts: Vec::new(),
            test_drop_frames: 0,
        }
    }
}

/// Parse `--rig sim[:MODEL]` with default live settings.
pub fn parse_rig(spec: &str) -> Result<Box<dyn Rig>> {
    parse_rig_with(spec, &RigOptions::default())
}

/// Parse `--rig sim[:MODEL]` (the model name or file, default `stock`) or `--rig card[:NAME]`
/// (the audio interface, by name or the default one; needs the `live` feature).
pub fn parse_rig_with(spec: &str, options: &RigOptions) -> Result<Box<dyn Rig>> {
    let (kind, arg) = spec.split_once(':').unwrap_or((spec, ""));
    if !options.parts.is_empty() && kind != "spice" {
        return Err(crate::error::Error::InvalidSetting(
            "--set-part changes a part of a netlist: use it with --rig spice:CIRCUIT.cir".into(),
        ));
    }
    match kind {
        "sim" => {
            let name = if arg.is_empty() { "stock" } else { arg };
            let rig = sim::SimRig::new(model::Model::load(name)?)
                .with_load_capacitance(options.load_uf.unwrap_or(0.0))?;
            Ok(Box::new(rig))
        }
        #[cfg(feature = "live")]
        "card" if options.load_uf.is_some() => Err(crate::error::Error::InvalidSetting(
            "--load-uf sets the simulated bench's load; on a real bench, connect the capacitor across the dummy load (amplifier off)".into(),
        )),
        #[cfg(feature = "live")]
        "card" => {
            let name = (!arg.is_empty()).then_some(arg);
            Ok(Box::new(card::CardRig::open(name, options)?))
        }
        #[cfg(not(feature = "live"))]
        "card" => {
            let _ = options;
            Err(crate::error::Error::InvalidSetting(
                "the live rig (`--rig card`) needs a build with the `live` feature: `cargo install --path . --features live` (see README, Live rig); meanwhile record with any recorder and analyse the file, or use --rig sim".into(),
            ))
        }
        "spice" if arg.is_empty() => Err(crate::error::Error::InvalidSetting(
            "--rig spice needs the netlist: --rig spice:CIRCUIT.cir (a file defining `.subckt amp IN OUT`; see examples/circuits/)".into(),
        )),
        "spice" if options.load_uf.is_some() => Err(crate::error::Error::InvalidSetting(
            "--load-uf sets the simulated bench's load; in a netlist, put the capacitor in the circuit".into(),
        )),
        "spice" => Ok(Box::new(spice::rig::SpiceRig::open_with(
            std::path::Path::new(arg),
            &options.parts,
            options.calibration,
            &options.keep_dir.join("spice"),
        )?)),
        other => Err(crate::error::Error::InvalidSetting(format!(
            "unknown rig `{other}`: use sim[:MODEL] (the simulated bench), card[:NAME] (the audio interface), spice:CIRCUIT.cir (a netlist through ngspice), or analyse a capture file"
        ))),
    }
}
