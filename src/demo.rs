//! The demo: the whole bench on the simulated bench, as a user would run it. An invented stereo
//! single-ended amplifier is measured stock (both channels: a tone at 1 W, the power staircase,
//! a sweep and the square waves it predicts, output impedance, channel separation, noise and hum
//! with no signal; DC operating points), reworked, measured again; every run goes into a
//! notebook, then the before/after comparison and the channel match.
//!
//! Each measurement goes the way it would at a bench without the live rig: ampnote writes the
//! stimulus file, the simulated bench "plays and records" it, and the capture file is analysed.

use crate::analysis::noise::NoiseAnalyzer;
use crate::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use crate::analysis::tone::{ChannelInput, Mains, ToneAnalyzer, ToneConfig};
use crate::calibration::{AttenuatorSection, Calibration, InterfaceSection, LoadSection, Profile};
use crate::error::Result;
use crate::notebook::{NewRun, Notebook, Run};
use crate::procedure::power::power_from_capture;
use crate::procedure::zout::from_responses;
use crate::report::compare::{compare, match_channels, Comparison, MatchResult, MatchTolerances};
use crate::results::RunResult;
use crate::rig::model::Model;
use crate::rig::sim::SimRig;
use crate::rig::Rig;
use crate::signal::stimulus::{self, Common, Kind, Stimulus};
use crate::signal::wav::{write_wav, write_wav_described, WavFormat};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// What the runs the demo keeps for one label and channel share.
struct Keep<'a> {
    nb: &'a Notebook,
    label: &'a str,
    channel: usize,
    settings: BTreeMap<String, String>,
    calibration: Calibration,
    predicted: bool,
}

impl Keep<'_> {
    fn save(&self, files: Vec<(&str, &Path)>, result: RunResult, notes: &str) -> Result<Run> {
        self.nb.save(NewRun {
            label: self.label,
            channel: self.channel,
            notes,
            settings: self.settings.clone(),
            calibration: self.calibration,
            analysis: None,
            files,
            blobs: Vec::new(),
            result,
            predicted: self.predicted,
        })
    }

    /// A 997 Hz tone of `seconds` at 1 W into this channel (the drive found from a probe),
    /// analysed with `cfg` and kept with the rig's notes; returns the drive, dBFS.
    fn tone_at_1w(
        &self,
        rig: &mut dyn Rig,
        work: &Path,
        base: &Common,
        seconds: f64,
        cfg: &ToneAnalyzer,
        notes: &str,
    ) -> Result<f64> {
        let ch = self.channel;
        let drive = crate::procedure::drive::drive_for_power(rig, ch, 997.0, RATE, 1.0)?.drive_dbfs;
        let tone = stimulus::tone(
            &Common {
                level_dbfs: drive.min(-1.0),
                ..base.clone()
            },
            997.0,
            seconds,
        )?;
        let tone_path = write_stimulus(work, "tone-1w.wav", &tone)?;
        let cap_path = work.join("capture.wav");
        let y = record(rig, ch, &tone, &cap_path)?;
        let mut r = cfg.analyze(&input(ch, steady(&y, &tone), rig), &self.calibration)?;
        r.warnings.extend(rig.take_notes(ch));
        self.save(
            vec![("stimulus.wav", &tone_path), ("capture.wav", &cap_path)],
            r.into(),
            notes,
        )?;
        Ok(drive)
    }
}

/// Sample rate of the demo's stimuli.
const RATE: u32 = 48_000;
/// The sweep runs at twice the rate so it reaches 40 kHz and the high -3 dB point is inside it
/// (at 48 kHz a sweep stops at 21.6 kHz, below where a good output transformer falls 3 dB).
const SWEEP_RATE: u32 = 96_000;

/// What the demo produced.
pub struct DemoOutcome {
    pub notebook: PathBuf,
    pub comparison: Comparison,
    pub matches: Vec<MatchResult>,
    pub runs: usize,
    /// Each example circuit's prediction against the measured label it predicts (channel 1).
    pub predictions: Vec<Comparison>,
    /// Why the circuits were not predicted, when they were not.
    pub circuits_skipped: Option<String>,
}

/// The example circuits (`examples/circuits/`), built in so an installed binary has them: the
/// measured label each predicts, its predicted label, the file name and the netlist.
const CIRCUITS: [(&str, &str, &str, &str); 2] = [
    (
        "stock",
        "stock, predicted",
        "stock.cir",
        include_str!("../examples/circuits/stock.cir"),
    ),
    (
        "driver reworked",
        "driver reworked, predicted",
        "reworked.cir",
        include_str!("../examples/circuits/reworked.cir"),
    ),
];

/// Predict channel 1 of each example circuit through ngspice (a tone at 1 W, the power
/// staircase, a sweep) and keep the runs as predictions; what each predicts is compared after.
fn predict(
    nb: &Notebook,
    work: &Path,
    cal: Calibration,
    progress: &mut impl FnMut(&str),
) -> Result<Vec<Comparison>> {
    use crate::procedure::power::{run_staircase, StaircaseSettings};
    use crate::rig::spice::rig::SpiceRig;
    let tone_cfg = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: Some(997.0),
        ..ToneConfig::default()
    })?;
    let resp = ResponseAnalyzer::new(ResponseConfig::default())?;
    let mut out = Vec::new();
    for (measured, label, file, text) in CIRCUITS {
        progress(&format!("{label} (ngspice)"));
        let path = work.join(file);
        std::fs::write(&path, text).map_err(|source| crate::error::Error::Write {
            path: path.clone(),
            source,
        })?;
        let mut rig = SpiceRig::open(&path, cal, &work.join("spice"))?;
        let ch = 1;
        let mut settings = BTreeMap::new();
        settings.insert("rig".to_string(), rig.describe());
        let keep = Keep {
            nb,
            label,
            channel: ch,
            settings,
            calibration: cal,
            predicted: true,
        };
        let base = Common {
            lead_s: 0.05,
            tail_s: 0.1,
            fade_s: 0.01,
            ..Common::mono(RATE, -20.0)
        };
        // A tone at 1 W.
        keep.tone_at_1w(
            &mut rig,
            work,
            &base,
            0.5,
            &tone_cfg,
            "997 Hz at 1 W, predicted",
        )?;
        let cap_path = work.join("capture.wav");
        // The staircase, step by step (steps taken at once, one per core), to past 3 % THD:
        // the steps into hard clipping are the simulator's slowest, and compare reads 1 and 3 %.
        let mut p = run_staircase(
            &mut rig,
            ch,
            &StaircaseSettings {
                frequency_hz: 997.0,
                sample_rate_hz: RATE,
                from_dbfs: -24.0,
                step_db: 2.0,
                stop_thd_percent: 4.0,
                max_w: 50.0,
                settle_s: 0.15,
                dwell_s: 0.1,
            },
            &crate::progress::Progress::hidden(),
        )?;
        p.warnings.extend(rig.take_notes(ch));
        keep.save(
            Vec::new(),
            p.into(),
            "staircase from -24 dBFS in 2 dB steps to 4 % THD, predicted",
        )?;
        // A short sweep at the measured one's rate and span.
        let sweep = stimulus::sweep(
            &Common {
                fade_s: 0.0,
                tail_s: 0.2,
                ..Common {
                    sample_rate_hz: SWEEP_RATE,
                    ..base.clone()
                }
            },
            10.0,
            40_000.0,
            0.5,
        )?;
        let sweep_path = write_stimulus(work, "sweep.wav", &sweep)?;
        let sp = SweepParams::from_description(&sweep.description).expect("a sweep");
        let y = record(&mut rig, ch, &sweep, &cap_path)?;
        let mut r = resp.analyze(
            ch,
            &sweep.signal,
            sp,
            &y,
            SWEEP_RATE as f64,
            rig.overload_threshold(),
        )?;
        r.warnings.extend(rig.take_notes(ch));
        keep.save(
            vec![("stimulus.wav", &sweep_path), ("capture.wav", &cap_path)],
            r.into(),
            "10 Hz - 40 kHz sweep at 96 kHz, 0.5 s, predicted",
        )?;
        let a = nb.select(label, Some(ch))?;
        let b = nb.select(measured, Some(ch))?;
        out.push(compare(label, &a, measured, &b));
    }
    Ok(out)
}

fn write_stimulus(dir: &Path, name: &str, s: &Stimulus) -> Result<PathBuf> {
    let path = dir.join(name);
    write_wav_described(
        &path,
        s.description.sample_rate_hz,
        &s.channel_data(),
        WavFormat::Int { bits: 24 },
        1,
        Some(&s.description.to_json()),
    )?;
    Ok(path)
}

fn record(rig: &mut dyn Rig, ch: usize, s: &Stimulus, path: &Path) -> Result<Vec<f64>> {
    let rate = s.description.sample_rate_hz;
    let y = rig.play_and_record(ch, &s.signal, rate)?;
    write_wav(
        path,
        rate,
        std::slice::from_ref(&y),
        WavFormat::Int { bits: 24 },
        2,
    )?;
    Ok(y)
}

/// The steady part of a tone's capture: from 0.1 s into the tone to 20 ms before it ends.
fn steady<'a>(y: &'a [f64], s: &Stimulus) -> &'a [f64] {
    let d = &s.description;
    let from = d.signal_start_sample + RATE as usize / 10;
    let to = (d.signal_start_sample + d.signal_samples).saturating_sub(RATE as usize / 50);
    let to = to.min(y.len());
    &y[from.min(to)..to]
}

fn input<'a>(ch: usize, y: &'a [f64], rig: &dyn Rig) -> ChannelInput<'a> {
    ChannelInput {
        channel: ch,
        samples: y,
        sample_rate_hz: RATE as f64,
        overload_threshold: rig.overload_threshold(),
        resolution_bits: rig.resolution_bits(),
    }
}

/// Run the demo into `out` (created if needed; a notebook already there is refused).
/// With `circuits`, the example circuits are predicted too when ngspice is installed (several
/// minutes more); without ngspice the demo says so and goes on.
pub fn run(out: &Path, circuits: bool, mut progress: impl FnMut(&str)) -> Result<DemoOutcome> {
    let stock = Model::load("stock")?;
    let bench = stock.bench;
    let profile = Profile {
        name: Some("simulated bench".into()),
        interface: Some(InterfaceSection {
            output_fs_vrms: Some(bench.output_fs_vrms),
            input_fs_vrms: Some(bench.input_fs_vrms),
        }),
        attenuator: Some(AttenuatorSection {
            ratio: Some(bench.attenuation),
            ..AttenuatorSection::default()
        }),
        load: Some(LoadSection {
            ohms: Some(bench.load_ohms),
        }),
        loopback: None,
    };
    let nb = Notebook::init(
        &out.join("notebook"),
        "invented stereo SE triode amplifier",
        2,
        Some(bench.load_ohms),
        Some(profile),
    )?;
    let work = out.join("work");
    std::fs::create_dir_all(&work).map_err(|source| crate::error::Error::Write {
        path: work.clone(),
        source,
    })?;
    let cal: Calibration = nb.calibration()?;

    // Stimuli, written once, as a user would.
    let base = Common {
        lead_s: 0.1,
        tail_s: 0.3,
        fade_s: 0.01,
        ..Common::mono(RATE, -20.0)
    };
    let steps = stimulus::steps(&base, 997.0, -30.0, -1.0, 1.0, 0.3, 0.08)?;
    let sweep = stimulus::sweep(
        &Common {
            fade_s: 0.0,
            tail_s: 0.5,
            ..Common {
                sample_rate_hz: SWEEP_RATE,
                ..base.clone()
            }
        },
        10.0,
        40_000.0,
        3.0,
    )?;
    let steps_path = write_stimulus(&work, "steps.wav", &steps)?;
    let sweep_path = write_stimulus(&work, "sweep.wav", &sweep)?;
    let tone_cfg = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: Some(997.0),
        ..ToneConfig::default()
    })?;
    let resp = ResponseAnalyzer::new(ResponseConfig::default())?;
    let sp = SweepParams::from_description(&sweep.description).expect("a sweep");
    let Kind::Steps { steps: table, .. } = &steps.description.kind else {
        unreachable!("steps() makes a staircase")
    };
    for (label, model_name) in [("stock", "stock"), ("driver reworked", "reworked")] {
        let model = Model::load(model_name)?;
        let mut rig = SimRig::new(model);
        for ch in 1..=2usize {
            progress(&format!("{label}, channel {ch}"));
            let mut settings = BTreeMap::new();
            settings.insert("rig".to_string(), rig.describe());
            settings.insert("mains".to_string(), "230 V 50 Hz (simulated)".to_string());
            let keep = Keep {
                nb: &nb,
                label,
                channel: ch,
                settings,
                calibration: cal,
                predicted: false,
            };
            // A tone at 1 W: the drive found from a probe and a confirming tone.
            rig.set_load(bench.load_ohms)?;
            let drive = keep.tone_at_1w(&mut rig, &work, &base, 2.0, &tone_cfg, "997 Hz at 1 W")?;
            let cap_path = work.join("capture.wav");
            // The staircase.
            let y = record(&mut rig, ch, &steps, &cap_path)?;
            let p = power_from_capture(
                ch,
                &y,
                RATE as f64,
                rig.overload_threshold(),
                rig.resolution_bits(),
                997.0,
                table,
                0,
                &cal,
            )?;
            keep.save(
                vec![("stimulus.wav", &steps_path), ("capture.wav", &cap_path)],
                p.into(),
                "staircase -30..-1 dBFS",
            )?;
            // The sweep.
            let y = record(&mut rig, ch, &sweep, &cap_path)?;
            let r = resp.analyze(
                ch,
                &sweep.signal,
                sp,
                &y,
                SWEEP_RATE as f64,
                rig.overload_threshold(),
            )?;
            keep.save(
                vec![("stimulus.wav", &sweep_path), ("capture.wav", &cap_path)],
                r.clone().into(),
                "10 Hz - 40 kHz sweep at 96 kHz",
            )?;
            // The square-wave response predicted from the sweep's: 40 Hz (tilt) and 1 kHz (edge).
            let bw = crate::signal::stimulus::square_bandwidth_below(
                r.points.last().map_or(20_000.0, |p| p.frequency_hz),
            );
            let squares = [40.0, 1000.0]
                .iter()
                .map(|&f| crate::analysis::square::from_response(&r, f, bw))
                .collect::<Result<Vec<_>>>()?;
            keep.save(
                vec![("stimulus.wav", &sweep_path), ("capture.wav", &cap_path)],
                crate::analysis::square::SquareResult {
                    channel: ch,
                    source: crate::analysis::square::SquareSource::FromSweep,
                    squares,
                    warnings: Vec::new(),
                }
                .into(),
                "squares at 40 Hz and 1 kHz from the sweep's response",
            )?;
            // Output impedance across the band: the same sweep into twice the load, set against
            // the one into the rated load above (the bench's one clock gives Z its phase).
            let b_path = work.join("capture-16.wav");
            rig.set_load(2.0 * bench.load_ohms)?;
            let yb = record(&mut rig, ch, &sweep, &b_path)?;
            rig.set_load(bench.load_ohms)?;
            let rb = resp.analyze(
                ch,
                &sweep.signal,
                sp,
                &yb,
                SWEEP_RATE as f64,
                rig.overload_threshold(),
            )?;
            let z = from_responses(
                ch,
                &r,
                bench.load_ohms,
                &rb,
                2.0 * bench.load_ohms,
                rig.shares_clock().then_some(SWEEP_RATE as f64),
            )?;
            keep.save(
                vec![
                    ("stimulus.wav", &sweep_path),
                    ("capture.wav", &cap_path),
                    ("capture-load-b.wav", &b_path),
                ],
                z.into(),
                "two loads: 8 and 16 ohm, swept",
            )?;
            // Channel separation: a sweep at the 1 W drive into this channel, both recorded.
            let sep = stimulus::sweep(
                &Common {
                    level_dbfs: drive.min(-1.0),
                    fade_s: 0.0,
                    tail_s: 0.5,
                    ..base.clone()
                },
                10.0,
                stimulus::default_sweep_stop_hz(RATE),
                4.0,
            )?;
            let sep_path = write_stimulus(&work, "separation-sweep.wav", &sep)?;
            let all = rig.play_and_record_all(ch, &sep.signal, RATE)?;
            write_wav(&cap_path, RATE, &all, WavFormat::Int { bits: 24 }, 2)?;
            let captures: Vec<&[f64]> = all.iter().map(Vec::as_slice).collect();
            let separation = crate::analysis::separation::from_recording(
                &resp,
                &crate::analysis::separation::Recording {
                    stimulus: &sep.signal,
                    sweep: SweepParams::from_description(&sep.description).expect("a sweep"),
                    captures: &captures,
                    driven: ch,
                    fs: RATE as f64,
                    overload_threshold: rig.overload_threshold(),
                    resolution_bits: rig.resolution_bits(),
                },
            )?;
            keep.save(
                vec![("stimulus.wav", &sep_path), ("capture.wav", &cap_path)],
                separation.into(),
                "sweep at the 1 W drive into this channel, both channels recorded",
            )?;
            // Noise and hum with the input silent.
            let silence = vec![0.0; 2 * RATE as usize];
            let y = rig.play_and_record(ch, &silence, RATE)?;
            write_wav(
                &cap_path,
                RATE,
                std::slice::from_ref(&y),
                WavFormat::Int { bits: 24 },
                2,
            )?;
            let nr = NoiseAnalyzer::new().analyze(
                &input(ch, &y[RATE as usize / 4..], &rig),
                (20.0, 20_000.0),
                Mains::Auto,
                &cal,
            )?;
            keep.save(vec![("capture.wav", &cap_path)], nr.into(), "input silent")?;
        }
    }
    // DC operating points read with a meter (invented values for the invented amplifier): B+,
    // the output valve's cathode resistor, the driver's cathode resistor (changed by the rework).
    for (label, points) in [
        ("stock", ["B+=362", "Rk out=71.5@1.5k", "Rk drv=1.9@2.2k"]),
        (
            "driver reworked",
            ["B+=360", "Rk out=71.8@1.5k", "Rk drv=1.45@1k"],
        ),
    ] {
        let parsed = points
            .iter()
            .map(|p| crate::procedure::dc::parse_point(p))
            .collect::<Result<Vec<_>>>()?;
        let ratings = vec![("Rk out".to_string(), 10.0), ("Rk drv".to_string(), 0.5)];
        let dc = crate::procedure::dc::operating_points(parsed, ratings)?;
        let mut settings = BTreeMap::new();
        settings.insert(
            "meter".to_string(),
            "DC volts, probes on with the power off".to_string(),
        );
        nb.save(NewRun {
            label,
            channel: 1,
            notes: "left channel and the shared B+",
            settings,
            calibration: cal,
            analysis: None,
            files: Vec::new(),
            blobs: Vec::new(),
            result: dc.into(),
            predicted: false,
        })?;
    }
    // The reworked amplifier switched on cold and logged for 20 s at 1 W (left channel): the
    // trend of its warm-up.
    progress("driver reworked, cold start");
    let model = Model::load("reworked")?;
    let drive = crate::procedure::drive::drive_for_power(
        &mut SimRig::new(model.clone()),
        1,
        997.0,
        RATE,
        1.0,
    )?
    .drive_dbfs;
    let mut cold = SimRig::cold(
        model,
        crate::rig::sim::Warmup {
            cold_db: -2.0,
            tau_s: 6.0,
        },
    );
    let log = stimulus::tone(
        &Common {
            level_dbfs: drive.min(-1.0),
            ..base.clone()
        },
        997.0,
        20.0,
    )?;
    let log_path = write_stimulus(&work, "tone-20s.wav", &log)?;
    let cap_path = work.join("capture.wav");
    let y = record(&mut cold, 1, &log, &cap_path)?;
    let samples = crate::capture::StoredSamples::F64(y);
    let t = crate::analysis::blocks::trend(
        &tone_cfg,
        &crate::analysis::blocks::StoredInput {
            channel: 1,
            samples: &samples,
            sample_rate_hz: RATE as f64,
            overload_threshold: cold.overload_threshold(),
            resolution_bits: cold.resolution_bits(),
            progress: crate::progress::Progress::hidden(),
        },
        &cal,
        1.0,
    )?;
    let mut settings = BTreeMap::new();
    settings.insert("rig".to_string(), cold.describe());
    settings.insert("start".to_string(), "cold (simulated warm-up)".to_string());
    nb.save(NewRun {
        label: "driver reworked",
        channel: 1,
        notes: "warm-up from cold, 997 Hz at 1 W warm",
        settings,
        calibration: cal,
        analysis: None,
        files: vec![("stimulus.wav", &log_path), ("capture.wav", &cap_path)],
        blobs: Vec::new(),
        result: t.into(),
        predicted: false,
    })?;
    let a = nb.select("stock", None)?;
    let b = nb.select("driver reworked", None)?;
    let comparison = compare("stock", &a, "driver reworked", &b);
    let tol = MatchTolerances::default();
    let matches = ["stock", "driver reworked"]
        .iter()
        .map(|label| -> Result<MatchResult> {
            let l = nb.select(label, Some(1))?;
            let r = nb.select(label, Some(2))?;
            Ok(match_channels(
                &format!("{label}, left"),
                &l,
                &format!("{label}, right"),
                &r,
                &tol,
            ))
        })
        .collect::<Result<Vec<_>>>()?;
    let (predictions, circuits_skipped) = if !circuits {
        (Vec::new(), Some("left out (--no-circuits)".to_string()))
    } else if !crate::rig::spice::available() {
        (
            Vec::new(),
            Some(format!(
                "skipped: ngspice was not found (`{}`); install it (Debian: apt install ngspice) to see the example circuits predicted against the measurements",
                crate::rig::spice::binary().display()
            )),
        )
    } else {
        (predict(&nb, &work, cal, &mut progress)?, None)
    };
    let _ = std::fs::remove_dir_all(&work);
    Ok(DemoOutcome {
        notebook: nb.dir.clone(),
        comparison,
        matches,
        predictions,
        circuits_skipped,
        // Counted from the notebook itself, so a procedure added to the demo is counted too.
        runs: nb.runs()?.len(),
    })
}
