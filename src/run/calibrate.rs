//! `ampnote calibrate`: walk the user through building a calibration profile, or take every
//! value as a flag.

use super::Failure;
use crate::cli::CalibrateArgs;
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::{
    AttenuatorSection, Calibration, InterfaceSection, LoadSection, LoopbackSection, Profile,
};
use ampnote::capture::Capture;
use ampnote::signal::stimulus::{self, Common};
use ampnote::signal::wav::{write_wav_described, WavFormat};
use std::io::{BufRead, IsTerminal, Write};
use std::process::ExitCode;

/// The calibration tone's level: low enough for any interface and amplifier input.
const TONE_DBFS: f64 = -20.0;

/// The usual cautions (REFERENCES.md, Safety; common practice). Local codes and licensed
/// practice come first.
pub const SAFETY: &str = "\
Before you connect anything (common practice; local electrical codes and licensed practice come first):
  - Tube amplifiers hold 250-500 V DC and more; filter capacitors stay charged after switch-off.
  - Never run a tube amplifier with its output unloaded: connect a non-inductive dummy load rated
    well above the power under test (twice is common practice).
  - Put a resistive attenuator (typically 20-30 dB) between the load and the interface input
    before connecting: amplifier outputs reach tens of volts, line inputs clip at 1-12 V rms.
  - Bridged (BTL) and many class-D outputs have no grounded terminal: never tie the interface
    ground to either terminal; use a differential input (and a 20 kHz low-pass for class D).
  - Above about 30 V rms / 60 V DC an output is hazardous to touch.
";

/// What a typed answer may be: the range of the calibration's one rule set
/// ([`ampnote::calibration::Calibration::validated`]), so an answer is checked when it is typed,
/// not after the last question.
#[derive(Clone, Copy)]
struct Range {
    lo: f64,
    hi: f64,
    unit: &'static str,
}

/// The meter reading of the -20 dBFS tone: a tenth of the output full scale (1 mV to 1 kV).
const METER: Range = Range {
    lo: 1e-4,
    hi: 100.0,
    unit: "V rms",
};
const FULL_SCALE: Range = Range {
    lo: 1e-3,
    hi: 1e3,
    unit: "V rms",
};
const RATIO: Range = Range {
    lo: 1.0,
    hi: 1e5,
    unit: "(amplifier V / interface V; 1 means no attenuator)",
};
const LOAD: Range = Range {
    lo: 0.1,
    hi: 1e5,
    unit: "ohm",
};

fn ask(prompt: &str, allowed: bool, range: Range) -> Result<Option<f64>, Failure> {
    if !allowed {
        return Ok(None);
    }
    let stdin = std::io::stdin();
    loop {
        eprint!("{prompt}");
        let _ = std::io::stderr().flush();
        let mut line = String::new();
        if stdin
            .lock()
            .read_line(&mut line)
            .map_err(|e| e.to_string())?
            == 0
        {
            return Ok(None);
        }
        let t = line.trim();
        if t.is_empty() {
            return Ok(None);
        }
        match t.parse::<f64>() {
            Ok(v) if v.is_finite() && v >= range.lo && v <= range.hi => return Ok(Some(v)),
            _ => eprintln!(
                "  please type a number between {} and {} {} (or press Enter to skip)",
                range.lo, range.hi, range.unit
            ),
        }
    }
}

/// The calibration tone's reading (997 Hz expected) from a looped-back capture.
fn tone_reading(
    samples: &[f64],
    rate: f64,
    overload: f64,
    bits: u32,
) -> Result<ampnote::analysis::tone::ToneResult, Failure> {
    ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: Some(997.0),
        ..ToneConfig::default()
    })?
    .analyze(
        &ChannelInput {
            channel: 1,
            samples,
            sample_rate_hz: rate,
            overload_threshold: overload,
            resolution_bits: bits,
        },
        &Calibration::default(),
    )
    .map_err(Failure::from)
}

/// Play the calibration tone through the live rig's channel 1, looped straight back: the reading,
/// and the meter value typed while it played (when `ask_meter`).
fn live_loopback(
    args: &CalibrateArgs,
    ask_meter: bool,
) -> Result<(ampnote::analysis::tone::ToneResult, Option<f64>), Failure> {
    let spec = args.rig.rig.as_deref().unwrap_or_default();
    if !spec.starts_with("card") {
        return Err("calibrate measures the interface itself: use --rig card with the interface output wired straight to its input (no amplifier)".into());
    }
    let mut rig = args
        .rig
        .open(Calibration::default())?
        .expect("a rig was named");
    let first = |l: &[usize]| l.first().copied().unwrap_or(1);
    eprintln!(
        "Wire interface output {} straight to input {} (no amplifier, no attenuator) for this step.",
        first(&args.rig.outputs),
        first(&args.rig.inputs)
    );
    let rate = 48_000u32;
    let amp = 10f64.powf(TONE_DBFS / 20.0);
    let w = 2.0 * std::f64::consts::PI * 997.0 / rate as f64;
    let (overload, bits) = (rig.overload_threshold(), rig.resolution_bits());
    if !ask_meter {
        let tone: Vec<f64> = (0..3 * rate as usize)
            .map(|i| amp * (w * i as f64).sin())
            .collect();
        let y = rig.play_and_record(1, &tone, rate)?;
        let r = tone_reading(&y[rate as usize / 2..], rate as f64, overload, bits)?;
        return Ok((r, None));
    }
    // Play the tone until the user has typed the meter reading.
    let table: Vec<f64> = (0..rate as usize)
        .map(|i| amp * (w * i as f64).sin())
        .collect();
    let (tx, rx) = std::sync::mpsc::channel();
    let mut tx = Some(tx);
    let mut last = Vec::new();
    let mut typed = None;
    rig.watch(1, &table, rate, rate as usize, rate as usize / 4, &mut |x| {
        last.clear();
        last.extend_from_slice(x);
        // Ask once the tone is actually coming back (after the pre-flight).
        if let Some(tx) = tx.take() {
            std::thread::spawn(move || {
                let _ = tx.send(ask(
                    "The tone plays now. Meter reading at the interface output (V rms), then Enter: ",
                    true,
                    METER,
                ));
            });
        }
        match rx.try_recv() {
            Ok(v) => {
                typed = Some(v);
                false
            }
            Err(_) => true,
        }
    })
    ?;
    let typed = typed.unwrap_or(Ok(None))?;
    if last.is_empty() {
        return Err("the loopback delivered no reading; nothing was written".into());
    }
    let r = tone_reading(&last, rate as f64, overload, bits)?;
    Ok((r, typed))
}

pub fn run(args: &CalibrateArgs) -> Result<ExitCode, Failure> {
    eprintln!("{SAFETY}");
    let interactive = !args.no_prompt && std::io::stdin().is_terminal();
    if let Some(path) = &args.tone {
        let c = Common {
            sample_rate_hz: 48_000,
            level_dbfs: TONE_DBFS,
            channels: 2,
            signal_channels: vec![1, 2],
            lead_s: 0.0,
            tail_s: 0.0,
            fade_s: 0.05,
        };
        let s = stimulus::tone(&c, 997.0, 30.0)?;
        write_wav_described(
            path,
            48_000,
            &s.channel_data(),
            WavFormat::Int { bits: 24 },
            1,
            Some(&s.description.to_json()),
        )?;
        eprintln!(
            "wrote {}: 997 Hz at {TONE_DBFS} dBFS. Play it with the interface output unconnected to the amplifier, read the output with a true-RMS meter, and record it looped straight back into the input.",
            path.display()
        );
    }
    // Interface output full scale: given, or from the meter reading of the -20 dBFS tone (asked
    // here, or while the live rig plays the tone).
    let meter = match args.meter_vrms {
        Some(v) => Some(v),
        None if args.output_fs_vrms.is_none() && args.rig.rig.is_none() => ask(
            "Meter reading at the interface output while the tone plays (V rms, Enter to skip): ",
            interactive,
            METER,
        )?,
        None => None,
    };
    let output_fs = args
        .output_fs_vrms
        .or(meter.map(|v| v * 10f64.powf(-TONE_DBFS / 20.0)));
    let tone_vrms = meter.or(output_fs.map(|v| v * 10f64.powf(TONE_DBFS / 20.0)));
    // Input full scale and the loopback floor from the looped-back tone: recorded through the
    // live rig, or a recording the user made.
    let mut input_fs = args.input_fs_vrms;
    let mut floor = LoopbackSection::default();
    let looped = match (&args.rig.rig, &args.loopback) {
        (Some(_), Some(_)) => return Err("give --loopback FILE or --rig card, not both".into()),
        (Some(_), None) => Some(live_loopback(args, meter.is_none() && interactive)?),
        (None, Some(path)) => {
            let cap = Capture::read_channels(path, false, Some(&[1]))?;
            let r = tone_reading(
                &cap.channels[0],
                cap.sample_rate_hz as f64,
                cap.encoding.overload_threshold(),
                cap.encoding.resolution_bits(),
            )?;
            Some((r, None))
        }
        (None, None) => None,
    };
    // A meter value typed while the live rig played the tone counts as --meter-vrms.
    let (output_fs, tone_vrms) = match looped.as_ref().and_then(|l| l.1) {
        Some(typed) => (
            args.output_fs_vrms
                .or(Some(typed * 10f64.powf(-TONE_DBFS / 20.0))),
            Some(typed),
        ),
        None => (output_fs, tone_vrms),
    };
    if let Some((r, _)) = looped {
        if input_fs.is_none() {
            let v = tone_vrms.ok_or("the loopback gives the input full scale only with the tone's voltage: give --meter-vrms or --output-fs-vrms")?;
            input_fs = Some(v / 10f64.powf(r.fundamental_dbfs / 20.0));
        }
        floor.thdn_db = Some((r.thdn_db * 10.0).round() / 10.0);
        floor.noise_dbfs = Some((r.noise_dbfs * 10.0).round() / 10.0);
        eprintln!(
            "loopback: {:.2} dBFS, THD+N {:.1} dB, noise {:.1} dBFS (the interface's own floor)",
            r.fundamental_dbfs, r.thdn_db, r.noise_dbfs
        );
    }
    if input_fs.is_none() {
        input_fs = ask(
            "Interface input full scale (V rms that reads 0 dBFS, Enter to skip): ",
            interactive,
            FULL_SCALE,
        )?;
    }
    let mut att = AttenuatorSection {
        ratio: args.attenuation,
        r_top_ohms: args.r_top,
        r_bottom_ohms: args.r_bottom,
        interface_input_ohms: args.input_impedance,
    };
    if att.ratio.is_none() && att.r_top_ohms.is_none() {
        att.ratio = ask(
            "Attenuator ratio, amplifier V / interface V (10 for 20 dB; Enter if none): ",
            interactive,
            RATIO,
        )?;
    }
    let load = match args.load_ohms {
        Some(l) => Some(l),
        None => ask(
            "Dummy-load resistance in ohms (Enter to skip): ",
            interactive,
            LOAD,
        )?,
    };
    let profile = Profile {
        name: args.name.clone(),
        interface: Some(InterfaceSection {
            output_fs_vrms: output_fs,
            input_fs_vrms: input_fs,
        }),
        attenuator: (att != AttenuatorSection::default()).then_some(att),
        load: load.map(|ohms| LoadSection { ohms: Some(ohms) }),
        loopback: (floor != LoopbackSection::default()).then_some(floor),
    };
    let cal = match profile.calibration() {
        Ok(c) => c,
        Err(err) if interactive => {
            // Keep what was typed: the answers go beside the profile, to correct and rename.
            let mut kept = args.out.clone().into_os_string();
            kept.push(".answers.toml");
            let kept = std::path::PathBuf::from(kept);
            let text = format!(
                "# answers typed into `ampnote calibrate`, not yet a valid profile: {err}\n{}",
                profile.to_toml()
            );
            let saved = ampnote::files::write_whole(&kept, text.as_bytes()).is_ok();
            return Err(if saved {
                format!(
                    "{err}; your answers are kept in {}: correct the value named and rename it to {}",
                    kept.display(),
                    args.out.display()
                )
            } else {
                err.to_string()
            }
            .into());
        }
        Err(err) => return Err(err.into()),
    };
    let mut missing = Vec::new();
    if cal.input_fs_vrms.is_none() {
        missing.push("--input-fs-vrms or --loopback");
    }
    if cal.load_ohms.is_none() {
        missing.push("--load-ohms");
    }
    let text = format!(
        "# ampnote calibration profile (format: calibration/README.md)\n{}",
        profile.to_toml()
    );
    ampnote::files::write_whole(&args.out, text.as_bytes())?;
    eprintln!("wrote {}", args.out.display());
    if !missing.is_empty() {
        eprintln!(
            "the profile still lacks {}: add them to the file or give them as flags",
            missing.join(", ")
        );
    }
    Ok(ExitCode::SUCCESS)
}
