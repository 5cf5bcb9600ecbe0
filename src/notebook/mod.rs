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
    /// `tone`, `power`, `response`, `imd`, `zout`.
    pub procedure: String,
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
    /// Files in the run folder.
    pub files: Vec<String>,
}

/// A run as read back: its folder, metadata and latest result.
#[derive(Debug, Clone)]
pub struct Run {
    pub dir: PathBuf,
    pub meta: RunMeta,
    pub result: serde_json::Value,
}

/// What a procedure hands over to be kept.
pub struct NewRun<'a> {
    pub label: &'a str,
    pub channel: usize,
    pub procedure: &'a str,
    pub notes: &'a str,
    pub settings: BTreeMap<String, String>,
    pub calibration: Calibration,
    pub analysis: Option<AnalysisSettings>,
    /// Files to copy in under the given names (`stimulus.wav`, `capture.wav`).
    pub files: Vec<(&'a str, &'a Path)>,
    /// Files to write in (name, bytes), for captures that exist only in memory.
    pub blobs: Vec<(&'a str, Vec<u8>)>,
    pub result: serde_json::Value,
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
            return Err(Error::InvalidSetting(format!(
                "{} is already a notebook; open it with --notebook {}",
                dir.display(),
                dir.display()
            )));
        }
        if channels == 0 {
            return Err(Error::InvalidSetting(
                "a notebook needs at least one channel".into(),
            ));
        }
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
        crate::files::write_whole(&file, text.as_bytes())?;
        Ok(Notebook {
            dir: dir.to_path_buf(),
            info,
        })
    }

    /// Open an existing notebook.
    pub fn open(dir: &Path) -> Result<Notebook> {
        let file = dir.join("notebook.toml");
        let text = std::fs::read_to_string(&file).map_err(|_| {
            Error::InvalidSetting(format!(
                "{} is not a notebook (no notebook.toml); create one with `ampnote notebook init {}`",
                dir.display(),
                dir.display()
            ))
        })?;
        let info: NotebookInfo = toml::from_str(&text).map_err(|e| {
            Error::InvalidSetting(format!("{}: {}", file.display(), e.to_string().trim()))
        })?;
        Ok(Notebook {
            dir: dir.to_path_buf(),
            info,
        })
    }

    /// The calibration recorded in the notebook (empty when none).
    pub fn calibration(&self) -> Calibration {
        let mut c = self
            .info
            .calibration
            .as_ref()
            .and_then(|p| p.calibration().ok())
            .unwrap_or_default();
        if c.load_ohms.is_none() {
            c.load_ohms = self.info.load_ohms;
        }
        c
    }

    /// Keep a run: assembled under a temporary name, renamed into place when whole.
    pub fn save(&self, run: NewRun) -> Result<Run> {
        if run.channel == 0 || run.channel > self.info.channels {
            return Err(Error::InvalidSetting(format!(
                "channel {} is not in this notebook (channels 1..{})",
                run.channel, self.info.channels
            )));
        }
        let runs = self.dir.join("runs");
        std::fs::create_dir_all(&runs).map_err(io_err(&runs))?;
        let tmp = runs.join(format!(".partial-{}-{}", std::process::id(), nanos()));
        std::fs::create_dir(&tmp).map_err(io_err(&tmp))?;
        let outcome = (|| -> Result<Run> {
            let mut files = Vec::new();
            for (name, src) in &run.files {
                std::fs::copy(src, tmp.join(name)).map_err(|source| Error::Write {
                    path: tmp.join(name),
                    source,
                })?;
                files.push(name.to_string());
            }
            for (name, bytes) in &run.blobs {
                std::fs::write(tmp.join(name), bytes).map_err(io_err(&tmp.join(name)))?;
                files.push(name.to_string());
            }
            let result_text = serde_json::to_string_pretty(&run.result).expect("result serializes");
            std::fs::write(tmp.join("result.json"), result_text).map_err(io_err(&tmp))?;
            files.push("result.json".into());
            // Claim the next number; a rename never replaces an existing run.
            for attempt in 0..1000 {
                let n = self.next_number()? + attempt;
                let id = format!(
                    "{n:04}-{}-ch{}-{}",
                    slug(run.label),
                    run.channel,
                    run.procedure
                );
                let meta = RunMeta {
                    id: id.clone(),
                    label: run.label.to_string(),
                    channel: run.channel,
                    procedure: run.procedure.to_string(),
                    time: now_utc(),
                    notes: run.notes.to_string(),
                    settings: run.settings.clone(),
                    calibration: run.calibration,
                    analysis: run.analysis.clone(),
                    files: files.clone(),
                };
                let meta_text = serde_json::to_string_pretty(&meta).expect("meta serializes");
                std::fs::write(tmp.join("run.json"), meta_text).map_err(io_err(&tmp))?;
                let dest = runs.join(&id);
                if dest.exists() {
                    continue;
                }
                std::fs::rename(&tmp, &dest).map_err(io_err(&dest))?;
                return Ok(Run {
                    dir: dest,
                    meta,
                    result: run.result.clone(),
                });
            }
            Err(Error::InvalidSetting(
                "could not find a free run number".into(),
            ))
        })();
        if outcome.is_err() {
            let _ = std::fs::remove_dir_all(&tmp);
        }
        outcome
    }

    /// One past the highest run number among the folder names (no run file is read).
    fn next_number(&self) -> Result<usize> {
        let Ok(entries) = std::fs::read_dir(self.dir.join("runs")) else {
            return Ok(1);
        };
        Ok(entries
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
            + 1)
    }

    /// Every complete run, in id order (partial folders are skipped).
    pub fn runs(&self) -> Result<Vec<Run>> {
        let runs_dir = self.dir.join("runs");
        let Ok(entries) = std::fs::read_dir(&runs_dir) else {
            return Ok(Vec::new());
        };
        let mut out = Vec::new();
        for e in entries.flatten() {
            let dir = e.path();
            let name = e.file_name().to_string_lossy().to_string();
            if name.starts_with('.') || !dir.is_dir() {
                continue;
            }
            let Ok(meta_text) = std::fs::read_to_string(dir.join("run.json")) else {
                continue;
            };
            let Ok(meta) = serde_json::from_str::<RunMeta>(&meta_text) else {
                continue;
            };
            let result = latest_result(&dir).unwrap_or(serde_json::Value::Null);
            out.push(Run { dir, meta, result });
        }
        out.sort_by(|a, b| a.meta.id.cmp(&b.meta.id));
        Ok(out)
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
                .map(|r| format!("{} (ch{})", r.meta.label, r.meta.channel))
                .collect();
            labels.sort();
            labels.dedup();
            return Err(Error::InvalidSetting(format!(
                "no run labelled `{label}`{} in {}; it holds: {}",
                channel.map_or(String::new(), |c| format!(" on channel {c}")),
                self.dir.display(),
                if labels.is_empty() {
                    "no runs yet".to_string()
                } else {
                    labels.join(", ")
                }
            )));
        }
        Ok(chosen)
    }

    /// Write a new result beside a run's old one (re-analysis); the old stays.
    pub fn add_result(&self, run: &Run, result: &serde_json::Value) -> Result<PathBuf> {
        let path = run
            .dir
            .join(format!("result-{}.json", now_utc().replace(':', "")));
        let text = serde_json::to_string_pretty(result).expect("result serializes");
        crate::files::write_whole(&path, text.as_bytes())?;
        Ok(path)
    }
}

/// The newest `result*.json` of a run folder (re-analyses sort after the original).
fn latest_result(dir: &Path) -> Option<serde_json::Value> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .ok()?
        .flatten()
        .map(|e| e.file_name().to_string_lossy().to_string())
        .filter(|n| n.starts_with("result") && n.ends_with(".json"))
        .collect();
    names.sort_by_key(|n| (n != "result.json", n.clone()));
    let newest = names.last()?;
    serde_json::from_str(&std::fs::read_to_string(dir.join(newest)).ok()?).ok()
}

/// A label as a file-name-safe word.
pub fn slug(label: &str) -> String {
    let s: String = label
        .chars()
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
