//! `ampnote separation`: a sweep on one channel, every channel recorded; how far each undriven
//! channel stays below the driven one against frequency.

use super::Failure;
use crate::cli::SeparationArgs;
use ampnote::analysis::separation::{self, SeparationResult};
use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use ampnote::capture::Capture;
use ampnote::error::Error;
use std::fmt::Write as _;
use std::process::ExitCode;

/// What `ampnote separation --json` prints.
#[derive(serde::Serialize)]
struct SeparationReport<'a> {
    schema_version: u32,
    file: String,
    stimulus: String,
    #[serde(flatten)]
    result: &'a SeparationResult,
}

fn table(file: &str, r: &SeparationResult) -> String {
    let mut s = format!("{file}: channel {} driven\n", r.driven_channel);
    for c in &r.channels {
        let _ = writeln!(
            s,
            "\nChannel {} against channel {}",
            c.channel, r.driven_channel
        );
        match (c.at_least_db, c.at_1khz_db) {
            (Some(b), _) if c.points.is_empty() => {
                let _ = writeln!(
                    s,
                    "  separation  > {b:.1} dB over the sweep (its crosstalk is under its own noise)"
                );
            }
            (Some(b), _) => {
                let _ = writeln!(
                    s,
                    "  at 1 kHz    > {b:.1} dB (its crosstalk there is under its own floor)"
                );
            }
            (None, Some(k)) => {
                let _ = writeln!(s, "  at 1 kHz    {k:>7.1} dB");
            }
            (None, None) => {
                let _ = writeln!(s, "  at 1 kHz          -   (outside the sweep)");
            }
        }
        if let (Some(w), Some(f)) = (c.worst_db, c.worst_hz) {
            let _ = writeln!(s, "  worst       {w:>7.1} dB at {f:.0} Hz (20 Hz - 20 kHz)");
        }
        let pairs: Vec<(f64, f64)> = c
            .points
            .iter()
            .map(|p| (p.frequency_hz, p.separation_db))
            .collect();
        if let (Some(lo), Some(hi)) = (pairs.first(), pairs.last()) {
            for f in [20.0, 100.0, 1000.0, 10_000.0, 20_000.0] {
                if f >= lo.0 && f <= hi.0 {
                    let v = ampnote::analysis::sweep::interpolate_log(&pairs, f);
                    // Read between two points: under the floor if either is.
                    let floored = c
                        .points
                        .windows(2)
                        .find(|w| w[0].frequency_hz <= f && w[1].frequency_hz >= f)
                        .is_some_and(|w| w[0].limited_by.is_some() || w[1].limited_by.is_some());
                    let mark = if floored {
                        "  (at least: under the floor)"
                    } else {
                        ""
                    };
                    let _ = writeln!(s, "  {f:>8.0} Hz {v:>7.1} dB{mark}");
                }
            }
        }
    }
    for w in &r.warnings {
        let _ = writeln!(s, "  warning: {w}");
    }
    s
}

fn csv(r: &SeparationResult) -> String {
    let mut s = String::from("driven_channel,channel,frequency_hz,separation_db,limited_by\n");
    for c in &r.channels {
        for p in &c.points {
            let _ = writeln!(
                s,
                "{},{},{},{},{}",
                r.driven_channel,
                c.channel,
                p.frequency_hz,
                p.separation_db,
                p.limited_by.map_or("", |f| f.as_str())
            );
        }
    }
    s
}

pub fn run(args: &SeparationArgs) -> Result<ExitCode, Failure> {
    let cal = args.common.prepare()?;
    let recorded = super::capture_or_record_all(
        &args.capture,
        &args.rig,
        cal,
        "separation",
        args.driven,
        args.watts,
        || super::rig_sweep(args.rate, args.level),
    )?;
    let cal = recorded.calibration_or(cal);
    let capture_path = recorded.capture.as_path();
    let stimulus = match (&recorded.stimulus, &args.stimulus) {
        (Some(p), _) | (None, Some(p)) => p.clone(),
        (None, None) => {
            return Err("give the sweep that was played with --stimulus (the file `ampnote generate sweep` wrote)".into())
        }
    };
    let (stim, desc, info) = super::stimulus_for(&stimulus, "sweep", capture_path)?;
    let sweep = SweepParams::from_description(&desc).expect("a sweep");
    let x = stim
        .channel(desc.signal_channels.first().copied().unwrap_or(1))
        .ok_or("the stimulus's signal channel is missing from it")?;
    if info.channel_count < 2 {
        return Err(format!(
            "{} has one channel: separation needs the driven channel and at least one other, recorded together",
            capture_path.display()
        ).into());
    }
    if args.driven == 0 || args.driven > info.channel_count {
        return Err(format!(
            "--driven takes the channel the sweep was played into, 1..{}, got {}",
            info.channel_count, args.driven
        )
        .into());
    }
    let capture = Capture::read(capture_path, args.common.accept_truncated)?;
    let analyzer = ResponseAnalyzer::new(ResponseConfig::default())?;
    let captures: Vec<&[f64]> = capture.channels.iter().map(Vec::as_slice).collect();
    let mut result = separation::from_recording(
        &analyzer,
        &separation::Recording {
            stimulus: x,
            sweep,
            captures: &captures,
            driven: args.driven,
            fs: capture.sample_rate_hz as f64,
            overload_threshold: capture.encoding.overload_threshold(),
            resolution_bits: capture.encoding.resolution_bits(),
        },
    )
    .map_err(|err| match err {
        e @ (Error::WrongKind { .. } | Error::NoSuchChannel { .. }) => Failure::from(e),
        e => format!(
            "the driven channel {} could not be measured: {e}",
            args.driven
        )
        .into(),
    })?;
    result
        .warnings
        .extend(recorded.notes.iter().map(|(_, w)| w.clone()));
    let file = capture_path.display().to_string();
    let report = SeparationReport {
        schema_version: ampnote::report::SCHEMA_VERSION,
        file: file.clone(),
        stimulus: stimulus.display().to_string(),
        result: &result,
    };
    let format = args.common.print.format();
    super::report_to_stderr(
        format.json || format.csv.is_some(),
        result.warnings.iter().map(|w| (args.driven, w)),
        std::iter::empty(),
    );
    // The figures first, then the keep; a failed CSV write never costs the kept run.
    let printed = super::emit(
        &format,
        || serde_json::to_string_pretty(&report).expect("serializes") + "\n",
        || csv(&result),
        || table(&file, &result),
    );
    let mut keeper =
        super::Keeper::new(&args.common.save).with_rig(recorded.rig.clone(), recorded.predicted);
    keeper.add(
        args.driven,
        cal,
        None,
        vec![("stimulus.wav", &stimulus), ("capture.wav", capture_path)],
        &result,
    );
    keeper.commit()?;
    printed.map(|_| ExitCode::SUCCESS)
}
