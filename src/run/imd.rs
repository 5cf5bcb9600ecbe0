//! `ampnote imd`: intermodulation from a two-tone capture.

use super::Failure;
use crate::cli::ImdArgs;
use ampnote::analysis::blocks;
use ampnote::analysis::imd::{ImdAnalyzer, PairHint};
use ampnote::capture::{select_channels, Capture};
use ampnote::report::imd::ImdReport;
use ampnote::report::SCHEMA_VERSION;
use ampnote::signal::stimulus::Kind;
use std::process::ExitCode;

pub fn run(args: &ImdArgs) -> Result<ExitCode, Failure> {
    let cal = args.common.prepare()?;
    let recorded = super::capture_or_record(
        &args.capture,
        &args.rig,
        cal,
        "imd",
        args.channel.get(),
        None,
        || {
            let c = super::rig_common(args.rate, args.level, 0.01);
            let (m, lo, hi, ratio) = args.method.defaults();
            super::to_played(ampnote::signal::stimulus::two_tone(
                &c,
                m,
                lo,
                hi,
                ratio,
                args.seconds,
            ))
        },
    )?;
    let recorded_cal = recorded.calibration_or(cal);
    let notes = recorded.notes;
    let capture_path = recorded.capture.as_path();
    let stimulus = args.stimulus.clone().or(recorded.stimulus);
    let hint = match &stimulus {
        Some(path) => {
            let (_, desc) = super::read_stimulus(path, "twotone")?;
            let Kind::TwoTone {
                method,
                low_hz,
                high_hz,
                ..
            } = desc.kind
            else {
                unreachable!("read_stimulus checked the kind");
            };
            Some(PairHint {
                method,
                low_hz,
                high_hz,
                source: "stimulus description",
            })
        }
        None => None,
    };
    let info = Capture::probe(capture_path)?;
    let chosen = select_channels(info.channel_count, args.channel.get())?;
    let analyzer = ImdAnalyzer::new();
    let run = blocks::each_channel(
        capture_path,
        &info,
        &chosen,
        args.common.accept_truncated,
        |input| analyzer.analyze(input, hint),
        |input| blocks::imd(&analyzer, input, hint, blocks::BLOCK_SAMPLES),
    )?;
    // A truncated file (with --accept-truncated) says so beside its figures.
    let reading = run.reading_warnings(&info);
    let (channels, channel_errors) = super::sort_channels(run.channels, &reading, &notes);
    let mut keeper =
        super::Keeper::new(&args.common.save).with_rig(recorded.rig.clone(), recorded.predicted);
    let mut files = vec![("capture.wav", capture_path)];
    if let Some(st) = &stimulus {
        files.insert(0, ("stimulus.wav", st.as_path()));
    }
    keeper.add_each(&channels, recorded_cal, None, files);
    let report = ImdReport {
        schema_version: SCHEMA_VERSION,
        file: capture_path.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        first: channels.first().cloned(),
        channels,
        channel_errors,
    };
    super::print_then_keep(args.common.print.format(), &report, keeper)
}
