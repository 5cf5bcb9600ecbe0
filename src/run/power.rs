//! `ampnote power`: a staircase from a capture, or run on a rig.

use super::Failure;
use crate::cli::PowerArgs;
use ampnote::capture::{select_channels, Capture};
use ampnote::error::Error;
use ampnote::procedure::align::find_envelope_lag;
use ampnote::procedure::power::{power_from_capture, run_staircase, StaircaseSettings};
use ampnote::report::power::PowerReport;
use ampnote::report::tone::ChannelError;
use ampnote::report::SCHEMA_VERSION;
use ampnote::signal::stimulus::Kind;
use std::process::ExitCode;

/// First sample of the staircase in the stimulus file (the lead silence's length).
fn first_start(steps: &[ampnote::signal::stimulus::Step]) -> usize {
    steps.first().map_or(0, |s| s.start_sample)
}

pub fn run(args: &PowerArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let flags = args.calibration.resolve(&args.save)?;
    let mut results = Vec::new();
    let mut channel_errors = Vec::new();
    let source;
    // What the results were computed with: the rig's calibration on a rig run.
    let mut used = flags;
    match (&args.capture, &args.rig.rig) {
        (Some(_), Some(_)) => return Err("give a capture file or --rig, not both".into()),
        (None, None) => {
            return Err("give the capture of a `generate steps` stimulus (with --stimulus), or --rig sim to run on the simulated bench".into())
        }
        (None, Some(_)) => {
            // Every setting checked before the rig is opened or anything is played.
            let freqs = &args.freq;
            let plans: Vec<StaircaseSettings> = freqs
                .iter()
                .map(|&f| {
                    StaircaseSettings {
                        frequency_hz: f,
                        sample_rate_hz: args.rate,
                        from_dbfs: args.from_dbfs,
                        step_db: args.step,
                        stop_thd_percent: args.stop_thd,
                        max_w: args.max_w,
                        settle_s: args.settle,
                        dwell_s: args.dwell,
                    }
                    .validated()
                })
                .collect::<Result<_, _>>()
                ?;
            let mut rig = args.rig.open(flags)?.expect("a rig was named");
            if let Some(l) = flags.load_ohms {
                rig.set_load(l)?;
            }
            source = rig.describe();
            used = rig.calibration();
            let chosen = select_channels(rig.channels(), args.channel.get())?;
            let progress = ampnote::progress::Progress::new(0, "steps");
            for settings in &plans {
                for &ch in &chosen {
                    match run_staircase(rig.as_mut(), ch, settings, &progress) {
                        Ok(mut r) => {
                            r.warnings.extend(rig.take_notes(ch));
                            results.push(r)
                        }
                        Err(err @ Error::InvalidSetting(_)) => return Err(err.into()),
                        Err(err) => channel_errors.push(ChannelError {
                            channel: ch,
                            error: err.to_string(),
                        }),
                    }
                }
            }
        }
        (Some(path), None) => {
            let stim_path = args
                .stimulus
                .as_ref()
                .ok_or("give the staircase file with --stimulus STEPS.wav (it tells the step levels and timing)")?;
            let (stim, desc) = super::read_stimulus(stim_path, "steps")?;
            let Kind::Steps {
                frequency_hz,
                ref steps,
                ..
            } = desc.kind
            else {
                unreachable!("read_stimulus checked the kind");
            };
            let info = Capture::probe(path)?;
            if info.sample_rate_hz != desc.sample_rate_hz {
                return Err(Error::SampleRateMismatch {
                    stimulus_hz: desc.sample_rate_hz,
                    capture_hz: info.sample_rate_hz,
                }.into());
            }
            source = path.display().to_string();
            let x = stim.channel(desc.signal_channels[0]).ok_or("the stimulus's signal channel is missing from it")?;
            let chosen = select_channels(info.channel_count, args.channel.get())?;
            for &ch in &chosen {
                let cap = Capture::read_channels(path, args.accept_truncated, Some(&[ch]))?;
                let fs = cap.sample_rate_hz as f64;
                // Where the staircase starts in the capture: its level envelope (10 ms blocks)
                // against the stimulus's, searched up to 2 s either way. Each step's window has
                // its settle time to spare, so 10 ms is precise enough.
                let block = (fs / 100.0) as usize;
                let latency = find_envelope_lag(&cap.channels[0], x, block, first_start(steps), (2.0 * fs) as usize);
                let lat = match latency {
                    Some((lag, r)) if r > 0.5 => lag,
                    _ => {
                        channel_errors.push(ChannelError {
                            channel: ch,
                            error: format!("channel {ch}: the staircase's first step was not found in the capture; check that this is the recording of {} and of the right channel", stim_path.display()),
                        });
                        continue;
                    }
                };
                match power_from_capture(
                    ch,
                    &cap.channels[0],
                    fs,
                    cap.encoding.overload_threshold(),
                    cap.encoding.resolution_bits(),
                    frequency_hz,
                    steps,
                    lat,
                    &flags,
                ) {
                    Ok(r) => results.push(r),
                    Err(err) => channel_errors.push(ChannelError {
                        channel: ch,
                        error: err.to_string(),
                    }),
                }
            }
        }
    }
    let mut keeper = super::Keeper::new(&args.save);
    for r in &results {
        let mut files = Vec::new();
        if let (Some(c), Some(st)) = (&args.capture, &args.stimulus) {
            files = vec![("stimulus.wav", st.as_path()), ("capture.wav", c.as_path())];
        }
        keeper.add(r.channel, used, None, files, r);
    }
    let report = PowerReport {
        schema_version: SCHEMA_VERSION,
        source,
        first: results.first().cloned(),
        results,
        channel_errors,
    };
    super::print_then_keep(super::Format::of(args.json, &args.csv), &report, keeper)
}
