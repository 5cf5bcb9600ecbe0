//! `ampnote generate`: make a stimulus and write it, with its description, whole or not at all.

use super::Failure;
use crate::cli::GenerateKind;
use ampnote::signal::stimulus;
use ampnote::signal::wav::write_wav_described;
use std::process::ExitCode;

pub fn run(kind: &GenerateKind) -> Result<ExitCode, Failure> {
    let (stim, common) = match kind {
        GenerateKind::Tone {
            freq,
            seconds,
            common,
        } => (
            stimulus::tone(&common.common(0.01)?, *freq, *seconds)?,
            common,
        ),
        GenerateKind::Square {
            freq,
            bandwidth,
            seconds,
            common,
        } => (
            stimulus::square(&common.common(0.0)?, *freq, *bandwidth, *seconds)?,
            common,
        ),
        GenerateKind::Steps {
            freq,
            start,
            stop,
            step,
            dwell,
            settle,
            common,
        } => (
            stimulus::steps(
                &{
                    if common.level.is_some() {
                        return Err("--level does not apply to a staircase: its levels run from --from to --to (dBFS)".into());
                    }
                    common.common(0.01)?
                },
                *freq,
                *start,
                *stop,
                *step,
                *dwell,
                *settle,
            )?,
            common,
        ),
        GenerateKind::Sweep {
            from,
            to,
            seconds,
            common,
        } => {
            let to = to.unwrap_or(stimulus::default_sweep_stop_hz(common.rate));
            (
                stimulus::sweep(&common.common(0.0)?, *from, to, *seconds)?,
                common,
            )
        }
        GenerateKind::Twotone {
            method,
            low,
            high,
            ratio,
            seconds,
            common,
        } => {
            let (m, dl, dh, dr) = method.defaults();
            let c = common.common(0.01)?;
            let s = stimulus::two_tone(
                &c,
                m,
                low.unwrap_or(dl),
                high.unwrap_or(dh),
                ratio.unwrap_or(dr),
                *seconds,
            )?;
            (s, common)
        }
    };
    let format = common.format()?;
    let d = &stim.description;
    write_wav_described(
        &common.out,
        d.sample_rate_hz,
        &stim.channel_data(),
        format,
        common.seed,
        Some(&d.to_json()),
    )?;
    eprintln!(
        "wrote {}: {:.3} s, {} Hz, {} channel(s) (signal on {:?}), {:.1} dBFS",
        common.out.display(),
        d.total_samples as f64 / d.sample_rate_hz as f64,
        d.sample_rate_hz,
        d.channels,
        d.signal_channels,
        d.level_dbfs
    );
    Ok(ExitCode::SUCCESS)
}
