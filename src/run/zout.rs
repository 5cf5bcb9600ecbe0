//! `ampnote zout`: the two-load method, on two captures (the file rig) or on a rig; the
//! procedure itself is the library's [`ampnote::procedure::zout::measure`].

use super::Failure;
use crate::cli::ZoutArgs;
use ampnote::analysis::sweep::SweepParams;
use ampnote::capture::select_channels;
use ampnote::procedure::zout::{measure, ZoutDrive, ZoutPlan};
use ampnote::report::power::ZoutReport;
use ampnote::report::SCHEMA_VERSION;
use ampnote::rig::{file::FileRig, Rig};
use ampnote::signal::stimulus::{self, Common};
use std::process::ExitCode;

pub fn run(args: &ZoutArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let [ra, rb] = args.loads[..] else {
        return Err(format!(
            "--loads takes exactly two resistances (the rated load and about twice it), got {}",
            args.loads.len()
        )
        .into());
    };
    if args.rig.load_uf.is_some() {
        return Err("--load-uf cannot go with zout: the two-load method needs loads that are the resistances --loads names, and a capacitance across them is not".into());
    }
    let cal = args.calibration.resolve(&args.save)?;
    // The rig, the signal it plays and how to read it: a stimulus made here for a rig, the
    // stimulus file (a sweep) or none (steady tones at any frequency) for recordings.
    let (mut rig, signal, sweep, hint, rate): (Box<dyn Rig>, _, _, _, _) =
        match (args.rig.open(cal)?, &args.captures[..]) {
            (Some(_), [_, ..]) => return Err("give two captures or --rig, not both".into()),
            (Some(rig), []) => {
                let c = Common {
                    sample_rate_hz: args.rate,
                    level_dbfs: args.level,
                    channels: 1,
                    signal_channels: vec![1],
                    lead_s: 0.1,
                    tail_s: 0.5,
                    fade_s: if args.sweep { 0.0 } else { 0.01 },
                };
                let stim = if args.sweep {
                    // As `generate sweep` does: 0.45 x the rate, at most 40 kHz.
                    let top = (0.45 * args.rate as f64).min(40_000.0);
                    stimulus::sweep(&c, 10.0, top, 3.0)?
                } else {
                    stimulus::tone(&c, args.freq, 1.5)?
                };
                let sp = SweepParams::from_description(&stim.description);
                (rig, stim.signal, sp, Some(args.freq), args.rate)
            }
            (None, [a, b]) => {
                let files = FileRig::with_loads(&[(a, ra), (b, rb)], cal, false)?;
                let rate = files.sample_rate_hz();
                let (signal, sp) = match &args.stimulus {
                    Some(p) => {
                        let (stim, desc) = super::read_stimulus(p, "sweep")?;
                        super::same_rate(desc.sample_rate_hz, rate)?;
                        let x = stim
                            .channel(desc.signal_channels[0])
                            .ok_or("the stimulus's signal channel is missing from it")?;
                        (x.to_vec(), SweepParams::from_description(&desc))
                    }
                    None => (Vec::new(), None),
                };
                (Box::new(files), signal, sp, None, rate)
            }
            (None, _) => {
                return Err(
                    "give two captures (into the first load, then the second) or --rig sim".into(),
                )
            }
        };
    let plan = ZoutPlan {
        loads: [ra, rb],
        drive: match sweep {
            Some(params) => ZoutDrive::Sweep {
                signal: &signal,
                params,
            },
            None => ZoutDrive::Tone {
                signal: &signal,
                hint_hz: hint,
            },
        },
        sample_rate_hz: rate,
        watts: args.watts.map(|w| (w, args.level)),
    };
    let source = rig.describe();
    let chosen = select_channels(rig.channels(), args.channel.get())?;
    let mut results = Vec::new();
    for &ch in &chosen {
        let mut res = measure(rig.as_mut(), ch, &plan)?;
        res.warnings.extend(rig.take_notes(ch));
        results.push(res);
    }
    let mut keeper = super::Keeper::new(&args.save).with_rig(Some(source.clone()), rig.predicts());
    let files = match &args.captures[..] {
        [a, b] => vec![
            ("capture.wav", a.as_path()),
            ("capture-load-b.wav", b.as_path()),
        ],
        _ => Vec::new(),
    };
    keeper.add_each(&results, cal, None, files);
    let report = ZoutReport {
        schema_version: SCHEMA_VERSION,
        source,
        first: results.first().cloned(),
        results,
    };
    super::print_then_keep(args.print.format(), &report, keeper)
}
