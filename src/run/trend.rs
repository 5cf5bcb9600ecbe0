//! `ampnote trend`: a steady tone followed block by block over a long capture.

use super::Failure;
use crate::cli::TrendArgs;
use ampnote::analysis::blocks;
use ampnote::analysis::tone::ToneAnalyzer;
use ampnote::capture::{select_channels, Capture};
use ampnote::report::trend::TrendReport;
use ampnote::report::SCHEMA_VERSION;
use std::process::ExitCode;

/// Shortest and longest block: a block must hold a resolvable tone, and a trend of one block
/// is not a trend (our choice: 50 ms to an hour).
const EVERY_RANGE_S: (f64, f64) = (0.05, 3600.0);

pub fn run(args: &TrendArgs) -> Result<ExitCode, Failure> {
    let a = &args.tone;
    if !(args.every.is_finite() && (EVERY_RANGE_S.0..=EVERY_RANGE_S.1).contains(&args.every)) {
        return Err(format!(
            "--every takes a block length from {} to {} s, got {}",
            EVERY_RANGE_S.0,
            EVERY_RANGE_S.1,
            ampnote::error::shown(args.every)
        )
        .into());
    }
    let cal = a.common.prepare()?;
    let config = a.tone_config()?;
    let channel = a.channel_choice()?;
    let analyzer = ToneAnalyzer::new(config)?;
    let recorded =
        super::capture_or_record(&a.capture, &a.rig, cal, "trend", channel, a.watts, || {
            let c = super::rig_common(a.rate, a.level, 0.01);
            super::to_played(ampnote::signal::stimulus::tone(&c, a.freq, a.seconds))
        })?;
    let cal = recorded.calibration_or(cal);
    let path = recorded.capture.as_path();
    let info = Capture::probe(path)?;
    let chosen = select_channels(info.channel_count, channel)?;
    // One channel at a time in compact storage; its blocks on every core.
    let run =
        blocks::each_stored_channel(path, &info, &chosen, a.common.accept_truncated, |input| {
            blocks::trend(&analyzer, input, &cal, args.every)
        })?;
    let reading = run.reading_warnings(&info);
    let (channels, channel_errors) = super::sort_channels(run.channels, &reading, &recorded.notes);
    let mut keeper =
        super::Keeper::new(&a.common.save).with_rig(recorded.rig.clone(), recorded.predicted);
    keeper.add_each(
        &channels,
        cal,
        Some(ampnote::notebook::AnalysisSettings::Tone(
            analyzer.config.clone(),
        )),
        vec![("capture.wav", path)],
    );
    let report = TrendReport {
        schema_version: SCHEMA_VERSION,
        file: path.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        channels,
        channel_errors,
    };
    super::print_then_keep(a.common.print.format(), &report, keeper)
}
