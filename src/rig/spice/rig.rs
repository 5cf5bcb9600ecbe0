//! The circuit rig: every procedure run on the user's netlist through ngspice.
//!
//! The netlist convention: the file defines `.subckt amp IN OUT` (the amplifier from its input
//! to its output terminal, supplies and all inside; node names are the user's). ampnote adds the
//! interface output driving IN, the dummy load from OUT to ground, and reads OUT through the
//! calibration's attenuator and interface input.
//!
//! What the simulator sees, and how the capture is read back, so that the rig adds nothing of
//! its own:
//! - The stimulus is upsampled k times ([`oversample_for`]: 4, 8 or 16) in the frequency domain (band-limited) and
//!   handed to an XSPICE `filesource`, which interpolates linearly between its points wherever
//!   the simulator evaluates it: that is the samples convolved with a triangle, a response of
//!   sinc^2(f T) on the band, which the upsampled stimulus is divided by beforehand (exactly).
//! - The time step is held at most one stimulus point (`TMAX`), and the output is read at the
//!   capture's sample times by cubic interpolation through the simulator's own points (they lie
//!   at most one stimulus point apart, h = 1/(k fs): the interpolation error is (2 pi f h)^4 / 384
//!   of a component at f, 2e-7 at 20 kHz with k = 16 at 48 kHz).
//! - The trapezoidal rule is the bilinear transform: a linear circuit stepped at h answers at f
//!   as the real one does at tan(pi f h) / (pi h), (pi f h)^2 / 3 higher; the same quantity is,
//!   in size, the rule's error on a component at f relative to that component. k is chosen from
//!   the stimulus's spectrum: the warping under 0.25 % at its top frequency, and the error
//!   weighted by each component's level under 2.5e-5 (-92 dB), or k = 16: a 1 kHz tone at
//!   48 kHz runs at k = 8, a sweep to 20 kHz at k = 16 (warping 0.22 %).
//!   Measured on the example amplifier at 1 W (examples/circuits/stock.cir, against a
//!   many-period DFT of a 1 us-step ngspice transient): k = 4 (8.9e-5) left H4 at -80 dBc
//!   0.10 dB off and H3 0.025 dB; k = 8 reads H2..H5 within 0.007 dB.
//! - The DC operating point comes first (ngspice's default), so coupling capacitors start
//!   charged; noise and hum are whatever sources the netlist itself has (none, usually: a
//!   predicted noise figure is then the interface's floor only, and the result says so).

use super::run;
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::warning::{Warning, WarningCode};
use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::time::Duration;

/// The fewest stimulus points per capture sample handed to the simulator.
pub const OVERSAMPLE_MIN: usize = 4;
/// The most.
pub const OVERSAMPLE_MAX: usize = 16;
/// The trapezoidal rule's frequency warping, (pi f h)^2 / 3, allowed at the stimulus's top
/// frequency (0.25 %, our choice: 0.01 dB on a first-order corner there).
const WARPING_LIMIT: f64 = 0.0025;
/// The rule's error on the stimulus's components, (pi f h)^2 / 3 times each one's level
/// relative to the strongest, allowed at the worst: 2.5e-5, -92 dB, so that harmonics a
/// prediction is read for (down to about -90 dBc) are not the rule's own (our choice, from the
/// measurement in the module's notes).
const STEP_ERROR_LIMIT: f64 = 2.5e-5;

/// Stimulus points per sample (4, 8 or 16) for `stimulus` at `fs`: the fewest that keep, with
/// h = 1 / (k fs), the warping (pi f h)^2 / 3 under [`WARPING_LIMIT`] at the stimulus's top
/// frequency (its highest component within 80 dB of its strongest) and the error weighted by
/// level under [`STEP_ERROR_LIMIT`] at every frequency; at most 16.
pub fn oversample_for(stimulus: &[f64], fs: f64) -> usize {
    let spectrum = relative_spectrum(stimulus, fs);
    if spectrum.is_empty() {
        // Silence (a noise measurement): nothing to step through, so the fewest points.
        return OVERSAMPLE_MIN;
    }
    let top = spectrum
        .iter()
        .rev()
        .find(|(_, m)| *m >= 1e-4)
        .map_or(fs / 2.0, |(f, _)| *f);
    // The level-weighted error at its worst for a unit h: max of m (pi f)^2 / 3.
    let weighted = spectrum
        .iter()
        .map(|(f, m)| m * (PI * f).powi(2) / 3.0)
        .fold(0.0, f64::max);
    let ok = |k: usize| {
        let h = 1.0 / (k as f64 * fs);
        (PI * top * h).powi(2) / 3.0 <= WARPING_LIMIT && weighted * h * h <= STEP_ERROR_LIMIT
    };
    let mut k = OVERSAMPLE_MIN;
    while k < OVERSAMPLE_MAX && !ok(k) {
        k *= 2;
    }
    k
}

/// `x`'s magnitude spectrum as (frequency, level relative to the strongest bin); empty for a
/// signal with nothing in it. A stimulus too short to have a spectrum reads as every frequency
/// at full level (the safe side: the most points).
fn relative_spectrum(x: &[f64], fs: f64) -> Vec<(f64, f64)> {
    if x.len() < 2 {
        return vec![(fs / 2.0, 1.0)];
    }
    let n = x.len() + x.len() % 2;
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n);
    let mut buf = vec![0.0; n];
    buf[..x.len()].copy_from_slice(x);
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("sizes match the plan");
    let mags: Vec<f64> = spec.iter().map(|c| c.norm()).collect();
    let peak = mags.iter().cloned().fold(0.0, f64::max);
    if peak == 0.0 {
        return Vec::new();
    }
    mags.iter()
        .enumerate()
        .map(|(i, m)| (i as f64 * fs / n as f64, m / peak))
        .collect()
}

/// The circuit rig.
pub struct SpiceRig {
    /// The netlist the deck includes: the user's file, or its copy with the parts changed.
    netlist: PathBuf,
    /// The user's file, and the parts changed for this run.
    source: PathBuf,
    changes: Vec<PartChange>,
    calibration: Calibration,
    load_ohms: f64,
    /// 1 (`.subckt amp IN OUT`) or 2 (`.subckt amp IN1 IN2 OUT1 OUT2`).
    channels: usize,
    /// This rig's own folder for its decks, drive files and ngspice's output (one per rig, so
    /// two runs at once never share one).
    work: PathBuf,
    notes: Vec<Warning>,
    /// A simulation that outlasts this is stopped ([`TIME_LIMIT`] unless set).
    time_limit: Duration,
}

/// The bench the circuit rig assumes where the calibration says nothing: 2 V rms full scale
/// both ways, a 20 dB attenuator, 8 ohm.
const DEFAULT_FULL_SCALE_VRMS: f64 = 2.0;
const DEFAULT_ATTENUATION: f64 = 10.0;
const DEFAULT_LOAD_OHMS: f64 = 8.0;

/// A simulation that outlasts this is stopped.
const TIME_LIMIT: Duration = Duration::from_secs(600);
/// The stimulus file ngspice's file source reads, in the folder each simulation runs in. Named
/// relative and in lowercase: ngspice lowercases a model's string parameters (see `deck`).
const DRIVE_FILE: &str = "drive.txt";

/// No node of a valve amplifier stands this far from ground (volts); a solution that puts one
/// there is the arithmetic's, not the circuit's.
const ABSURD_VOLTS: f64 = 1e5;

/// Refuses a solution with a node voltage no amplifier has: ngspice gives one, with warnings
/// only, when a node has no DC path to ground (a plate load on a misspelt supply node) or a
/// behavioural source cannot be satisfied, and the capture would then read in megavolts.
fn check_voltages(
    plot: &super::raw::Plot,
    times: &[f64],
    warnings: &[String],
    dir: &Path,
) -> Result<()> {
    // The node named is the worst one inside the user's circuit (the cause is there; the rig's
    // own output node only follows it), the worst of all when none inside is absurd.
    let worst = plot
        .variables
        .iter()
        .zip(&plot.values)
        .filter_map(|(name, values)| {
            let node = name.strip_prefix("v(")?.strip_suffix(')')?;
            let (i, peak) = values
                .iter()
                .map(|v| v.re.abs())
                .enumerate()
                .max_by(|a, b| a.1.total_cmp(&b.1))?;
            (peak > ABSURD_VOLTS).then_some((node, i, values[i].re))
        })
        .max_by(|a, b| {
            let inside = |n: &str| !n.starts_with("ampnote_");
            inside(a.0)
                .cmp(&inside(b.0))
                .then(a.2.abs().total_cmp(&b.2.abs()))
        });
    if let Some((node, i, volts)) = worst {
        let node = node.strip_prefix("x_ampnote_amp.").unwrap_or(node);
        let said = if warnings.is_empty() {
            String::new()
        } else {
            format!(" ngspice said: {}.", warnings.join("; "))
        };
        return Err(Error::Spice {
            detail: format!(
                "ngspice's solution puts node `{node}` at {volts:.3e} V at {:.4} s, which no amplifier has: the netlist has no sensible solution there (a node with no DC path to ground, such as a part on a misspelt node name, a loop of sources, or a behavioural source that cannot be met).{said} The deck and its log are in {}",
                times.get(i).copied().unwrap_or(0.0),
                dir.display()
            ),
        });
    }
    Ok(())
}

/// Read `text` for `.subckt amp IN OUT ...`: the subcircuit's ports, or why the file does not
/// follow the convention (also when a port is used by no part inside it).
pub fn amp_ports(text: &str) -> std::result::Result<Vec<String>, String> {
    let lines: Vec<&str> = text.lines().collect();
    for (i, line) in lines.iter().enumerate() {
        let words: Vec<&str> = line.split_whitespace().collect();
        if words.len() >= 2
            && words[0].eq_ignore_ascii_case(".subckt")
            && words[1].eq_ignore_ascii_case("amp")
        {
            let ports: Vec<String> = words[2..]
                .iter()
                .take_while(|w| !w.contains('=') && !w.eq_ignore_ascii_case("params:"))
                .map(|w| w.to_string())
                .collect();
            let roles: &[&str] = match ports.len() {
                2 => &["input", "output"],
                4 => &[
                    "channel 1 input",
                    "channel 2 input",
                    "channel 1 output",
                    "channel 2 output",
                ],
                n => {
                    return Err(format!(
                        "its `.subckt amp` has {n} port(s) ({}); the convention is two for one channel, `.subckt amp IN OUT` (the amplifier's input and its output terminal), or four for two channels, `.subckt amp IN1 IN2 OUT1 OUT2`",
                        ports.join(" ")
                    ))
                }
            };
            let body = subckt_body(&lines[i + 1..]);
            for (what, port) in roles.iter().zip(&ports) {
                if !body.iter().any(|l| uses_node(l, port)) {
                    return Err(format!(
                        "its `.subckt amp` never connects its {what} port `{port}`: no part inside the subcircuit uses that node (a misspelt node name?)"
                    ));
                }
            }
            return Ok(ports);
        }
    }
    Err("it defines no `.subckt amp IN OUT`: wrap the amplifier in that subcircuit (its input and its output terminal; supplies inside), and ampnote adds the drive, the dummy load and the attenuator".into())
}

/// Lines the rig must run without: analyses (the rig adds its own `.tran`; a netlist's own
/// would run too, or in ngspice's order replace the rig's), a `.control` block (its commands
/// run in batch mode: `quit` ends the run with no results, `alter` changes parts unseen), and
/// `.save` (it keeps only the vectors it names, so the output the rig reads is not saved).
fn no_analyses(text: &str) -> std::result::Result<(), String> {
    const REFUSED: [&str; 13] = [
        ".tran", ".ac", ".dc", ".op", ".noise", ".tf", ".pz", ".disto", ".sens", ".sp", ".pss",
        ".control", ".save",
    ];
    let found: Vec<String> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| REFUSED.iter().any(|r| first_word_is(l, r)))
        .map(|(i, l)| format!("line {} `{}`", i + 1, l.trim()))
        .collect();
    if found.is_empty() {
        return Ok(());
    }
    Err(format!(
        "{}{}: the netlist must hold the circuit only, since ampnote adds its own transient analysis and reads every node it needs (a netlist's own analysis would run too or replace the rig's, a `.control` block's commands run in batch mode, `.save` drops the output the rig reads). Comment {} out with `*`",
        found.iter().take(4).cloned().collect::<Vec<_>>().join(", "),
        if found.len() > 4 {
            format!(" and {} more", found.len() - 4)
        } else {
            String::new()
        },
        if found.len() == 1 { "it" } else { "them" }
    ))
}

/// Whether `line`'s first word is `word` (ngspice's names are case-insensitive).
fn first_word_is(line: &str, word: &str) -> bool {
    line.split_whitespace()
        .next()
        .is_some_and(|w| w.eq_ignore_ascii_case(word))
}

/// The part lines of a subcircuit, from the `lines` after its `.subckt` line up to its `.ends`
/// (continuation lines joined, comments and dot-lines left out).
fn subckt_body(lines: &[&str]) -> Vec<String> {
    let mut body: Vec<String> = Vec::new();
    for line in lines {
        let t = line.trim();
        if t.get(..5).is_some_and(|p| p.eq_ignore_ascii_case(".ends")) {
            break;
        }
        if let Some(rest) = t.strip_prefix('+') {
            if let Some(last) = body.last_mut() {
                last.push(' ');
                last.push_str(rest);
            }
        } else if !t.is_empty() && !t.starts_with('*') && !t.starts_with('.') {
            body.push(t.to_string());
        }
    }
    body
}

/// Whether a part line uses `node` (ngspice's names are case-insensitive; a behavioural
/// source's `V(node)` counts).
fn uses_node(line: &str, node: &str) -> bool {
    line.split(|c: char| !(c.is_ascii_alphanumeric() || "_.#!$[]".contains(c)))
        .skip(1)
        .any(|w| w.eq_ignore_ascii_case(node))
}

impl SpiceRig {
    /// The rig for the netlist at `path`, with the user's calibration (the interface's full
    /// scales, the attenuator and the load; a simulated bench of 2 V rms full scale both ways,
    /// a 20 dB attenuator and 8 ohm where the calibration says nothing).
    pub fn open(path: &Path, calibration: Calibration, work: &Path) -> Result<SpiceRig> {
        Self::open_with(path, &[], calibration, work)
    }

    /// [`Self::open`] with parts changed for this run (a copy of the netlist, in `work`).
    pub fn open_with(
        path: &Path,
        changes: &[PartChange],
        calibration: Calibration,
        work: &Path,
    ) -> Result<SpiceRig> {
        let text = std::fs::read_to_string(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        let channels = amp_ports(&text)
            .and_then(|ports| no_analyses(&text).map(|_| ports.len() / 2))
            .map_err(|why| Error::Spice {
                detail: format!("{}: {why}", path.display()),
            })?;
        let source = std::fs::canonicalize(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        let work = work.join(format!(
            "{}-{}",
            crate::notebook::timestamp_for_file(),
            std::process::id()
        ));
        std::fs::create_dir_all(&work).map_err(|e| Error::Write {
            path: work.clone(),
            source: e,
        })?;
        let work = std::fs::canonicalize(&work).map_err(|e| Error::Write {
            path: work.clone(),
            source: e,
        })?;
        let netlist = if changes.is_empty() {
            source.clone()
        } else {
            let dir = source.parent().unwrap_or(Path::new("/"));
            let changed = with_changes(&text, dir, changes)?;
            let copy = work.join("netlist-changed.cir");
            std::fs::write(&copy, changed).map_err(|e| Error::Write {
                path: copy.clone(),
                source: e,
            })?;
            copy
        };
        let load_ohms = calibration.load_ohms.unwrap_or(DEFAULT_LOAD_OHMS);
        let calibration = Calibration {
            output_fs_vrms: calibration.output_fs_vrms.or(Some(DEFAULT_FULL_SCALE_VRMS)),
            input_fs_vrms: calibration.input_fs_vrms.or(Some(DEFAULT_FULL_SCALE_VRMS)),
            attenuation: calibration.attenuation.or(Some(DEFAULT_ATTENUATION)),
            load_ohms: Some(load_ohms),
            ..calibration
        };
        Ok(SpiceRig {
            netlist,
            source,
            changes: changes.to_vec(),
            load_ohms,
            channels,
            calibration,
            work,
            notes: Vec::new(),
            time_limit: TIME_LIMIT,
        })
    }

    /// The same rig with another limit on each simulation's time.
    pub fn with_time_limit(mut self, limit: Duration) -> SpiceRig {
        self.time_limit = limit;
        self
    }

    /// The deck that plays `source` (a filesource text file) into the netlist for `seconds`,
    /// one stimulus point at most per time step. The absolute current tolerance is 100 pA
    /// instead of ngspice's 1 pA (an integrated-circuit figure): with 1 pA an idle tube
    /// amplifier with an output transformer, its currents in tens of mA, ran at a fortieth of
    /// the time step (rounding noise in the windings' currents read as truncation error),
    /// 200 times slower; 100 pA is -150 dB re 1 A. A netlist's own `.options` come after
    /// and win.
    ///
    /// The drive file is named relative to the folder ngspice runs in ([`DRIVE_FILE`]): ngspice
    /// lowercases a model's string parameters, so an absolute path with a capital letter in it
    /// (`/tmp/tmp.Xa3k`, `/home/Ann/Amps`) names a file that is not there.
    ///
    /// With two channels, `driven` gets the drive and the other input is held at 0 V (an
    /// interface output playing silence); each output has its own load.
    fn deck(&self, step: f64, seconds: f64, load_ohms: f64, driven: usize) -> String {
        let mut parts = String::new();
        for ch in 1..=self.channels {
            if ch == driven {
                parts += &format!("a_ampnote_drive %v([ampnote_in{ch}]) ampnote_drive\n");
            } else {
                parts += &format!("v_ampnote_idle{ch} ampnote_in{ch} 0 0\n");
            }
            parts += &format!("r_ampnote_load{ch} ampnote_out{ch} 0 {load_ohms:e}\n");
        }
        let ins: Vec<String> = (1..=self.channels)
            .map(|c| format!("ampnote_in{c}"))
            .collect();
        let outs: Vec<String> = (1..=self.channels)
            .map(|c| format!("ampnote_out{c}"))
            .collect();
        format!(
            "* ampnote circuit rig: {netlist}\n\
             .options abstol=1e-10\n\
             .include \"{netlist}\"\n\
             .model ampnote_drive filesource (file=\"{DRIVE_FILE}\" amploffset=[0] amplscale=[1] timeoffset=0 timescale=1 timerelative=false amplstep=false)\n\
             {parts}\
             x_ampnote_amp {ins} {outs} amp\n\
             .tran {step:e} {seconds:e} 0 {step:e}\n\
             .end\n",
            netlist = self.netlist.display(),
            ins = ins.join(" "),
            outs = outs.join(" "),
        )
    }
    /// One capture of `stimulus` (at `fs`) played into channel `driven`, into `load_ohms`,
    /// simulated in the folder `dir`, with ngspice's warnings.
    fn simulate(
        &self,
        dir: &Path,
        stimulus: &[f64],
        fs: f64,
        load_ohms: f64,
        driven: usize,
    ) -> Result<(Vec<f64>, Vec<String>)> {
        let (mut all, warnings) = self.simulate_all(dir, stimulus, fs, load_ohms, driven)?;
        Ok((all.swap_remove(driven - 1), warnings))
    }

    /// [`Self::simulate`] with every channel's output (index 0 for channel 1). Takes `&self` so
    /// that several run at once, each in a folder of its own.
    fn simulate_all(
        &self,
        dir: &Path,
        stimulus: &[f64],
        fs: f64,
        load_ohms: f64,
        driven: usize,
    ) -> Result<(Vec<Vec<f64>>, Vec<String>)> {
        let cal = crate::rig::Rig::calibration(self);
        let full = |v: Option<f64>| v.unwrap_or(DEFAULT_FULL_SCALE_VRMS) * std::f64::consts::SQRT_2;
        let (out_peak, in_peak) = (full(cal.output_fs_vrms), full(cal.input_fs_vrms));
        let atten = cal.attenuation.unwrap_or(DEFAULT_ATTENUATION);
        let k = oversample_for(stimulus, fs);
        let up = upsample_for_linear_hold(stimulus, k);
        let step = 1.0 / (fs * k as f64);
        std::fs::create_dir_all(dir).map_err(|e| Error::Write {
            path: dir.to_path_buf(),
            source: e,
        })?;
        let source = dir.join(DRIVE_FILE);
        write_drive(&source, &up, step, out_peak).map_err(|e| Error::Write {
            path: source.clone(),
            source: e,
        })?;
        let seconds = (stimulus.len() as f64 - 1.0) / fs;
        let outcome = run(
            &self.deck(step, seconds, load_ohms, driven),
            dir,
            self.time_limit,
        )?;
        let tran = outcome.plot("Transient")?;
        let time = tran.real("time")?;
        check_voltages(tran, &time, &outcome.warnings, dir)?;
        let mut captures = Vec::with_capacity(self.channels);
        for ch in 1..=self.channels {
            let (t, v) = rising(&time, &tran.real(&format!("v(ampnote_out{ch})"))?);
            if t.len() < 4 {
                return Err(Error::Spice {
                    detail: format!("ngspice returned {} time points", t.len()),
                });
            }
            // Read on the stimulus's fine grid, then down to the capture's rate through an
            // ideal anti-alias filter, as an interface's converter does: harmonics above half
            // the rate must not fold back into the band.
            let fine = resample_cubic(&t, &v, fs * k as f64, stimulus.len() * k);
            let y = decimate_band_limited(&fine, k);
            captures.push(y.iter().map(|v| v / atten / in_peak).collect());
        }
        Ok((captures, outcome.warnings.clone()))
    }

    /// Every channel's output with `channel` driven, in the rig's own folder, warnings kept.
    fn record_all(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        self.check_channel(channel)?;
        let (captures, warnings) = self.simulate_all(
            &self.work,
            stimulus,
            sample_rate_hz as f64,
            self.load_ohms,
            channel,
        )?;
        self.note(&warnings);
        Ok(captures)
    }

    /// Several simulations at once (one ngspice per core), each `(folder, stimulus, load)` in a
    /// folder of its own under the rig's, `channel` driven; their warnings kept.
    fn simulate_each(
        &mut self,
        channel: usize,
        fs: f64,
        jobs: &[(String, &[f64], f64)],
    ) -> Result<Vec<Vec<f64>>> {
        use rayon::prelude::*;
        self.check_channel(channel)?;
        let done: Vec<(Vec<f64>, Vec<String>)> = jobs
            .par_iter()
            .map(|(folder, s, load)| self.simulate(&self.work.join(folder), s, fs, *load, channel))
            .collect::<Result<_>>()?;
        Ok(done
            .into_iter()
            .map(|(capture, warnings)| {
                self.note(&warnings);
                capture
            })
            .collect())
    }

    /// Keeps ngspice's warnings (each once) and the note that the run is a prediction.
    fn note(&mut self, warnings: &[String]) {
        let predicted = "predicted by ngspice from the netlist, not measured: noise and hum are only what the netlist's own sources make (none unless it has them), so a predicted noise, hum or THD+N figure is not a bench's";
        let theirs = warnings.iter().map(|w| format!("ngspice: {w}"));
        for m in std::iter::once(predicted.to_string()).chain(theirs) {
            if !self.notes.iter().any(|n| n.message == m) {
                self.notes.push(WarningCode::Rig.say(m));
            }
        }
    }

    fn check_channel(&self, channel: usize) -> Result<()> {
        if channel == 0 || channel > self.channels {
            return Err(Error::NoSuchChannel {
                requested: channel,
                available: self.channels,
            });
        }
        Ok(())
    }
}

/// `x` (at rate `fs`) upsampled `k` times in the frequency domain and divided by the linear
/// interpolation's sinc^2(f / (k fs)) on the band, zero-padded so nothing wraps round.
pub fn upsample_for_linear_hold(x: &[f64], k: usize) -> Vec<f64> {
    let n = (x.len() + 64).next_power_of_two();
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n);
    let inv = planner.plan_fft_inverse(n * k);
    let mut buf = vec![0.0; n];
    buf[..x.len()].copy_from_slice(x);
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("sizes match the plan");
    let mut up = inv.make_input_vec();
    // The Nyquist bin of the short transform is split between +/- fs/2; leave it out (the
    // stimuli carry nothing there).
    for (b, c) in spec.iter().enumerate().take(n / 2) {
        let f_rel = b as f64 / (n * k) as f64; // f / (k fs)
        let s = if b == 0 {
            1.0
        } else {
            let a = PI * f_rel;
            (a.sin() / a).powi(2)
        };
        up[b] = c * (k as f64 / s);
    }
    up[0].im = 0.0;
    let mut out = vec![0.0; n * k];
    inv.process(&mut up, &mut out)
        .expect("sizes match the plan");
    let scale = 1.0 / (n * k) as f64;
    out.truncate(x.len() * k);
    out.iter_mut().for_each(|v| *v *= scale);
    out
}

/// The filesource's text file: one `time value` line per point of `up` (`step` apart), volts
/// (`scale` times the sample).
fn write_drive(path: &Path, up: &[f64], step: f64, scale: f64) -> std::io::Result<()> {
    use std::io::Write as _;
    let mut w = std::io::BufWriter::new(std::fs::File::create(path)?);
    for (i, v) in up.iter().enumerate() {
        writeln!(w, "{:.12e} {:.12e}", i as f64 * step, v * scale)?;
    }
    w.flush()
}

/// The simulator's points with time strictly rising (a repeated time point, as a breakpoint
/// can leave, would divide by zero in the interpolation).
fn rising(t: &[f64], v: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let mut out = (Vec::with_capacity(t.len()), Vec::with_capacity(t.len()));
    for (&a, &b) in t.iter().zip(v) {
        if out.0.last().is_none_or(|&last| a > last) {
            out.0.push(a);
            out.1.push(b);
        }
    }
    out
}

/// `x` brought down `k` times in rate through an ideal low-pass at the new half rate (in the
/// frequency domain, zero-padded so nothing wraps round).
pub fn decimate_band_limited(x: &[f64], k: usize) -> Vec<f64> {
    let n_out = x.len() / k;
    let m = (n_out + 64).next_power_of_two();
    let n = m * k;
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n);
    let inv = planner.plan_fft_inverse(m);
    let mut buf = vec![0.0; n];
    buf[..x.len()].copy_from_slice(x);
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("sizes match the plan");
    let mut low = inv.make_input_vec();
    // Up to just under the new half rate; its Nyquist bin is left empty.
    for (b, c) in spec.iter().enumerate().take(m / 2) {
        low[b] = *c;
    }
    low[0].im = 0.0;
    let mut out = vec![0.0; m];
    inv.process(&mut low, &mut out)
        .expect("sizes match the plan");
    let scale = 1.0 / n as f64;
    out.truncate(n_out);
    out.iter_mut().for_each(|v| *v *= scale);
    out
}

/// `y` at the times `t` (rising) read at `i / fs` for `i` in `0..n`, by cubic interpolation
/// through the four nearest points (Lagrange, on the points' own uneven spacing).
pub fn resample_cubic(t: &[f64], y: &[f64], fs: f64, n: usize) -> Vec<f64> {
    let mut out = Vec::with_capacity(n);
    let mut j = 0usize;
    for i in 0..n {
        let ti = i as f64 / fs;
        while j + 2 < t.len() && t[j + 1] <= ti {
            j += 1;
        }
        let a = j.saturating_sub(1).min(t.len().saturating_sub(4));
        let idx = [a, a + 1, a + 2, a + 3];
        let mut v = 0.0;
        for &p in &idx {
            let mut w = 1.0;
            for &q in &idx {
                if q != p {
                    w *= (ti - t[q]) / (t[p] - t[q]);
                }
            }
            v += w * y[p];
        }
        out.push(v);
    }
    out
}

impl crate::rig::Rig for SpiceRig {
    fn describe(&self) -> String {
        let parts = if self.changes.is_empty() {
            String::new()
        } else {
            format!(
                " with {}",
                self.changes
                    .iter()
                    .map(|c| format!("{}={}", c.name, c.value))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        };
        format!(
            "circuit rig: {}{parts} through ngspice into {} ohm{}",
            self.source.display(),
            self.load_ohms,
            if self.channels == 2 {
                " (two channels)"
            } else {
                ""
            }
        )
    }

    fn calibration(&self) -> Calibration {
        Calibration {
            load_ohms: Some(self.load_ohms),
            ..self.calibration
        }
    }

    fn channels(&self) -> usize {
        self.channels
    }

    fn overload_threshold(&self) -> f64 {
        1.0
    }

    fn resolution_bits(&self) -> u32 {
        // The capture is computed in double precision, but a simulation has a numerical floor of
        // its own: ngspice's time-step control leaves spurious lines on a hard-driven nonlinear
        // circuit (one at 22.0 kHz, -134.7 dBFS, from a tanh stage at 10 % THD, where a linear
        // circuit gives none). 20 bits put the line floor at -110 dBFS, above them, so no
        // figure or oscillation is read from the arithmetic.
        20
    }

    fn set_load(&mut self, ohms: f64) -> Result<()> {
        self.load_ohms = crate::rig::checked_load(ohms)?;
        Ok(())
    }

    fn play_and_record(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>> {
        let mut all = self.record_all(channel, stimulus, sample_rate_hz)?;
        Ok(all.swap_remove(channel - 1))
    }

    /// Both channels' outputs from one simulation (a netlist with two channels; one with one
    /// channel refuses, as a bench that records one channel does).
    fn play_and_record_all(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        if self.channels < 2 {
            return Err(Error::RecordsOneChannel {
                rig: crate::rig::Rig::describe(self),
            });
        }
        self.record_all(channel, stimulus, sample_rate_hz)
    }

    fn predicts(&self) -> bool {
        true
    }

    fn parallel(&self) -> usize {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    }

    /// Every stimulus simulated at once (one ngspice per core, each in a folder of its own).
    fn play_and_record_each(
        &mut self,
        channel: usize,
        stimuli: &[Vec<f64>],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        let jobs: Vec<(String, &[f64], f64)> = stimuli
            .iter()
            .enumerate()
            .map(|(i, s)| (format!("part-{i}"), s.as_slice(), self.load_ohms))
            .collect();
        self.simulate_each(channel, sample_rate_hz as f64, &jobs)
    }

    /// The stimulus into every load at once (one ngspice per core); the rig's load is left
    /// as it was.
    fn play_and_record_loads(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
        loads: &[f64],
    ) -> Result<Vec<Vec<f64>>> {
        let jobs = loads
            .iter()
            .enumerate()
            .map(|(i, &r)| Ok((format!("load-{i}"), stimulus, crate::rig::checked_load(r)?)))
            .collect::<Result<Vec<_>>>()?;
        self.simulate_each(channel, sample_rate_hz as f64, &jobs)
    }

    fn take_notes(&mut self, channel: usize) -> Vec<Warning> {
        let _ = channel;
        std::mem::take(&mut self.notes)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use realfft::num_complex::Complex64;

    #[test]
    fn analyses_control_blocks_and_saves_are_refused_by_line() {
        let amp = ".subckt amp in out\nE1 out 0 in 0 2\n.ends\n";
        assert!(no_analyses(&format!("* ok\n{amp}.options reltol=1e-4\n.end\n")).is_ok());
        let e = no_analyses(&format!("* t\n{amp}.TRAN 1u 10m\n")).unwrap_err();
        assert!(e.starts_with("line 5 `.TRAN 1u 10m`"), "{e}");
        assert!(e.contains("Comment it out"), "{e}");
        let e = no_analyses(&format!("* c\n{amp}.control\nquit\n.endc\n.save v(x)\n")).unwrap_err();
        assert!(e.contains("line 5 `.control`, line 8 `.save v(x)`"), "{e}");
        assert!(e.contains("Comment them out"), "{e}");
        // A part whose name begins like a dot-line is not one.
        assert!(no_analyses(&format!("* p\n{amp}Rtran a b 1k\n")).is_ok());
    }

    #[test]
    fn the_convention_is_read_from_the_netlist() {
        assert_eq!(
            amp_ports("* x\n.SUBCKT amp in out\nR1 in out 1k\n.ends\n").unwrap(),
            vec!["in", "out"]
        );
        assert!(amp_ports(".subckt amp a b c\n")
            .unwrap_err()
            .contains("3 port"));
        assert!(amp_ports(".subckt other a b\n")
            .unwrap_err()
            .contains("no `.subckt amp"));
        assert_eq!(
            amp_ports(".subckt amp in out params: rk=1k\nR1 in OUT {rk}\n.ends\n").unwrap(),
            vec!["in", "out"]
        );
        // A port no part uses: the output typed `outt` in the only part that should reach it.
        let unused =
            amp_ports(".subckt amp in out\nR1 in outt 1k\n* out\n.ends\nR9 out 0 1\n").unwrap_err();
        assert!(unused.contains("output port `out`"), "{unused}");
        // Used only inside a behavioural source's expression, and on a continuation line.
        assert!(amp_ports(".subckt amp in out\nB1 out 0\n+ V = 2 * V(in)\n.ends\n").is_ok());
    }

    /// Closed form of the trapezoidal rule's warping and relative error, (pi f h)^2 / 3 with
    /// h = 1 / (k fs): the error on the tone itself under 2.5e-5 (k >= pi f / (fs sqrt(7.5e-5)),
    /// 7.6 at 1 kHz and 48 kHz), the window's skirts weighted by their level; the warping at the
    /// top under 0.25 %. An impulse (every frequency) takes 16, silence (a noise run) 4.
    #[test]
    fn the_oversampling_follows_the_stimulus_top() {
        let fs = 48_000.0;
        let tone = |f: f64| -> Vec<f64> {
            (0..9600)
                .map(|i| {
                    (2.0 * PI * f * i as f64 / fs).sin() * (PI * i as f64 / 9600.0).sin().powi(2)
                })
                .collect()
        };
        assert_eq!(oversample_for(&tone(300.0), fs), 4);
        assert_eq!(oversample_for(&tone(1000.0), fs), 8);
        // The same samples read at 96 kHz: a 1 kHz tone there needs only 4.
        assert_eq!(oversample_for(&tone(500.0), 2.0 * fs), 4);
        assert_eq!(oversample_for(&tone(2000.0), fs), 16);
        assert_eq!(oversample_for(&tone(20_000.0), fs), 16);
        let mut click = vec![0.0; 4800];
        click[100] = 1.0;
        assert_eq!(oversample_for(&click, fs), 16);
        assert_eq!(oversample_for(&[0.0; 100], fs), 4, "silence: the fewest");
        assert_eq!(
            oversample_for(&[0.5], fs),
            16,
            "one sample: no spectrum, the most"
        );
    }

    /// Closed form: what the circuit sees of the upsampled drive on the band is its transform
    /// times the linear hold's sinc^2(f T) (T one point): that must equal the stimulus's own
    /// transform at every frequency (the upsampling is exact and the sinc^2 divided out). A
    /// Hann-windowed 20 kHz tone and one at 1 kHz, to 1e-9 of the tone.
    #[test]
    fn the_upsampled_drive_undoes_the_linear_hold() {
        let fs = 48_000.0;
        let k = OVERSAMPLE_MAX;
        let n = 4800;
        for f in [1000.0, 20_000.0] {
            let x: Vec<f64> = (0..n)
                .map(|i| {
                    (2.0 * PI * f * i as f64 / fs).sin() * (PI * i as f64 / n as f64).sin().powi(2)
                })
                .collect();
            let up = upsample_for_linear_hold(&x, k);
            let dtft = |v: &[f64], rate: f64| {
                v.iter()
                    .enumerate()
                    .fold(Complex64::new(0.0, 0.0), |a, (i, s)| {
                        a + s * Complex64::from_polar(1.0, -2.0 * PI * f * i as f64 / rate)
                    })
            };
            let a = PI * f / (fs * k as f64);
            let seen = dtft(&up, fs * k as f64) * (a.sin() / a).powi(2) / k as f64;
            let want = dtft(&x, fs);
            assert!(
                (seen - want).norm() < 1e-9 * want.norm(),
                "{f} Hz: {seen} against {want}"
            );
        }
    }
}

/// A part's value changed for one run (`--set-part R7=470`).
#[derive(Debug, Clone, PartialEq)]
pub struct PartChange {
    pub name: String,
    pub value: String,
}

impl std::str::FromStr for PartChange {
    type Err = String;
    fn from_str(text: &str) -> std::result::Result<Self, String> {
        let (name, value) = text
            .split_once('=')
            .map(|(n, v)| (n.trim(), v.trim()))
            .ok_or_else(|| {
                format!("--set-part takes NAME=VALUE (R7=470, C4=100u), got `{text}`")
            })?;
        let kind = name.chars().next().map(|c| c.to_ascii_uppercase());
        if !matches!(kind, Some('R' | 'C' | 'L')) || name.contains(char::is_whitespace) {
            return Err(format!(
                "--set-part changes a resistor, capacitor or inductor (a name starting R, C or L), got `{name}`"
            ));
        }
        // A SPICE number: digits, a point, an exponent, then a scale suffix and unit letters.
        let numeric: String = value
            .chars()
            .take_while(|c| c.is_ascii_digit() || matches!(c, '.' | 'e' | 'E' | '+' | '-'))
            .collect();
        let rest = &value[numeric.len()..];
        if numeric
            .parse::<f64>()
            .map_or(true, |v| !(v.is_finite() && v > 0.0))
            || !rest.chars().all(|c| c.is_ascii_alphabetic())
        {
            return Err(format!(
                "--set-part {name}: `{value}` is not a part value (a positive number with an optional suffix: 470, 4.7k, 100u, 2.2meg)"
            ));
        }
        Ok(PartChange {
            name: name.to_string(),
            value: value.to_string(),
        })
    }
}

/// The netlist `text` (from the folder `dir`) with `changes` made: each names exactly one
/// element line, whose value (its fourth field) is replaced; `.include` and `.lib` paths made
/// absolute, so the copy works from anywhere.
pub fn with_changes(text: &str, dir: &Path, changes: &[PartChange]) -> Result<String> {
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    for line in lines.iter_mut() {
        let t = line.trim_start();
        let lower = t.to_ascii_lowercase();
        if let Some(kw) = [".include", ".inc", ".lib"]
            .iter()
            .find(|k| lower.starts_with(*k) && lower[k.len()..].starts_with(char::is_whitespace))
        {
            let rest = t[kw.len()..].trim();
            let (path, tail) = match rest.strip_prefix('"') {
                Some(r) => r.split_once('"').map_or((r, ""), |(p, t)| (p, t)),
                None => rest.split_once(char::is_whitespace).unwrap_or((rest, "")),
            };
            if !Path::new(path).is_absolute() {
                *line = format!("{kw} \"{}\"{tail}", dir.join(path).display());
            }
        }
    }
    for c in changes {
        let hits: Vec<usize> = lines
            .iter()
            .enumerate()
            .filter(|(_, l)| first_word_is(l, &c.name))
            .map(|(i, _)| i)
            .collect();
        let i = match hits.as_slice() {
            [i] => *i,
            [] => {
                return Err(Error::Spice {
                    detail: format!(
                        "--set-part {}: the netlist has no part of that name",
                        c.name
                    ),
                })
            }
            many => {
                return Err(Error::Spice {
                    detail: format!(
                    "--set-part {}: the netlist has {} parts of that name (lines {}); rename one",
                    c.name,
                    many.len(),
                    many.iter()
                        .map(|i| (i + 1).to_string())
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
                })
            }
        };
        let mut words: Vec<String> = lines[i].split_whitespace().map(str::to_string).collect();
        if words.len() < 4 {
            return Err(Error::Spice {
                detail: format!(
                    "--set-part {}: line {} has no value to change: `{}`",
                    c.name,
                    i + 1,
                    lines[i].trim()
                ),
            });
        }
        words[3] = c.value.clone();
        lines[i] = words.join(" ");
    }
    Ok(lines.join("\n") + "\n")
}

#[cfg(test)]
mod part_tests {
    use super::*;

    #[test]
    fn a_part_change_finds_its_one_line() {
        let text =
            "* amp\n.include models/triode.inc\n.subckt amp in out\nR7 a b 1k\nC4 b 0 10u\n.ends\n";
        let changes: Vec<PartChange> = ["r7=470", "C4=100u"]
            .iter()
            .map(|s| s.parse().unwrap())
            .collect();
        let out = with_changes(text, Path::new("/work/c"), &changes).unwrap();
        assert!(out.contains("R7 a b 470"), "{out}");
        assert!(out.contains("C4 b 0 100u"), "{out}");
        assert!(
            out.contains(".include \"/work/c/models/triode.inc\""),
            "{out}"
        );
        let missing: PartChange = "R9=1k".parse().unwrap();
        assert!(with_changes(text, Path::new("/"), &[missing])
            .unwrap_err()
            .to_string()
            .contains("no part"));
        let twice = "R1 a b 1k\nr1 c d 2k\n";
        let c: PartChange = "R1=3k".parse().unwrap();
        assert!(with_changes(twice, Path::new("/"), &[c])
            .unwrap_err()
            .to_string()
            .contains("2 parts"));
        for bad in ["R7", "Q1=3", "R7=-5", "R7=abc", "R7=1k5x!", "R7=nan"] {
            assert!(bad.parse::<PartChange>().is_err(), "{bad}");
        }
    }
}
