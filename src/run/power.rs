//! `ampnote power`: a staircase recorded to a file (the file rig), or run step by step on a rig;
//! the procedures are the library's [`ampnote::procedure::power`].

use super::Failure;
use crate::cli::PowerArgs;
use ampnote::capture::select_channels;
use ampnote::error::Error;
use ampnote::procedure::power::{run_staircase, staircase_from_recording, StaircaseSettings};
use ampnote::report::power::PowerReport;
use ampnote::report::tone::ChannelError;
use ampnote::report::SCHEMA_VERSION;
use ampnote::rig::{file::FileRig, Rig};
use ampnote::signal::stimulus::{Kind, Step};
use std::process::ExitCode;

/// What is played on each channel.
enum Plan {
    /// Step by step, one staircase per frequency, stopping at the limits.
    Stepped(Vec<StaircaseSettings>),
    /// A `generate steps` staircase played whole (on the file rig: its recording).
    Whole {
        signal: Vec<f64>,
        rate: u32,
        frequency_hz: f64,
        table: Vec<Step>,
    },
}

pub fn run(args: &PowerArgs) -> Result<ExitCode, Failure> {
    let flags = args.common.prepare()?;
    let (mut rig, plan): (Box<dyn Rig>, Plan) = match (&args.capture, &args.rig.rig) {
        (Some(_), Some(_)) => return Err("give a capture file or --rig, not both".into()),
        (None, None) => {
            return Err("give the capture of a `generate steps` stimulus (with --stimulus), or --rig sim to run on the simulated bench".into())
        }
        (None, Some(_)) => {
            // Every setting checked before the rig is opened or anything is played.
            let plans = args
                .freq
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
                .collect::<Result<_, _>>()?;
            let mut rig = args.rig.open(flags)?.expect("a rig was named");
            if let Some(l) = flags.load_ohms {
                rig.set_load(l)?;
            }
            (rig, Plan::Stepped(plans))
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
            let files = FileRig::new(path, flags, args.common.accept_truncated)?;
            super::same_rate(desc.sample_rate_hz, files.sample_rate_hz())?;
            let signal = stim
                .channel(desc.signal_channels[0])
                .ok_or("the stimulus's signal channel is missing from it")?
                .to_vec();
            let plan = Plan::Whole {
                signal,
                rate: desc.sample_rate_hz,
                frequency_hz,
                table: steps.clone(),
            };
            (Box::new(files), plan)
        }
    };
    let source = rig.describe();
    // What the results were computed with: the rig's calibration on a rig run.
    let used = rig.calibration();
    let chosen = select_channels(rig.channels(), args.channel.get())?;
    let progress = ampnote::progress::Progress::new(0, "steps");
    let mut results = Vec::new();
    let mut channel_errors = Vec::new();
    let staircases = match &plan {
        Plan::Stepped(each) => each.len(),
        Plan::Whole { .. } => 1,
    };
    for k in 0..staircases {
        for &ch in &chosen {
            let outcome = match &plan {
                Plan::Stepped(each) => run_staircase(rig.as_mut(), ch, &each[k], &progress),
                Plan::Whole {
                    signal,
                    rate,
                    frequency_hz,
                    table,
                } => staircase_from_recording(
                    rig.as_mut(),
                    ch,
                    (signal, *rate),
                    *frequency_hz,
                    table,
                    &used,
                ),
            };
            match outcome {
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
    let mut keeper =
        super::Keeper::new(&args.common.save).with_rig(Some(source.clone()), rig.predicts());
    let files = match (&args.capture, &args.stimulus) {
        (Some(c), Some(st)) => vec![("stimulus.wav", st.as_path()), ("capture.wav", c.as_path())],
        _ => Vec::new(),
    };
    keeper.add_each(&results, used, None, files);
    let report = PowerReport {
        schema_version: SCHEMA_VERSION,
        source,
        first: results.first().cloned(),
        results,
        channel_errors,
    };
    super::print_then_keep(args.common.print.format(), &report, keeper)
}
