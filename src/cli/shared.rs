//! Flag groups several commands share: the rig, the calibration, where a run is kept.

use super::*;

/// Where the signal goes and comes from on a rig run, shared by every measuring command.
#[derive(Debug, Args)]
pub struct RigArgs {
    /// Measure on a rig instead of a capture file: sim[:MODEL] (the simulated bench; models
    /// stock, reworked, or a model file), card[:NAME] (the audio interface; needs a build
    /// with --features live) or spice:CIRCUIT.cir (a netlist defining `.subckt amp IN OUT`, run
    /// through the system's ngspice: a prediction). On a real amplifier: attenuator and dummy
    /// load first.
    #[arg(long, value_name = "KIND[:NAME]")]
    pub rig: Option<String>,
    /// Live rig: the audio host (alsa, jack, pulseaudio, ...; `ampnote devices` lists them).
    #[arg(long, value_name = "NAME")]
    pub host: Option<String>,
    /// Live rig: the input device, when it is not the output device.
    #[arg(long, value_name = "NAME")]
    pub input_device: Option<String>,
    /// Live rig: the interface output feeding each amplifier channel (1 for channel 1, ...).
    #[arg(long, default_value = "1,2", value_name = "LIST", value_delimiter = ',', value_parser = output_channel)]
    pub outputs: Vec<usize>,
    /// Live rig: the interface input reading each amplifier channel (through the attenuator).
    #[arg(long, default_value = "1,2", value_name = "LIST", value_delimiter = ',', value_parser = input_channel)]
    pub inputs: Vec<usize>,
    /// Live rig, JACK only: connect ampnote's outputs to its inputs (checks the rig itself,
    /// with no amplifier).
    #[arg(long)]
    pub self_patch: bool,
    /// Live rig: frames per buffer to ask the host for.
    #[arg(long, value_name = "FRAMES")]
    pub buffer: Option<u32>,
    /// Simulated bench: a capacitance across the dummy load, microfarads (a long cable or an
    /// electrostatic speaker), to see the ringing it causes with the transformer's leakage.
    #[arg(long, value_name = "UF")]
    pub load_uf: Option<f64>,
    /// Circuit rig: change one part for this run without editing the file, e.g.
    /// --set-part R7=470 --set-part C4=100u (resistors, capacitors, inductors; kept with the run).
    #[arg(long, value_name = "NAME=VALUE")]
    pub set_part: Vec<ampnote::rig::spice::rig::PartChange>,
    /// Where rig runs keep their stimulus and capture files (and partial captures).
    #[arg(long, default_value = "ampnote-captures", value_name = "DIR")]
    pub captures_dir: PathBuf,
}

impl RigArgs {
    /// The live settings, checked.
    pub fn options(&self, calibration: Calibration) -> Result<ampnote::rig::RigOptions, String> {
        Ok(ampnote::rig::RigOptions {
            host: self.host.clone(),
            input_device: self.input_device.clone(),
            outputs: self.outputs.clone(),
            inputs: self.inputs.clone(),
            self_patch: self.self_patch,
            buffer_frames: self.buffer,
            keep_dir: self.captures_dir.clone(),
            calibration,
            load_uf: self.load_uf,
            parts: self.set_part.clone(),
            test_drop_frames: 0,
        })
    }

    /// The rig the user named, if any. Its errors keep their kind (a device fault exits 3).
    pub fn open(
        &self,
        calibration: Calibration,
    ) -> Result<Option<Box<dyn ampnote::rig::Rig>>, ampnote::Error> {
        let Some(spec) = &self.rig else {
            return Ok(None);
        };
        let options = self
            .options(calibration)
            .map_err(ampnote::Error::InvalidSetting)?;
        ampnote::rig::parse_rig_with(spec, &options).map(Some)
    }
}

/// Keeping a run in a notebook, shared by every measuring command.
#[derive(Debug, Args)]
pub struct SaveArgs {
    /// Keep the run (stimulus, capture, result) in this notebook folder.
    #[arg(long, value_name = "DIR", requires = "label")]
    pub notebook: Option<PathBuf>,
    /// The run's label, e.g. stock or "after driver rework".
    #[arg(long, value_name = "LABEL", requires = "notebook")]
    pub label: Option<String>,
    /// A note kept with the run.
    #[arg(long, value_name = "TEXT", default_value = "")]
    pub note: String,
    /// A free-form setting kept with the run, e.g. --set mains=229V --set valves="set B".
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub settings: Vec<String>,
}

impl SaveArgs {
    /// The settings as a map; a setting without `=` is refused.
    pub fn settings_map(&self) -> Result<std::collections::BTreeMap<String, String>, String> {
        self.settings
            .iter()
            .map(|kv| {
                kv.split_once('=')
                    .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
                    .ok_or_else(|| format!("--set takes KEY=VALUE, got `{kv}`"))
            })
            .collect()
    }
}

/// Calibration flags shared by every analysing command.
#[derive(Debug, Args)]
pub struct CalibrationArgs {
    /// Calibration profile (TOML, see calibration/README.md); the flags below override it.
    #[arg(long, value_name = "FILE.toml")]
    pub profile: Option<PathBuf>,

    /// RMS voltage at the interface input that reads as a full-scale sine (0 dBFS).
    #[arg(long, value_name = "V")]
    pub input_fs_vrms: Option<f64>,

    /// Attenuator ratio: amplifier output voltage / interface input voltage (e.g. 10 for 20 dB).
    #[arg(long, value_name = "X")]
    pub attenuation: Option<f64>,

    /// Dummy-load resistance in ohms (gives watts).
    #[arg(long, value_name = "OHMS")]
    pub load_ohms: Option<f64>,

    /// RMS voltage of a full-scale sine at the interface output (gives absolute gain).
    #[arg(long, value_name = "V")]
    pub output_fs_vrms: Option<f64>,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum WeightingArg {
    None,
    A,
}

impl CalibrationArgs {
    /// The profile (if any) with the flags over it, checked.
    pub fn calibration(&self) -> Result<Calibration, String> {
        self.over(Calibration::default())
    }

    /// The calibration of a run that may be kept in a notebook: the notebook's own (its profile
    /// and load, copied in at `notebook init`) under the profile given here, under the flags.
    pub fn resolve(&self, save: &SaveArgs) -> Result<Calibration, String> {
        let base = match &save.notebook {
            Some(dir) => ampnote::notebook::Notebook::open(dir)
                .and_then(|nb| nb.calibration())
                .map_err(|e| e.to_string())?,
            None => Calibration::default(),
        };
        self.over(base)
    }

    /// `base` with the profile given here over it, then the flags.
    fn over(&self, notebook: Calibration) -> Result<Calibration, String> {
        let base = match &self.profile {
            Some(p) => Profile::load(p)
                .and_then(|p| p.calibration())
                .map_err(|e| e.to_string())?,
            None => Calibration::default(),
        };
        notebook
            .overridden_by(base)
            .overridden_by(Calibration {
                input_fs_vrms: self.input_fs_vrms,
                attenuation: self.attenuation,
                load_ohms: self.load_ohms,
                output_fs_vrms: self.output_fs_vrms,
                ..Calibration::default()
            })
            .validated()
            .map_err(|e| e.to_string())
    }
}

// --- flag values, parsed and checked by clap before a command runs ------------------------------
// Every value below is parsed with its `FromStr` (clap's `value_parser!` picks it up), so a typo
// in `--channel`, `--band` or `--freq` is a usage error before any file or rig is opened.

/// What the measuring commands that read a recording (or take one from a rig) share: the
/// calibration, how the result is printed, truncated files, and where the run is kept.
#[derive(Debug, Args)]
pub struct ReadingArgs {
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    #[command(flatten)]
    pub print: PrintArgs,
    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,
    #[command(flatten)]
    pub save: SaveArgs,
}

impl ReadingArgs {
    /// Checks the notebook, label and settings (before anything is played or read, so a typo
    /// costs no measurement), then gives the calibration the run uses.
    pub fn prepare(&self) -> Result<Calibration, crate::run::Failure> {
        crate::run::check_save(&self.save)?;
        Ok(self.calibration.resolve(&self.save)?)
    }
}

/// How a measuring command prints its result (the same two flags on every one).
#[derive(Debug, Args)]
pub struct PrintArgs {
    /// Print JSON instead of the table.
    #[arg(long, conflicts_with = "csv")]
    pub json: bool,
    /// Print CSV instead of the table (a row per channel; per step for power, per frequency for
    /// separation), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-")]
    pub csv: Option<PathBuf>,
}

impl PrintArgs {
    /// The output these flags ask for.
    pub fn format(&self) -> crate::run::Format<'_> {
        crate::run::Format::of(self.json, &self.csv)
    }
}
