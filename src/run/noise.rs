//! `ampnote noise`: noise and hum with no signal.

use super::Failure;
use crate::cli::NoiseArgs;
use ampnote::analysis::blocks;
use ampnote::analysis::noise::{NoiseAnalyzer, NoiseResult};
use ampnote::capture::{select_channels, Capture};
use ampnote::report::tone::{fmt_volts, ChannelError};
use serde::Serialize;
use std::fmt::Write as _;
use std::process::ExitCode;

/// What `ampnote noise` prints; the first channel's fields repeated at the top level.
#[derive(Serialize)]
struct NoiseReport {
    schema_version: u32,
    file: String,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    first: Option<NoiseResult>,
    channels: Vec<NoiseResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    channel_errors: Vec<ChannelError>,
}

/// One row per channel.
fn csv(r: &NoiseReport) -> String {
    use ampnote::report::csv_num as n;
    let mut s = String::from("channel,duration_s,band_low_hz,band_high_hz,noise_dbfs,noise_a_dbfs,hum_and_noise_dbfs,noise_vrms,noise_a_vrms,hum_and_noise_vrms,snr_re_1w_db,snr_a_re_1w_db,mains_hz,dc_offset,overload_samples\n");
    for c in &r.channels {
        let _ = writeln!(
            s,
            "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
            c.channel,
            c.duration_s,
            c.band_hz[0],
            c.band_hz[1],
            c.noise_dbfs,
            c.noise_a_dbfs,
            c.hum_and_noise_dbfs,
            n(c.noise_vrms),
            n(c.noise_a_vrms),
            n(c.hum_and_noise_vrms),
            n(c.snr_re_1w_db),
            n(c.snr_a_re_1w_db),
            c.mains_hz,
            c.dc_offset,
            c.overload_samples
        );
    }
    s
}

fn table(r: &NoiseReport) -> String {
    let mut s = format!("{}\n", r.file);
    for c in &r.channels {
        let v = |x: Option<f64>| x.map_or(String::new(), |v| format!("   {} rms", fmt_volts(v)));
        let _ = writeln!(
            s,
            "\nChannel {} ({:.2} s, band {:.0}-{:.0} Hz)",
            c.channel, c.duration_s, c.band_hz[0], c.band_hz[1]
        );
        let _ = writeln!(
            s,
            "  Noise, flat        {:>8.2} dBFS{}",
            c.noise_dbfs,
            v(c.noise_vrms)
        );
        let _ = writeln!(
            s,
            "  Noise, A-weighted  {:>8.2} dBFS{}",
            c.noise_a_dbfs,
            v(c.noise_a_vrms)
        );
        let _ = writeln!(
            s,
            "  Hum and noise      {:>8.2} dBFS{}",
            c.hum_and_noise_dbfs,
            v(c.hum_and_noise_vrms)
        );
        if let (Some(f), Some(a)) = (c.snr_re_1w_db, c.snr_a_re_1w_db) {
            let _ = writeln!(
                s,
                "  S/N re 1 W         {f:>8.2} dB flat, {a:.2} dB A-weighted"
            );
        }
        let _ = writeln!(s, "  Mains {} Hz ({})", c.mains_hz, c.mains_source);
        for h in &c.hum {
            let _ = writeln!(
                s,
                "  {:>6.0} Hz {:>9.2} dBFS{}{}",
                h.frequency_hz,
                h.level_dbfs,
                v(h.level_vrms),
                if h.at_noise_floor {
                    "  (noise floor)"
                } else {
                    ""
                }
            );
        }
        s.push_str(&ampnote::report::tone::oscillation_lines(
            &c.oscillations,
            &c.oscillation_search,
        ));
        for w in &c.warnings {
            let _ = writeln!(s, "  warning: {w}");
        }
    }
    s
}

pub fn run(args: &NoiseArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let cal = args.calibration.resolve(&args.save)?;
    let (lo, hi) = (args.band.low_hz, args.band.high_hz);
    let mains = args.mains.0;
    let recorded = super::capture_or_record(
        &args.capture,
        &args.rig,
        cal,
        "noise",
        args.channel.get(),
        None,
        || {
            ampnote::capture::check_rate(args.rate)?;
            if !(args.seconds >= 0.5 && args.seconds <= 600.0) {
                return Err(format!(
                    "--seconds takes 0.5 to 600 s of listening, got {}",
                    args.seconds
                )
                .into());
            }
            Ok(super::Played {
                signal: vec![0.0; (args.seconds * args.rate as f64) as usize],
                rate: args.rate,
                description: None,
            })
        },
    )?;
    let cal = recorded.calibration_or(cal);
    let notes = recorded.notes;
    let capture_path = recorded.capture.as_path();
    let info = Capture::probe(capture_path)?;
    let chosen = select_channels(info.channel_count, args.channel.get())?;
    let analyzer = NoiseAnalyzer::new();
    let mut channels = Vec::new();
    let mut channel_errors = Vec::new();
    let mut keeper =
        super::Keeper::new(&args.save).with_rig(recorded.rig.clone(), recorded.predicted);
    let run = blocks::each_channel(
        capture_path,
        &info,
        &chosen,
        false,
        |input| analyzer.analyze(input, (lo, hi), mains, &cal),
        |input| {
            blocks::noise(
                &analyzer,
                input,
                (lo, hi),
                mains,
                &cal,
                blocks::BLOCK_SAMPLES,
            )
        },
    )?;
    let reading = run.reading_warnings(&info);
    for (ch, result) in run.channels {
        match result {
            Ok(mut r) => {
                r.warnings.extend(reading.iter().cloned());
                ampnote::report::add_rig_notes(std::slice::from_mut(&mut r), &notes);
                keeper.add(ch, cal, None, vec![("capture.wav", capture_path)], &r);
                channels.push(r)
            }
            Err(err) => channel_errors.push(ChannelError {
                channel: ch,
                error: err.to_string(),
            }),
        }
    }
    let report = NoiseReport {
        schema_version: ampnote::report::SCHEMA_VERSION,
        file: capture_path.display().to_string(),
        first: channels.first().cloned(),
        channels,
        channel_errors,
    };
    // The figures are printed first, so a failed keep never hides what was measured.
    let code = super::finish(
        args.print.format(),
        &report.channels,
        &report.channel_errors,
        || serde_json::to_string_pretty(&report).expect("serializes") + "\n",
        || csv(&report),
        || table(&report),
    );
    keeper.commit()?;
    code
}
