//! The notebook: one folder per amplifier, holding its settings and every run.
//!
//! ```text
//! DIR/notebook.toml                 amplifier, channels, load, calibration (the profile's values)
//! DIR/runs/0001-stock-ch1-tone/     one run: run.json (metadata), result.json, stimulus.wav,
//!                                   capture.wav (if the procedure had them)
//! ```
//! A run is assembled under `runs/.partial-*` and renamed into place only when complete, so an
//! interrupted write leaves nothing that `log` would list; an existing run is never overwritten.
//! Re-analysis writes `result-<time>.json` beside the old result.

use crate::calibration::{Calibration, Profile};
use crate::error::{Error, Result};
use crate::results::{Procedure, RunResult};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Version of the notebook layout.
pub const NOTEBOOK_VERSION: u32 = 1;

/// `notebook.toml`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NotebookInfo {
    pub ampnote_notebook: u32,
    pub amplifier: String,
    pub channels: usize,
    pub load_ohms: Option<f64>,
    pub created: String,
    /// The calibration in force (a copy of the profile's values, so the notebook stands alone).
    pub calibration: Option<Profile>,
}

/// The analysis settings a run was made with, so that a re-analysis repeats them (the band, the
/// weighting, the harmonics counted, the reference frequency...).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "analysis", rename_all = "snake_case")]
pub enum AnalysisSettings {
    Tone(crate::analysis::tone::ToneConfig),
    Response(crate::analysis::sweep::ResponseConfig),
}

/// `run.json`: what a run is.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunMeta {
    pub id: String,
    pub label: String,
    pub channel: usize,
    /// What the run measured (`"tone"`, `"power"`, ...); its result is read as that procedure's.
    pub procedure: Procedure,
    pub time: String,
    #[serde(default)]
    pub notes: String,
    /// Free-form settings (mains voltage, valve set, rig, ...).
    #[serde(default)]
    pub settings: BTreeMap<String, String>,
    /// The calibration the result was computed with.
    #[serde(default)]
    pub calibration: Calibration,
    /// The analysis settings (absent in runs made before they were kept, and for procedures
    /// whose settings follow from the stimulus).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub analysis: Option<AnalysisSettings>,
    /// The measurement this run belongs to (the channels one command measured together); a run
    /// whose siblings are missing is listed as incomplete, never as a whole measurement.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub measurement: Option<Measurement>,
    /// Files in the run folder.
    pub files: Vec<String>,
    /// A prediction (the circuit rig: a simulator run on a netlist), not a measurement.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub predicted: bool,
}

/// The channels one command measured together, kept as one measurement.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Measurement {
    pub id: String,
    pub channels: Vec<usize>,
    /// How many runs the measurement holds (a power run at several frequencies has several
    /// per channel).
    pub runs: usize,
}

/// A run folder that cannot be read as a run: which file, and why.
#[derive(Debug, Clone, Serialize)]
pub struct Damaged {
    pub dir: PathBuf,
    pub file: String,
    pub reason: String,
}

/// Everything in a notebook's `runs/` folder.
#[derive(Debug, Clone, Default)]
pub struct Scan {
    /// Complete runs of complete measurements, in id order.
    pub runs: Vec<Run>,
    /// Runs whose measurement lacks channels (an interrupted write): listed, never compared.
    pub incomplete: Vec<Run>,
    pub damaged: Vec<Damaged>,
    /// Temporary folders left by writes that never finished (removed at the next write).
    pub leftovers: usize,
}

/// Labels are kept whole in `run.json`; folder names use at most this many characters of them.
const SLUG_CHARS: usize = 40;

/// The longest label accepted (characters).
pub const MAX_LABEL_CHARS: usize = 1000;

/// A label or note made safe to print: control characters and the bidirectional-override
/// characters (which can reorder or hide what a terminal shows) written as `\u{..}` escapes.
pub fn printable(text: &str) -> String {
    text.chars()
        .flat_map(|c| {
            let hide = c.is_control()
                || matches!(c, '\u{200E}' | '\u{200F}' | '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}');
            if hide {
                format!("\\u{{{:x}}}", c as u32).chars().collect::<Vec<_>>()
            } else {
                vec![c]
            }
        })
        .collect()
}

/// Refuse a label no one could select or read back: empty, blank, over
/// [`MAX_LABEL_CHARS`], or holding control or bidirectional-override characters.
pub fn check_label(label: &str) -> Result<()> {
    if label.trim().is_empty() {
        return Err(Error::InvalidSetting(
            "--label must not be empty: name the state of the amplifier, for example stock or \"after driver rework\"".into(),
        ));
    }
    if label.chars().count() > MAX_LABEL_CHARS {
        return Err(Error::InvalidSetting(format!(
            "--label is {} characters; keep it to {MAX_LABEL_CHARS} and put the rest in --note",
            label.chars().count()
        )));
    }
    if printable(label) != label {
        return Err(Error::InvalidSetting(format!(
            "--label holds control or text-direction characters ({}); use plain text",
            printable(label)
        )));
    }
    Ok(())
}

/// A run as read back: its folder, metadata and latest result, typed.
#[derive(Debug, Clone)]
pub struct Run {
    pub dir: PathBuf,
    pub meta: RunMeta,
    pub result: RunResult,
}

/// What a procedure hands over to be kept.
pub struct NewRun<'a> {
    pub label: &'a str,
    pub channel: usize,
    pub notes: &'a str,
    pub settings: BTreeMap<String, String>,
    pub calibration: Calibration,
    pub analysis: Option<AnalysisSettings>,
    /// Files to copy in under the given names (`stimulus.wav`, `capture.wav`).
    pub files: Vec<(&'a str, &'a Path)>,
    /// Files to write in (name, bytes), for captures that exist only in memory.
    pub blobs: Vec<(&'a str, Vec<u8>)>,
    /// The result; its procedure names the run.
    pub result: RunResult,
    /// A prediction, not a measurement ([`RunMeta::predicted`]).
    pub predicted: bool,
}

/// An open notebook.
#[derive(Debug, Clone)]
pub struct Notebook {
    pub dir: PathBuf,
    pub info: NotebookInfo,
}

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> Error + '_ {
    move |source| Error::Write {
        path: path.to_path_buf(),
        source,
    }
}

impl Notebook {
    /// Create a notebook in `dir` (which must not already hold one).
    pub fn init(
        dir: &Path,
        amplifier: &str,
        channels: usize,
        load_ohms: Option<f64>,
        calibration: Option<Profile>,
    ) -> Result<Notebook> {
        let file = dir.join("notebook.toml");
        if file.exists() {
            return Err(Error::AlreadyANotebook {
                dir: dir.to_path_buf(),
            });
        }
        if channels == 0 {
            return Err(Error::InvalidSetting(
                "a notebook needs at least one channel".into(),
            ));
        }
        let made_dir = !dir.exists();
        std::fs::create_dir_all(dir.join("runs")).map_err(io_err(dir))?;
        let info = NotebookInfo {
            ampnote_notebook: NOTEBOOK_VERSION,
            amplifier: amplifier.to_string(),
            channels,
            load_ohms,
            created: now_utc(),
            calibration,
        };
        let text = toml::to_string_pretty(&info).expect("notebook info serializes");
        if let Err(err) = crate::files::write_whole(&file, text.as_bytes()) {
            // Leave nothing behind that looks like a notebook.
            let _ = std::fs::remove_dir(dir.join("runs"));
            if made_dir {
                let _ = std::fs::remove_dir(dir);
            }
            return Err(err);
        }
        Ok(Notebook {
            dir: dir.to_path_buf(),
            info,
        })
    }

    /// Open an existing notebook.
    pub fn open(dir: &Path) -> Result<Notebook> {
        let file = dir.join("notebook.toml");
        let text = std::fs::read_to_string(&file).map_err(|_| Error::NotANotebook {
            dir: dir.to_path_buf(),
        })?;
        let info: NotebookInfo = toml::from_str(&text).map_err(|e| {
            Error::InvalidSetting(format!("{}: {}", file.display(), e.to_string().trim()))
        })?;
        Ok(Notebook {
            dir: dir.to_path_buf(),
            info,
        })
    }

    /// The calibration recorded in the notebook, with its load when the profile gives none
    /// (empty when none); a profile kept in it that no longer checks is an error naming it.
    pub fn calibration(&self) -> Result<Calibration> {
        let mut c = match &self.info.calibration {
            Some(p) => p.calibration().map_err(|e| {
                Error::InvalidSetting(format!(
                    "the calibration kept in {}: {e}",
                    self.dir.join("notebook.toml").display()
                ))
            })?,
            None => Calibration::default(),
        };
        if c.load_ohms.is_none() {
            c.load_ohms = self.info.load_ohms;
        }
        Ok(c)
    }

    /// Keep a run: assembled under a temporary name, renamed into place when whole.
    pub fn save(&self, run: NewRun) -> Result<Run> {
        Ok(self.save_measurement(vec![run])?.remove(0))
    }

    /// Keep the runs one command measured together (its channels) as one measurement: every
    /// run is assembled in full under a temporary folder first, then each gets a run number
    /// reserved atomically (so concurrent writers never share one) and is renamed into place.
    /// Each run records the measurement's channels, so a write interrupted between two renames
    /// shows as an incomplete measurement, never as a whole one.
    pub fn save_measurement(&self, runs_in: Vec<NewRun>) -> Result<Vec<Run>> {
        for run in &runs_in {
            check_label(run.label)?;
            if run.channel == 0 || run.channel > self.info.channels {
                return Err(Error::ChannelNotInNotebook {
                    channel: run.channel,
                    channels: self.info.channels,
                });
            }
        }
        let runs = self.dir.join("runs");
        std::fs::create_dir_all(runs.join(CLAIMS)).map_err(io_err(&runs))?;
        self.clean_leftovers();
        let tmp = runs.join(format!(".partial-{}-{}", std::process::id(), nanos()));
        std::fs::create_dir(&tmp).map_err(io_err(&tmp))?;
        let measurement = (runs_in.len() > 1).then(|| Measurement {
            id: format!("{}-{}", std::process::id(), nanos()),
            channels: runs_in.iter().map(|r| r.channel).collect(),
            runs: runs_in.len(),
        });
        let outcome = (|| -> Result<Vec<Run>> {
            // Everything written first, under the temporary folder.
            let mut staged = Vec::new();
            for (i, run) in runs_in.iter().enumerate() {
                let dir = tmp.join(format!("{i}"));
                std::fs::create_dir(&dir).map_err(io_err(&dir))?;
                let mut files = Vec::new();
                for (name, src) in &run.files {
                    std::fs::copy(src, dir.join(name)).map_err(|source| Error::Write {
                        path: dir.join(name),
                        source,
                    })?;
                    files.push(name.to_string());
                }
                for (name, bytes) in &run.blobs {
                    std::fs::write(dir.join(name), bytes).map_err(io_err(&dir.join(name)))?;
                    files.push(name.to_string());
                }
                let result_text =
                    serde_json::to_string_pretty(&run.result).expect("result serializes");
                std::fs::write(dir.join("result.json"), result_text)
                    .map_err(io_err(&dir.join("result.json")))?;
                files.push("result.json".into());
                staged.push((dir, files));
            }
            // Then each run gets its number and its place.
            let mut kept = Vec::new();
            for (run, (dir, files)) in runs_in.iter().zip(staged) {
                let n = self.claim_number()?;
                let id = format!(
                    "{n:04}-{}-ch{}-{}",
                    slug(run.label),
                    run.channel,
                    run.result.procedure()
                );
                let meta = RunMeta {
                    id: id.clone(),
                    label: run.label.to_string(),
                    channel: run.channel,
                    procedure: run.result.procedure(),
                    time: now_utc(),
                    notes: run.notes.to_string(),
                    settings: run.settings.clone(),
                    calibration: run.calibration,
                    analysis: run.analysis.clone(),
                    measurement: measurement.clone(),
                    files: files.clone(),
                    predicted: run.predicted,
                };
                let meta_text = serde_json::to_string_pretty(&meta).expect("meta serializes");
                std::fs::write(dir.join("run.json"), meta_text)
                    .map_err(io_err(&dir.join("run.json")))?;
                let dest = runs.join(&id);
                std::fs::rename(&dir, &dest).map_err(io_err(&dest))?;
                kept.push(Run {
                    dir: dest,
                    meta,
                    result: run.result.clone(),
                });
            }
            Ok(kept)
        })();
        let _ = std::fs::remove_dir_all(&tmp);
        outcome
    }

    /// Reserve the next free run number: one past the highest among run folders and earlier
    /// reservations, taken by creating its reservation file exclusively (an atomic operation:
    /// of two writers, exactly one succeeds and the other tries the next number).
    fn claim_number(&self) -> Result<usize> {
        let claims = self.dir.join("runs").join(CLAIMS);
        let mut n = self.next_number();
        for _ in 0..100_000 {
            match std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(claims.join(format!("{n:06}")))
            {
                Ok(_) => return Ok(n),
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => n += 1,
                Err(e) => return Err(io_err(&claims)(e)),
            }
        }
        Err(Error::InvalidSetting(
            "could not reserve a run number: the notebook's runs/.claims folder is full of reservations".into(),
        ))
    }

    /// One past the highest run number among the run folders and the reservations.
    fn next_number(&self) -> usize {
        let runs = self.dir.join("runs");
        let numbers = |dir: &Path| -> usize {
            std::fs::read_dir(dir)
                .map(|entries| {
                    entries
                        .flatten()
                        .filter_map(|e| {
                            e.file_name()
                                .to_string_lossy()
                                .split('-')
                                .next()?
                                .parse::<usize>()
                                .ok()
                        })
                        .max()
                        .unwrap_or(0)
                })
                .unwrap_or(0)
        };
        numbers(&runs).max(numbers(&runs.join(CLAIMS))) + 1
    }

    /// Remove temporary folders left by writes whose process is gone (killed, or the disk
    /// filled). Returns how many were removed.
    pub fn clean_leftovers(&self) -> usize {
        let mut removed = 0;
        for path in self.leftovers() {
            if std::fs::remove_dir_all(&path).is_ok() {
                removed += 1;
            }
        }
        removed
    }

    /// Temporary folders whose writer is no longer running.
    fn leftovers(&self) -> Vec<PathBuf> {
        let Ok(entries) = std::fs::read_dir(self.dir.join("runs")) else {
            return Vec::new();
        };
        entries
            .flatten()
            .filter_map(|e| {
                let name = e.file_name().to_string_lossy().to_string();
                let pid: u32 = name
                    .strip_prefix(".partial-")?
                    .split('-')
                    .next()?
                    .parse()
                    .ok()?;
                (!process_alive(pid)).then(|| e.path())
            })
            .collect()
    }

    /// Every complete run, in id order (partial, damaged and incomplete ones left out; see
    /// [`Notebook::scan`]).
    pub fn runs(&self) -> Result<Vec<Run>> {
        Ok(self.scan()?.runs)
    }

    /// Everything in `runs/`: complete runs, runs of incomplete measurements, damaged folders
    /// (with the file and the reason), and leftovers of unfinished writes. A folder that is a
    /// symbolic link is damaged, never followed (it could lead outside the notebook).
    pub fn scan(&self) -> Result<Scan> {
        let runs_dir = self.dir.join("runs");
        let Ok(entries) = std::fs::read_dir(&runs_dir) else {
            return Ok(Scan::default());
        };
        let mut scan = Scan {
            leftovers: self.leftovers().len(),
            ..Scan::default()
        };
        let mut all = Vec::new();
        for e in entries.flatten() {
            let dir = e.path();
            let name = e.file_name().to_string_lossy().to_string();
            if name.starts_with('.') {
                continue;
            }
            let damaged = |file: &str, reason: String| Damaged {
                dir: dir.clone(),
                file: file.to_string(),
                reason,
            };
            let kind = match std::fs::symlink_metadata(&dir) {
                Ok(m) => m.file_type(),
                Err(err) => {
                    scan.damaged
                        .push(damaged("", format!("cannot be read ({err})")));
                    continue;
                }
            };
            if kind.is_symlink() {
                scan.damaged.push(damaged(
                    "",
                    "is a symbolic link; runs are folders inside the notebook, and a link is never followed".into(),
                ));
                continue;
            }
            if !kind.is_dir() {
                continue;
            }
            let meta = match std::fs::read_to_string(dir.join("run.json")) {
                Err(err) => Err(format!("cannot be read ({err})")),
                Ok(text) => serde_json::from_str::<RunMeta>(&text)
                    .map_err(|err| format!("does not parse ({err})")),
            };
            let meta = match meta {
                Ok(m) => m,
                Err(reason) => {
                    scan.damaged.push(damaged("run.json", reason));
                    continue;
                }
            };
            let result = match latest_result(&dir) {
                Ok((file, v)) => match RunResult::from_stored(meta.procedure, v) {
                    Ok(r) => r,
                    Err(err) => {
                        scan.damaged.push(damaged(
                            &file,
                            format!("does not read as a {} result ({err})", meta.procedure),
                        ));
                        continue;
                    }
                },
                Err((file, reason)) => {
                    scan.damaged.push(damaged(&file, reason));
                    continue;
                }
            };
            all.push(Run { dir, meta, result });
        }
        // A measurement is whole when all its runs are there.
        let mut count: BTreeMap<&str, usize> = BTreeMap::new();
        for m in all.iter().filter_map(|r| r.meta.measurement.as_ref()) {
            *count.entry(m.id.as_str()).or_default() += 1;
        }
        let whole: Vec<bool> = all
            .iter()
            .map(|r| {
                r.meta
                    .measurement
                    .as_ref()
                    .is_none_or(|m| count[m.id.as_str()] >= m.runs)
            })
            .collect();
        for (run, whole) in all.into_iter().zip(whole) {
            if whole {
                scan.runs.push(run);
            } else {
                scan.incomplete.push(run);
            }
        }
        scan.runs.sort_by(|a, b| a.meta.id.cmp(&b.meta.id));
        scan.incomplete.sort_by(|a, b| a.meta.id.cmp(&b.meta.id));
        scan.damaged.sort_by(|a, b| a.dir.cmp(&b.dir));
        Ok(scan)
    }

    /// Runs under `label` (and `channel`, when given); an error listing what exists otherwise.
    pub fn select(&self, label: &str, channel: Option<usize>) -> Result<Vec<Run>> {
        let all = self.runs()?;
        let chosen: Vec<Run> = all
            .iter()
            .filter(|r| r.meta.label == label && channel.is_none_or(|c| r.meta.channel == c))
            .cloned()
            .collect();
        if chosen.is_empty() {
            let mut labels: Vec<String> = all
                .iter()
                .map(|r| format!("{} (ch{})", printable(&r.meta.label), r.meta.channel))
                .collect();
            labels.sort();
            labels.dedup();
            return Err(Error::NoSuchRun {
                label: printable(label),
                channel,
                dir: self.dir.clone(),
                holds: if labels.is_empty() {
                    "no runs yet".to_string()
                } else {
                    labels.join(", ")
                },
            });
        }
        Ok(chosen)
    }

    /// Write a new result beside a run's old one (re-analysis); the old stays.
    pub fn add_result(&self, run: &Run, result: &RunResult) -> Result<PathBuf> {
        let path = run
            .dir
            .join(format!("result-{}.json", now_utc().replace(':', "")));
        let text = serde_json::to_string_pretty(result).expect("result serializes");
        crate::files::write_whole(&path, text.as_bytes())?;
        Ok(path)
    }
}

/// The newest `result*.json` of a run folder (re-analyses sort after the original), or the file
/// that cannot be read and why.
fn latest_result(dir: &Path) -> std::result::Result<(String, serde_json::Value), (String, String)> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .map_err(|e| (String::new(), format!("cannot be read ({e})")))?
        .flatten()
        .map(|e| e.file_name().to_string_lossy().to_string())
        .filter(|n| n.starts_with("result") && n.ends_with(".json"))
        .collect();
    names.sort_by_key(|n| (n != "result.json", n.clone()));
    let newest = names
        .last()
        .ok_or_else(|| ("result.json".to_string(), "is missing".to_string()))?;
    let text = std::fs::read_to_string(dir.join(newest))
        .map_err(|e| (newest.clone(), format!("cannot be read ({e})")))?;
    let v: serde_json::Value = serde_json::from_str(&text)
        .map_err(|e| (newest.clone(), format!("does not parse ({e})")))?;
    if !v.is_object() {
        return Err((newest.clone(), "holds no result (not a JSON object)".into()));
    }
    Ok((newest.clone(), v))
}

/// The folder holding run-number reservations, inside `runs/`.
const CLAIMS: &str = ".claims";

/// Whether process `pid` is still running (Linux and other systems with `/proc`; elsewhere every
/// writer is taken to be running, so a leftover is counted but never removed).
fn process_alive(pid: u32) -> bool {
    if pid == std::process::id() {
        return true;
    }
    let proc_root = Path::new("/proc");
    if proc_root.join("self").exists() {
        proc_root.join(pid.to_string()).exists()
    } else {
        true
    }
}

/// A label as a file-name-safe word of at most [`SLUG_CHARS`] characters (the label itself is
/// kept whole in the run's metadata).
pub fn slug(label: &str) -> String {
    let s: String = label
        .chars()
        .take(SLUG_CHARS)
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    let s = s.trim_matches('-').to_string();
    if s.is_empty() {
        "run".into()
    } else {
        s
    }
}

fn nanos() -> u128 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_nanos())
}

/// The current time as `YYYY-MM-DDTHH:MM:SSZ` (UTC), from the system clock (civil-from-days
/// conversion, Howard Hinnant's algorithm).
pub fn now_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + if m <= 2 { 1 } else { 0 };
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

/// The current time for a file name: `YYYYMMDD-HHMMSS` (UTC), plus the milliseconds so that two
/// files written in one second do not collide.
pub fn timestamp_for_file() -> String {
    let t = now_utc()
        .replace(['-', ':'], "")
        .replace('T', "-")
        .replace('Z', "");
    format!("{t}-{:03}", (nanos() / 1_000_000) % 1000)
}
