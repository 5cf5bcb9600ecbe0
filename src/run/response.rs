//! `ampnote response`: a sweep capture against the sweep file, one channel at a time.

use super::Failure;
use crate::cli::ResponseArgs;
use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use ampnote::capture::{select_channels, Capture};
use ampnote::report::response::ResponseReport;
use ampnote::report::tone::ChannelError;
use ampnote::report::SCHEMA_VERSION;
use ampnote::signal::stimulus::Kind;
use std::process::ExitCode;

/// The interface's loopback response from the profile, if it gives one.
fn loopback_response(args: &ResponseArgs) -> Result<Vec<(f64, f64)>, Failure> {
    let Some(path) = &args.calibration.profile else {
        return Ok(Vec::new());
    };
    let profile = ampnote::calibration::Profile::load(path)?;
    let mut pairs: Vec<(f64, f64)> = profile
        .loopback
        .and_then(|l| l.response)
        .unwrap_or_default()
        .into_iter()
        .map(|[f, db]| (f, db))
        .collect();
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    Ok(pairs)
}

pub fn run(args: &ResponseArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let cal = args.calibration.resolve(&args.save)?;
    let analyzer = ResponseAnalyzer::new(ResponseConfig {
        reference_hz: args.reference,
        points_per_octave: args.points_per_octave,
        smoothing: args.smooth,
        max_harmonic: args.harmonics,
        correction_db: loopback_response(args)?,
        ..ResponseConfig::default()
    })?;
    let recorded = super::capture_or_record(
        &args.capture,
        &args.rig,
        cal,
        "response",
        args.channel.get(),
        None,
        || {
            // Sweeps fade in only, over a few periods of the start, and need a tail.
            let c = ampnote::signal::stimulus::Common {
                tail_s: 0.3,
                ..super::rig_common(args.rate, args.level, 2.0 / args.from_hz)
            };
            let to = args
                .to_hz
                .unwrap_or(ampnote::signal::stimulus::default_sweep_stop_hz(args.rate));
            super::to_played(ampnote::signal::stimulus::sweep(
                &c,
                args.from_hz,
                to,
                args.seconds,
            ))
        },
    )?;
    let cal = recorded.calibration_or(cal);
    let (capture_path, notes) = (recorded.capture, recorded.notes);
    let stimulus_path = match (&args.stimulus, recorded.stimulus) {
        (_, Some(p)) => p,
        (Some(p), None) => p.clone(),
        (None, None) => {
            return Err("give the sweep file with --stimulus SWEEP.wav (the one `ampnote generate sweep` wrote)".into())
        }
    };
    let (capture_path, stimulus_path) = (capture_path.as_path(), stimulus_path.as_path());
    let (stim, desc) = super::read_stimulus(stimulus_path, "sweep")?;
    let Kind::Sweep {
        start_hz,
        stop_hz,
        duration_s,
        ..
    } = desc.kind
    else {
        unreachable!("read_stimulus checked the kind");
    };
    let sweep = SweepParams::from_description(&desc).expect("a sweep");
    let signal_ch = desc.signal_channels.first().copied().unwrap_or(1);
    let x = stim
        .channel(signal_ch)
        .ok_or("the stimulus's signal channel is missing from it")?;

    let info = Capture::probe(capture_path)?;
    super::same_rate(desc.sample_rate_hz, info.sample_rate_hz)?;
    let chosen = select_channels(info.channel_count, args.channel.get())?;
    let mut channels = Vec::new();
    let mut channel_errors = Vec::new();
    for &ch in &chosen {
        let cap = Capture::read_channels(capture_path, args.accept_truncated, Some(&[ch]))?;
        match analyzer.analyze(
            ch,
            x,
            sweep,
            &cap.channels[0],
            cap.sample_rate_hz as f64,
            cap.encoding.overload_threshold(),
        ) {
            Ok(r) => channels.push(r),
            Err(err) => channel_errors.push(ChannelError {
                channel: ch,
                error: err.to_string(),
            }),
        }
    }
    ampnote::report::add_rig_notes(&mut channels, &notes);
    let mut keeper =
        super::Keeper::new(&args.save).with_rig(recorded.rig.clone(), recorded.predicted);
    for r in &channels {
        keeper.add(
            r.channel,
            cal,
            Some(ampnote::notebook::AnalysisSettings::Response(
                analyzer.config.clone(),
            )),
            vec![
                ("stimulus.wav", stimulus_path),
                ("capture.wav", capture_path),
            ],
            r,
        );
    }
    let report = ResponseReport {
        schema_version: SCHEMA_VERSION,
        file: capture_path.display().to_string(),
        stimulus: stimulus_path.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        sweep_start_hz: start_hz,
        sweep_stop_hz: stop_hz,
        sweep_duration_s: duration_s,
        first: channels.first().cloned(),
        absolute_gain_db: channels
            .first()
            .and_then(|c| cal.absolute_gain_db(c.reference_gain_db)),
        channels,
        channel_errors,
    };
    if let Some(path) = &args.csv {
        ampnote::files::write_whole(path, report.to_csv().as_bytes())?;
    }
    // (--csv here is a file written beside the table or JSON, see above.)
    super::print_then_keep(
        super::Format {
            json: args.json,
            csv: None,
        },
        &report,
        keeper,
    )
}
