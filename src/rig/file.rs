//! The file rig: the user's own player and recorder. The stimulus was played (from a file
//! `ampnote generate` wrote) and the amplifier's output recorded by any recorder; the rig hands
//! the procedure that recording when asked to "play". With two loads (the two-load output
//! impedance) it holds one recording per load and `set_load` picks between them.
//!
//! Unlike the simulated and live rigs, a recording is returned as it is: its length and its
//! latency are the recorder's. The procedures that run on files find the stimulus in it (a tone
//! by its line, a sweep by deconvolution, a staircase by its level envelope).

use super::Rig;
use crate::calibration::Calibration;
use crate::capture::{Capture, SourceInfo};
use crate::error::{Error, Result};
use crate::warning::{Warning, WarningCode as C};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// One recording, and the load it was made into (`None`: whatever load the bench had).
#[derive(Debug)]
struct Take {
    path: PathBuf,
    load_ohms: Option<f64>,
    info: SourceInfo,
}

/// Recordings standing in for a rig.
#[derive(Debug)]
pub struct FileRig {
    takes: Vec<Take>,
    current: usize,
    accept_truncated: bool,
    calibration: Calibration,
    /// The recordings' reading warnings (truncated, open length), per channel, once each.
    notes: BTreeMap<usize, Vec<Warning>>,
}

impl FileRig {
    /// One recording made into the bench's load.
    pub fn new(path: &Path, calibration: Calibration, accept_truncated: bool) -> Result<FileRig> {
        FileRig::build(vec![(path, None)], calibration, accept_truncated)
    }

    /// One recording per load, the same stimulus into each (the two-load method). The
    /// recordings must share a rate and hold the same channels.
    pub fn with_loads(
        takes: &[(&Path, f64)],
        calibration: Calibration,
        accept_truncated: bool,
    ) -> Result<FileRig> {
        let takes = takes.iter().map(|&(p, r)| (p, Some(r))).collect();
        FileRig::build(takes, calibration, accept_truncated)
    }

    fn build(
        takes: Vec<(&Path, Option<f64>)>,
        calibration: Calibration,
        accept_truncated: bool,
    ) -> Result<FileRig> {
        let takes = takes
            .into_iter()
            .map(|(p, load_ohms)| {
                Ok(Take {
                    path: p.to_path_buf(),
                    load_ohms,
                    info: Capture::probe(p)?,
                })
            })
            .collect::<Result<Vec<_>>>()?;
        let first = &takes[0].info;
        for t in &takes[1..] {
            let differ = |detail: String| Error::TakesDiffer {
                first: takes[0].path.clone(),
                other: t.path.clone(),
                detail,
            };
            if t.info.sample_rate_hz != first.sample_rate_hz {
                return Err(differ(format!(
                    "{} Hz against {} Hz",
                    first.sample_rate_hz, t.info.sample_rate_hz
                )));
            }
            if t.info.channel_count != first.channel_count {
                return Err(differ(format!(
                    "{} channel(s) against {}",
                    first.channel_count, t.info.channel_count
                )));
            }
        }
        Ok(FileRig {
            takes,
            current: 0,
            accept_truncated,
            calibration,
            notes: BTreeMap::new(),
        })
    }

    /// The recordings' sample rate.
    pub fn sample_rate_hz(&self) -> u32 {
        self.takes[0].info.sample_rate_hz
    }

    fn take(&self) -> &Take {
        &self.takes[self.current]
    }
}

impl Rig for FileRig {
    fn describe(&self) -> String {
        let each: Vec<String> = self
            .takes
            .iter()
            .map(|t| match t.load_ohms {
                Some(r) => format!("{} ({r} ohm)", t.path.display()),
                None => t.path.display().to_string(),
            })
            .collect();
        each.join(" and ")
    }

    fn calibration(&self) -> Calibration {
        self.calibration
    }

    fn channels(&self) -> usize {
        self.takes[0].info.channel_count
    }

    fn overload_threshold(&self) -> f64 {
        self.take().info.encoding.overload_threshold()
    }

    fn resolution_bits(&self) -> u32 {
        self.take().info.encoding.resolution_bits()
    }

    /// Picks the recording made into `ohms`. A single recording made into the bench's load
    /// serves any load (the file cannot say which it was).
    fn set_load(&mut self, ohms: f64) -> Result<()> {
        if self.takes.iter().all(|t| t.load_ohms.is_none()) {
            return Ok(());
        }
        let found = self.takes.iter().position(|t| {
            t.load_ohms
                .is_some_and(|r| (r - ohms).abs() <= 1e-9 * r.abs().max(ohms.abs()))
        });
        match found {
            Some(i) => {
                self.current = i;
                Ok(())
            }
            None => Err(Error::NoTakeForLoad {
                ohms,
                given: self.describe(),
            }),
        }
    }

    /// The recording of `channel` into the current load. `stimulus` is not played (the
    /// recorder's player did that); only its rate is checked against the recording's.
    fn play_and_record(
        &mut self,
        channel: usize,
        _stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>> {
        let take = self.take();
        if take.info.sample_rate_hz != sample_rate_hz {
            return Err(Error::SampleRateMismatch {
                stimulus_hz: sample_rate_hz,
                capture_hz: take.info.sample_rate_hz,
            });
        }
        let cap = Capture::read_channels(&take.path, self.accept_truncated, Some(&[channel]))?;
        let mut notes = Vec::new();
        if cap.truncated {
            notes.push(C::FileLength.say(format!(
                "{} was truncated: only its complete frames were analysed",
                take.path.display()
            )));
        }
        notes.extend(
            take.info
                .length_warning()
                .map(|m| C::FileLength.say(format!("{}: {m}", take.path.display()))),
        );
        let kept = self.notes.entry(channel).or_default();
        for n in notes {
            if !kept.contains(&n) {
                kept.push(n);
            }
        }
        Ok(cap.channels.into_iter().next().unwrap_or_default())
    }

    fn shares_clock(&self) -> bool {
        false
    }

    fn take_notes(&mut self, channel: usize) -> Vec<Warning> {
        self.notes.remove(&channel).unwrap_or_default()
    }
}
