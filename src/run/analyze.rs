//! `ampnote analyze`: read a capture one channel at a time, analyse, render.

use super::Failure;
use crate::cli::AnalyzeArgs;
use ampnote::analysis::blocks;
use ampnote::analysis::tone::ToneAnalyzer;
use ampnote::capture::{select_channels, Capture};
use ampnote::report::tone::AnalyzeReport;
use ampnote::report::SCHEMA_VERSION;
use std::process::ExitCode;

pub fn run(args: &AnalyzeArgs) -> Result<ExitCode, Failure> {
    let cal = args.common.prepare()?;
    let config = args.tone_config()?;
    let channel = args.channel_choice()?;
    let analyzer = ToneAnalyzer::new(config)?;
    let recorded = super::capture_or_record(
        &args.capture,
        &args.rig,
        cal,
        "tone",
        channel,
        args.watts,
        || {
            let c = super::rig_common(args.rate, args.level, 0.01);
            super::to_played(ampnote::signal::stimulus::tone(&c, args.freq, args.seconds))
        },
    )?;
    let cal = recorded.calibration_or(cal);
    let notes = recorded.notes;
    let capture_path = recorded.capture.as_path();
    let info = Capture::probe(capture_path)?;
    let chosen = select_channels(info.channel_count, channel)?;

    // Channels in parallel; a long capture one channel at a time in compact storage, its blocks
    // in parallel (see ampnote::analysis::blocks).
    let run = blocks::each_channel(
        capture_path,
        &info,
        &chosen,
        args.common.accept_truncated,
        |input| analyzer.analyze(input, &cal),
        |input| blocks::tone(&analyzer, input, &cal, blocks::BLOCK_SAMPLES),
    )?;
    let (frames, truncated) = (run.frames, run.truncated);
    let reading = run.reading_warnings(&info);
    let (channels, channel_errors) = super::sort_channels(run.channels, &reading, &notes);
    let mut keeper =
        super::Keeper::new(&args.common.save).with_rig(recorded.rig.clone(), recorded.predicted);
    keeper.add_each(
        &channels,
        cal,
        Some(ampnote::notebook::AnalysisSettings::Tone(
            analyzer.config.clone(),
        )),
        vec![("capture.wav", capture_path)],
    );
    let report = AnalyzeReport {
        schema_version: SCHEMA_VERSION,
        file: capture_path.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        encoding: info.encoding,
        frames,
        channel_count: info.channel_count,
        truncated,
        channels,
        channel_errors,
    };
    super::print_then_keep(args.common.print.format(), &report, keeper)
}
