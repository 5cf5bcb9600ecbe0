//! What the notebook report says, as typed values: built here from the notebook, rendered by
//! [`super::html`]. Nothing here writes HTML.
//!
//! Top to bottom: the headline summary (per channel, side by side, before -> after with the
//! change and whether it is better or worse), the channel-match verdicts, the bench of each label
//! (rig, calibration, settings, notes), every run with its figure and its warnings, then the
//! charts and the full comparison.

use super::compare::{
    compare, match_channels, CompareLine, Comparison, MatchResult, MatchTolerances, Verdict,
};
use crate::analysis::tone::ToneResult;
use crate::analysis::views::{tone_views, ToneViews};
use crate::notebook::{printable, Notebook, Run};
use crate::results::Kept;
use crate::warning::Warning;

/// The report of one notebook.
#[derive(Debug, Clone)]
pub struct ReportModel {
    pub amplifier: String,
    pub notebook: String,
    pub written: String,
    pub version: &'static str,
    pub channels: usize,
    pub run_count: usize,
    /// The first two labels, side by side (absent with fewer than two labels).
    pub summary: Option<Summary>,
    pub comparison: Option<Comparison>,
    /// Each predicted label (the circuit rig's runs) against the measured label it predicts:
    /// A is the prediction, B the measurement, so a line's change is measured minus predicted.
    pub predictions: Vec<Prediction>,
    /// Left against right, per label.
    pub matches: Vec<(String, MatchResult)>,
    pub benches: Vec<Bench>,
    pub runs: Vec<RunLine>,
    /// Each label's latest left-channel tone run, as the spectrum and residual charts draw it.
    pub tones: Vec<ToneChart>,
}

/// A predicted label and what it predicts.
#[derive(Debug, Clone)]
pub struct Prediction {
    pub predicted: String,
    /// Predicted (A) against measured (B: the label of the same name less the word
    /// "predicted", `driver rework, predicted` predicting `driver rework`); `None` when the
    /// notebook has no such measured label yet.
    pub comparison: Option<Comparison>,
}

/// A label's name with the word "predicted" and punctuation taken out, lower case: what pairs
/// a prediction with its measurement.
pub fn prediction_key(label: &str) -> String {
    label
        .to_lowercase()
        .replace("predicted", "")
        .chars()
        .filter(|c| c.is_alphanumeric())
        .collect()
}

/// One label's tone run for the charts: its figures and its views.
#[derive(Debug, Clone)]
pub struct ToneChart {
    pub label: String,
    pub fundamental_hz: f64,
    pub fundamental_dbfs: f64,
    /// `(order, dBc)` of the first harmonics, for the spectrum's labels.
    pub harmonics: Vec<(usize, f64)>,
    pub views: ToneViews,
}

/// The views of a kept tone run, from the steady span its analysis used (the whole capture's
/// middle half for runs kept before the span was recorded); `None` when its capture cannot be
/// read (the report then leaves the chart out).
fn tone_chart(run: &Run, tone: &ToneResult) -> Option<ToneChart> {
    let path = run.dir.join("capture.wav");
    let info = crate::capture::Capture::probe(&path).ok()?;
    let ch = if run.meta.channel <= info.channel_count {
        run.meta.channel
    } else {
        1
    };
    let cap = crate::capture::Capture::read_channels(&path, true, Some(&[ch])).ok()?;
    let x = &cap.channels[0];
    let fs = cap.sample_rate_hz as f64;
    let (a, b) = (
        (tone.analysed_from_s * fs).round() as usize,
        (tone.analysed_to_s * fs).round() as usize,
    );
    let seg = if a < b && b <= x.len() {
        &x[a..b]
    } else {
        &x[x.len() / 4..x.len() * 3 / 4]
    };
    Some(ToneChart {
        label: run.meta.label.clone(),
        fundamental_hz: tone.fundamental_hz,
        fundamental_dbfs: tone.fundamental_dbfs,
        harmonics: tone
            .harmonics
            .iter()
            .map(|h| (h.order, h.level_dbc))
            .collect(),
        views: tone_views(seg, fs, tone.fundamental_hz)?,
    })
}

/// The headline figures of two labels.
#[derive(Debug, Clone)]
pub struct Summary {
    pub a: String,
    pub b: String,
    pub channels: Vec<usize>,
    pub rows: Vec<SummaryRow>,
}

/// One headline figure, a cell per channel (in `Summary::channels` order).
#[derive(Debug, Clone)]
pub struct SummaryRow {
    pub figure: String,
    pub cells: Vec<Option<SummaryCell>>,
}

#[derive(Debug, Clone)]
pub struct SummaryCell {
    pub a: String,
    pub b: String,
    /// `+6.86 dB`, or why there is no change to read.
    pub change: String,
    pub verdict: Verdict,
}

/// How one label was measured.
#[derive(Debug, Clone)]
pub struct Bench {
    pub label: String,
    pub runs: usize,
    /// Rig descriptions and other settings kept with the runs (`--set`), each once.
    pub settings: Vec<(String, String)>,
    /// The calibration, in words (`interface 2.00 V at full scale, attenuator 10.0:1, 8.00 ohm`).
    pub calibration: Vec<String>,
    pub notes: Vec<String>,
}

/// One run: its headline figure and its warnings beside it.
#[derive(Debug, Clone)]
pub struct RunLine {
    pub id: String,
    pub time: String,
    pub label: String,
    pub channel: usize,
    pub procedure: &'static str,
    pub figure: String,
    pub warnings: Vec<Warning>,
    /// A prediction (the circuit rig), not a measurement.
    pub predicted: bool,
}

/// The headline figures, in order: what each row is, and which comparison line fills it per
/// channel (the first that exists: the tone run's THD, at its own level, before the staircase's
/// THD at 1 W). The row is named after the line (`THD at 1.00 W`), so a tone run at another level
/// says so.
const HEADLINES: &[Headline] = &[
    Headline::Starts("power at 1 % THD"),
    Headline::Tone("THD at", "THD at 1 W (staircase)"),
    Headline::Tone("H2 at", ""),
    Headline::Tone("H3 at", ""),
    Headline::Starts("noise with no signal (A-weighted)"),
    Headline::Starts("S/N re 1 W (A-weighted)"),
    Headline::Starts("low -3 dB point"),
    Headline::Starts("high -3 dB point"),
    Headline::Starts("output impedance"),
];

enum Headline {
    /// The line whose figure starts so.
    Starts(&'static str),
    /// A tone run's line (not a staircase's or a sweep's), else the fallback figure.
    Tone(&'static str, &'static str),
}

impl Headline {
    fn pick<'a>(&self, lines: &'a [CompareLine], channel: usize) -> Option<&'a CompareLine> {
        let mine = || lines.iter().filter(move |l| l.channel == channel);
        match self {
            Headline::Starts(s) => mine().find(|l| l.figure.starts_with(s)),
            Headline::Tone(s, fallback) => mine()
                .find(|l| {
                    l.figure.starts_with(s)
                        && !l.figure.contains("staircase")
                        && !l.figure.contains("sweep")
                })
                .or_else(|| {
                    (!fallback.is_empty())
                        .then(|| mine().find(|l| l.figure == *fallback))
                        .flatten()
                }),
        }
    }
}

/// The headline rows of `c`; a row in watts names the load (`load_ohms`, the first label's: compare
/// warns when the two sides used different loads).
fn summary(c: &Comparison, load_ohms: Option<f64>) -> Summary {
    let mut channels: Vec<usize> = c.lines.iter().map(|l| l.channel).collect();
    channels.sort();
    channels.dedup();
    let rows = HEADLINES
        .iter()
        .filter_map(|h| {
            let picked: Vec<Option<&CompareLine>> =
                channels.iter().map(|&ch| h.pick(&c.lines, ch)).collect();
            let first = picked.iter().flatten().next()?;
            let figure = match load_ohms {
                Some(r) if first.unit == super::number::Unit::Watts => format!(
                    "{} into {}",
                    first.figure,
                    super::number::show(r, super::number::Unit::Ohms)
                ),
                _ => first.figure.clone(),
            };
            Some(SummaryRow {
                figure,
                cells: picked
                    .into_iter()
                    .map(|l| {
                        l.map(|l| {
                            let (a, b) = shown_sides(l);
                            SummaryCell {
                                a,
                                b,
                                change: l.change.clone(),
                                verdict: l.verdict(),
                            }
                        })
                    })
                    .collect(),
            })
        })
        .collect();
    Summary {
        a: c.a.clone(),
        b: c.b.clone(),
        channels,
        rows,
    }
}

/// Each side of a line as shown (a detection limit as `< limit`, a lower bound as `> bound`).
pub fn shown_sides(l: &CompareLine) -> (String, String) {
    use super::number::{bound, lower_bound, show};
    let side = |v: f64, upper: bool, lower: bool| {
        if upper {
            bound(v, l.unit)
        } else if lower {
            lower_bound(v, l.unit)
        } else {
            show(v, l.unit)
        }
    };
    (
        side(l.a, l.a_upper_bound, l.a_lower_bound),
        side(l.b, l.b_upper_bound, l.b_lower_bound),
    )
}

/// Labels in the order their first run was made.
pub fn labels(runs: &[Run]) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for r in runs {
        if !out.contains(&r.meta.label) {
            out.push(r.meta.label.clone());
        }
    }
    out
}

fn bench(label: &str, runs: &[Run]) -> Bench {
    use super::number::{show, Unit};
    let mut settings: Vec<(String, String)> = Vec::new();
    let mut calibration: Vec<String> = Vec::new();
    let mut notes: Vec<String> = Vec::new();
    for r in runs {
        for (k, v) in &r.meta.settings {
            let kv = (printable(k), printable(v));
            if !settings.contains(&kv) {
                settings.push(kv);
            }
        }
        let c = &r.meta.calibration;
        let mut words = Vec::new();
        if let Some(v) = c.input_fs_vrms {
            words.push(format!(
                "interface input {} at full scale",
                show(v, Unit::Volts)
            ));
        }
        if let Some(a) = c.attenuation {
            words.push(format!(
                "attenuator {}:1",
                super::number::significant(a, 3, 3)
            ));
        }
        if let Some(l) = c.load_ohms {
            words.push(format!("load {}", show(l, Unit::Ohms)));
        }
        let text = if words.is_empty() {
            "no calibration: levels in dBFS".to_string()
        } else {
            words.join(", ")
        };
        if !calibration.contains(&text) {
            calibration.push(text);
        }
        let n = printable(&r.meta.notes);
        if !n.is_empty() && !notes.contains(&n) {
            notes.push(n);
        }
    }
    Bench {
        label: printable(label),
        runs: runs.len(),
        settings,
        calibration,
        notes,
    }
}

impl ReportModel {
    /// The report of `nb` and its `runs` (read once by the caller): the first two labels compared,
    /// each label's channels matched.
    pub fn build(nb: &Notebook, runs: &[Run]) -> ReportModel {
        let labels = labels(runs);
        // Each label's runs, gathered once (compare and match take them as slices).
        let by_label: Vec<Vec<Run>> = labels
            .iter()
            .map(|l| {
                runs.iter()
                    .filter(|r| &r.meta.label == l)
                    .cloned()
                    .collect()
            })
            .collect();
        // A label is a prediction when every run of it is one.
        let predicted: Vec<bool> = by_label
            .iter()
            .map(|runs| !runs.is_empty() && runs.iter().all(|r| r.meta.predicted))
            .collect();
        // Before and after: the first two measured labels (the first two of any kind when
        // fewer than two are measured), so a prediction never stands in for a measurement.
        let measured: Vec<usize> = (0..labels.len()).filter(|&i| !predicted[i]).collect();
        let pair = match measured.as_slice() {
            [a, b, ..] => Some((*a, *b)),
            _ => (labels.len() >= 2).then_some((0, 1)),
        };
        let comparison =
            pair.map(|(a, b)| compare(&labels[a], &by_label[a], &labels[b], &by_label[b]));
        let predictions = (0..labels.len())
            .filter(|&i| predicted[i])
            .map(|i| {
                let key = prediction_key(&labels[i]);
                let m = measured
                    .iter()
                    .copied()
                    .find(|&j| prediction_key(&labels[j]) == key);
                Prediction {
                    predicted: printable(&labels[i]),
                    comparison: m
                        .map(|j| compare(&labels[i], &by_label[i], &labels[j], &by_label[j])),
                }
            })
            .collect();
        let mut matches = Vec::new();
        if nb.info.channels >= 2 {
            for (label, mine) in labels.iter().zip(&by_label) {
                let side = |ch: usize| -> Vec<Run> {
                    mine.iter()
                        .filter(|r| r.meta.channel == ch)
                        .cloned()
                        .collect()
                };
                let (l, r) = (side(1), side(2));
                if !l.is_empty() && !r.is_empty() {
                    let m = match_channels(
                        &format!("{label}, left"),
                        &l,
                        &format!("{label}, right"),
                        &r,
                        &MatchTolerances::default(),
                    );
                    matches.push((printable(label), m));
                }
            }
        }
        let benches = labels
            .iter()
            .zip(&by_label)
            .map(|(l, mine)| bench(l, mine))
            .collect();
        let tones = labels
            .iter()
            .filter_map(|label| {
                runs.iter()
                    .rev()
                    .filter(|r| &r.meta.label == label && r.meta.channel == 1)
                    .find_map(|r| ToneResult::of(&r.result).map(|t| (r, t)))
                    .and_then(|(r, t)| tone_chart(r, t))
            })
            .collect();
        let lines = runs
            .iter()
            .map(|r| RunLine {
                id: printable(&r.meta.id),
                time: r.meta.time.clone(),
                label: printable(&r.meta.label),
                channel: r.meta.channel,
                procedure: r.meta.procedure.name(),
                figure: printable(&r.result.headline()),
                warnings: r.result.warnings().to_vec(),
                predicted: r.meta.predicted,
            })
            .collect();
        ReportModel {
            amplifier: printable(&nb.info.amplifier),
            notebook: nb.dir.display().to_string(),
            written: crate::notebook::now_utc(),
            version: env!("CARGO_PKG_VERSION"),
            channels: nb.info.channels,
            run_count: runs.len(),
            summary: comparison.as_ref().map(|c| {
                let load = by_label
                    .first()
                    .and_then(|runs| runs.iter().find_map(|r| r.meta.calibration.load_ohms));
                summary(c, load)
            }),
            comparison,
            predictions,
            matches,
            benches,
            runs: lines,
            tones,
        }
    }

    /// How many warnings the runs carry.
    pub fn warning_count(&self) -> usize {
        self.runs.iter().map(|r| r.warnings.len()).sum()
    }
}
