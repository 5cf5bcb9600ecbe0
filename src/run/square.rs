//! `ampnote square`: the square-wave response from a recorded square, or predicted from a
//! recorded sweep's response.

use super::Failure;
use crate::cli::SquareArgs;
use ampnote::analysis::square::{from_recording, from_response, SquareResult, SquareSource};
use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::Calibration;
use ampnote::capture::{select_channels, Capture};
use ampnote::error::Error;
use ampnote::report::square::SquareReport;
use ampnote::report::tone::ChannelError;
use ampnote::report::SCHEMA_VERSION;
use ampnote::signal::stimulus::{square_bandwidth_below, Kind};
use ampnote::warning::WarningCode as C;
use std::process::ExitCode;

/// The tone analysis's warnings that concern the recording itself (the rest speak of a sine's
/// distortion, which a square is not).
fn about_the_recording(code: C) -> bool {
    matches!(
        code,
        C::InputOverload
            | C::ShortCapture
            | C::FileLength
            | C::LevelJump
            | C::Dropout
            | C::PartlySteady
            | C::FrequencyUnstable
    )
}

pub fn run(args: &SquareArgs) -> Result<ExitCode, Failure> {
    let cal = args.common.prepare()?;
    if args.rig.rig.is_some() {
        // The rig's sweep runs from 10 Hz to 0.45 x the rate: say so before anything plays.
        let top = ampnote::signal::stimulus::default_sweep_stop_hz(args.rate);
        if let Some(f) = args.freq.iter().find(|&&f| !(10.0..top).contains(&f)) {
            return Err(format!(
                "--freq {f} Hz lies outside the sweep a rig plays here (10 Hz to {top:.0} Hz)"
            )
            .into());
        }
    }
    let recorded = super::capture_or_record(
        &args.capture,
        &args.rig,
        cal,
        "square",
        args.channel.get(),
        None,
        || super::rig_sweep(args.rate, args.level),
    )?;
    let cal = recorded.calibration_or(cal);
    let capture = recorded.capture.as_path();
    let stimulus = match (&recorded.stimulus, &args.stimulus) {
        (Some(p), _) | (None, Some(p)) => p.clone(),
        (None, None) => return Err(
            "give what was played with --stimulus (a square or a sweep `ampnote generate` wrote)"
                .into(),
        ),
    };
    let (stim, desc, info) = super::stimulus_for(&stimulus, "square or sweep", capture)?;
    let fs = info.sample_rate_hz as f64;
    let chosen = select_channels(info.channel_count, args.channel.get())?;
    // One analyser for every channel (the sweep's caches its transform plans across them).
    let hint = match desc.kind {
        Kind::Square { frequency_hz, .. } => Some(frequency_hz),
        _ => None,
    };
    let tone_analyzer = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: hint,
        ..ToneConfig::default()
    })?;
    let sweep_analyzer = ResponseAnalyzer::new(ResponseConfig::default())?;
    let played = stim
        .channel(desc.signal_channels[0])
        .ok_or("the stimulus's signal channel is missing from it")?;
    let mut channels = Vec::new();
    let mut channel_errors = Vec::new();
    for &ch in &chosen {
        let cap = Capture::read_channels(capture, args.common.accept_truncated, Some(&[ch]))?;
        let x = &cap.channels[0];
        let outcome = match desc.kind {
            Kind::Square { bandwidth_hz, .. } => {
                // The steady span and the fundamental as the recorder's clock has it.
                let tone = tone_analyzer.analyze(
                    &ChannelInput {
                        channel: ch,
                        samples: x,
                        sample_rate_hz: fs,
                        overload_threshold: cap.encoding.overload_threshold(),
                        resolution_bits: cap.encoding.resolution_bits(),
                    },
                    &Calibration::default(),
                );
                tone.and_then(|t| {
                    let from = ((t.analysed_from_s * fs) as usize).min(x.len());
                    let to = ((t.analysed_to_s * fs) as usize).clamp(from, x.len());
                    let fig = from_recording(&x[from..to], fs, t.fundamental_hz, bandwidth_hz)?;
                    Ok(SquareResult {
                        channel: ch,
                        source: SquareSource::Recorded,
                        squares: vec![fig],
                        warnings: t
                            .warnings
                            .into_iter()
                            .filter(|w| about_the_recording(w.code))
                            .collect(),
                    })
                })
            }
            Kind::Sweep { .. } => {
                let sp = SweepParams::from_description(&desc).expect("a sweep");
                sweep_analyzer
                    .analyze(ch, played, sp, x, fs, cap.encoding.overload_threshold())
                    .and_then(|r| {
                        let top = r.points.last().map_or(fs / 2.0, |p| p.frequency_hz);
                        let bw = square_bandwidth_below(top);
                        let mut warnings = r.warnings.clone();
                        let mut squares = Vec::new();
                        for &f in &args.freq {
                            match from_response(&r, f, bw) {
                                Ok(q) => squares.push(q),
                                // One square too fast for this sweep: the others still stand.
                                Err(e @ Error::SquareTooFast { .. }) => {
                                    warnings.push(C::BandNote.say(e.to_string()))
                                }
                                Err(e) => return Err(e),
                            }
                        }
                        Ok(SquareResult {
                            channel: ch,
                            source: SquareSource::FromSweep,
                            squares,
                            warnings,
                        })
                    })
            }
            _ => unreachable!("read_stimulus checked the kind"),
        };
        // The square analysis speaks of a period, not a channel: name it here.
        let outcome = outcome.map_err(|e| match e {
            Error::WrongKind {
                channel: 0,
                found,
                next,
            } => Error::WrongKind {
                channel: ch,
                found,
                next,
            },
            e => e,
        });
        match outcome {
            Ok(r) => channels.push(r),
            Err(err @ Error::InvalidSetting(_)) => return Err(err.into()),
            Err(err) => channel_errors.push(ChannelError {
                channel: ch,
                error: err.to_string(),
            }),
        }
    }
    ampnote::report::add_rig_notes(&mut channels, &recorded.notes);
    let mut keeper =
        super::Keeper::new(&args.common.save).with_rig(recorded.rig.clone(), recorded.predicted);
    keeper.add_each(
        &channels,
        cal,
        None,
        vec![
            ("stimulus.wav", stimulus.as_path()),
            ("capture.wav", capture),
        ],
    );
    let report = SquareReport {
        schema_version: SCHEMA_VERSION,
        file: capture.display().to_string(),
        first: channels.first().cloned(),
        channels,
        channel_errors,
    };
    super::print_then_keep(args.common.print.format(), &report, keeper)
}
