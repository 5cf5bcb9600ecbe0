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

/// Below this impulse-response signal-to-noise ratio an undriven channel's response is its noise,
/// not its crosstalk (our choice: 20 dB, where the noise moves a reading by 1 dB at most).
const MIN_CROSSTALK_SNR_DB: f64 = 20.0;

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
            (Some(b), _) => {
                let _ = writeln!(
                    s,
                    "  separation  > {b:.1} dB over the sweep (its crosstalk is under its own noise)"
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
                    let _ = writeln!(s, "  {f:>8.0} Hz {v:>7.1} dB");
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
    let mut s = String::from("driven_channel,channel,frequency_hz,separation_db\n");
    for c in &r.channels {
        for p in &c.points {
            let _ = writeln!(
                s,
                "{},{},{},{}",
                r.driven_channel, c.channel, p.frequency_hz, p.separation_db
            );
        }
    }
    s
}

/// RMS level, dBFS, of `x[range]` in windows of `w` samples.
fn window_levels(x: &[f64], range: std::ops::Range<usize>, w: usize) -> Vec<f64> {
    let end = range.end.min(x.len());
    (range.start..end)
        .step_by(w.max(1))
        .map(|a| {
            let part = &x[a..(a + w).min(end)];
            let ms = part.iter().map(|v| v * v).sum::<f64>() / part.len().max(1) as f64;
            10.0 * (ms / 0.5).max(1e-300).log10()
        })
        .collect()
}

pub fn run(args: &SeparationArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let cal = args.calibration.resolve(&args.save)?;
    let (stim, desc, info) = super::stimulus_for(&args.stimulus, "sweep", &args.capture)?;
    let sweep = SweepParams::from_description(&desc).expect("a sweep");
    let x = stim
        .channel(desc.signal_channels.first().copied().unwrap_or(1))
        .ok_or("the stimulus's signal channel is missing from it")?;
    if info.channel_count < 2 {
        return Err(format!(
            "{} has one channel: separation needs the driven channel and at least one other, recorded together",
            args.capture.display()
        ).into());
    }
    if args.driven == 0 || args.driven > info.channel_count {
        return Err(format!(
            "--driven takes the channel the sweep was played into, 1..{}, got {}",
            info.channel_count, args.driven
        )
        .into());
    }
    let capture = Capture::read(&args.capture, args.accept_truncated)?;
    let fs = capture.sample_rate_hz as f64;
    let analyzer = ResponseAnalyzer::new(ResponseConfig::default())?;
    let analyse = |ch: usize| {
        analyzer.analyze(
            ch,
            x,
            sweep,
            capture.channel(ch).expect("read"),
            fs,
            capture.encoding.overload_threshold(),
        )
    };
    let driven = analyse(args.driven).map_err(|err| {
        format!(
            "the driven channel {} could not be measured: {err}",
            args.driven
        )
    })?;
    // Where the sweep lies in the capture, for the level bound of an unmeasurable channel.
    let lat = driven.latency_samples.round() as isize;
    let shift = |i: usize| (i as isize + lat).max(0) as usize;
    let span = shift(sweep.start_sample)..shift(sweep.end_sample);
    let w = (0.05 * fs) as usize;
    let driven_levels = window_levels(capture.channel(args.driven).expect("read"), span.clone(), w);
    let mut result = SeparationResult {
        driven_channel: args.driven,
        channels: Vec::new(),
        warnings: driven.warnings.clone(),
    };
    for ch in (1..=capture.channel_count).filter(|&c| c != args.driven) {
        let measured = analyse(ch)
            .ok()
            .filter(|r| r.impulse_snr_db >= MIN_CROSSTALK_SNR_DB);
        let c = match measured {
            Some(r) => separation::between(&driven, &r),
            None => {
                // Over the windows where the sweep plays at full level (the fade-in and the
                // band edges left out): in each, the crosstalk is at most all the channel holds.
                let other = window_levels(capture.channel(ch).expect("read"), span.clone(), w);
                let top = driven_levels
                    .iter()
                    .copied()
                    .fold(f64::NEG_INFINITY, f64::max);
                let bound = driven_levels
                    .iter()
                    .zip(&other)
                    .filter(|(d, _)| **d >= top - 10.0)
                    .map(|(d, o)| d - o)
                    .fold(f64::INFINITY, f64::min);
                separation::at_least(ch, 0.0, -bound)
            }
        };
        if c.at_1khz_db.is_some_and(|s| s < 0.0) {
            return Err(Error::WrongKind {
                channel: ch,
                found: format!(
                    "it carries the sweep {:.1} dB louder than channel {} at 1 kHz",
                    -c.at_1khz_db.unwrap_or(0.0),
                    args.driven
                ),
                next: format!(
                    "Check --driven: the channel the sweep was played into is probably {ch}."
                ),
            }
            .into());
        }
        result.channels.push(c);
    }
    let file = args.capture.display().to_string();
    let report = SeparationReport {
        schema_version: ampnote::report::SCHEMA_VERSION,
        file: file.clone(),
        stimulus: args.stimulus.display().to_string(),
        result: &result,
    };
    let format = args.print.format();
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
    let mut keeper = super::Keeper::new(&args.save);
    keeper.add(
        args.driven,
        cal,
        None,
        vec![
            ("stimulus.wav", &args.stimulus),
            ("capture.wav", &args.capture),
        ],
        &result,
    );
    keeper.commit()?;
    printed.map(|_| ExitCode::SUCCESS)
}
