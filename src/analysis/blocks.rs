//! Long captures (a warm-up log, a long hum recording at 96 or 192 kHz): analysed in blocks, in
//! bounded memory, on every core, and followed block by block (the trend).
//!
//! A capture whose steady span holds more than two [`BLOCK_SAMPLES`] blocks is cut into equal
//! blocks of at most that length (about 22 s at 192 kHz, 87 s at 48 kHz); each block gets the
//! full analysis (the same fits and sums as a short capture), and the figures are combined as
//! powers: levels are power means, ratios (THD, THD+N, harmonics) RMS means, bounds stay bounds
//! when any block's is. One transform over ten minutes would need gigabytes and resolve 1/600 Hz,
//! which no figure needs; averaging blocks also halves the scatter of the noise figure per
//! quadrupling of the length, as Welch's method does. When the figures move across the capture
//! more than a steady amplifier's would, a warning says so and names `ampnote trend`.
//!
//! The samples stay in the compact storage the file needs ([`StoredSamples`]: 32-bit float for
//! sources of up to 24 bits); one block at a time per worker is widened to `f64`.

use super::imd::{ImdAnalyzer, ImdResult, PairHint};
use super::noise::{NoiseAnalyzer, NoiseResult};
use super::oscillation::Oscillation;
use super::steady::{find_steady, Steadiness};
use super::tone::{
    check_steady_kind, steady_warnings, ChannelInput, Mains, ToneAnalyzer, ToneResult,
};
use crate::calibration::Calibration;
use crate::capture::StoredSamples;
use crate::error::Result;
use crate::progress::Progress;
use crate::warning::{Warning, WarningCode as C};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// Longest block analysed in one transform: 2^22 samples, 21.8 s at 192 kHz (our choice: a
/// 0.05 Hz bin at 192 kHz, far finer than any figure needs; 32 MiB per block in `f64`).
pub const BLOCK_SAMPLES: usize = 1 << 22;

/// A capture of more frames than this is read in compact storage and analysed in blocks.
pub fn is_long(frames: u64) -> bool {
    frames > 2 * BLOCK_SAMPLES as u64
}

/// Level moves beyond this across a long capture's blocks earn a warning (our choice: five
/// times the flatness tolerance of the steady-span finder's floor).
const LEVEL_WANDER_DB: f64 = 0.75;
/// THD moving by more than this between blocks earns a warning (our choice: a change a bench
/// user would read as real).
const THD_WANDER_DB: f64 = 1.0;

/// One channel of a long capture and how it was stored.
#[derive(Clone)]
pub struct StoredInput<'a> {
    pub channel: usize,
    pub samples: &'a StoredSamples,
    pub sample_rate_hz: f64,
    pub overload_threshold: f64,
    pub resolution_bits: u32,
    /// Ticked once per block analysed (see [`Progress::hidden`] for none).
    pub progress: Progress,
}

impl StoredInput<'_> {
    /// Run `f` on samples `range` widened to `f64`.
    fn with_block<R>(&self, range: Range<usize>, f: impl FnOnce(&ChannelInput) -> R) -> R {
        let samples = self.samples.block(range);
        let _tick = Tick(&self.progress);
        f(&ChannelInput {
            channel: self.channel,
            samples: &samples,
            sample_rate_hz: self.sample_rate_hz,
            overload_threshold: self.overload_threshold,
            resolution_bits: self.resolution_bits,
        })
    }

    fn steadiness(&self) -> Steadiness {
        match self.samples {
            StoredSamples::F32(v) => find_steady(v, self.sample_rate_hz),
            StoredSamples::F64(v) => find_steady(v, self.sample_rate_hz),
        }
    }
}

impl StoredInput<'_> {
    /// `f` on each of `blocks` (widened to `f64`), on every core, results in block order.
    fn per_block<R: Send>(
        &self,
        blocks: &[Range<usize>],
        f: impl Fn(&ChannelInput) -> Result<R> + Sync,
    ) -> Result<Vec<R>> {
        self.progress.extend(blocks.len() as u64);
        blocks
            .par_iter()
            .map(|r| self.with_block(r.clone(), &f))
            .collect()
    }
}

/// Ticks the bar when a block's work ends, however it ends.
struct Tick<'a>(&'a Progress);

impl Drop for Tick<'_> {
    fn drop(&mut self) {
        self.0.inc(1);
    }
}

/// `[start, end)` cut into equal consecutive blocks of at most `block` samples.
pub fn split(start: usize, end: usize, block: usize) -> Vec<Range<usize>> {
    let len = end.saturating_sub(start);
    let k = len.div_ceil(block.max(1)).max(1);
    (0..k)
        .map(|i| start + len * i / k..start + len * (i + 1) / k)
        .collect()
}

/// 10 log10 of the mean of 10^(x/10): the level of the mean power.
fn power_mean_db(values: impl Iterator<Item = f64>) -> f64 {
    let (sum, n) = values.fold((0.0, 0usize), |(s, n), x| (s + 10f64.powf(x / 10.0), n + 1));
    10.0 * (sum / n.max(1) as f64).log10()
}

/// The root of the mean square.
fn rms(values: impl Iterator<Item = f64>) -> f64 {
    let (sum, n) = values.fold((0.0, 0usize), |(s, n), x| (s + x * x, n + 1));
    (sum / n.max(1) as f64).sqrt()
}

fn rms_opt<'a>(values: impl Iterator<Item = &'a Option<f64>>) -> Option<f64> {
    let v: Option<Vec<f64>> = values.copied().collect();
    v.map(|v| rms(v.into_iter()))
}

/// Warnings of every block, each once, in first-seen order.
fn union_warnings<'a>(lists: impl Iterator<Item = &'a Vec<Warning>>) -> Vec<Warning> {
    let mut out: Vec<Warning> = Vec::new();
    for w in lists.flatten() {
        if !out.contains(w) {
            out.push(w.clone());
        }
    }
    out
}

/// An oscillation found in any block stands: the strongest reading of each (same kind,
/// frequency within 1 %).
fn merge_oscillations<'a>(all: impl Iterator<Item = &'a Oscillation>) -> Vec<Oscillation> {
    let mut out: Vec<Oscillation> = Vec::new();
    for o in all {
        match out.iter_mut().find(|x| {
            x.kind == o.kind && (x.frequency_hz - o.frequency_hz).abs() <= 0.01 * o.frequency_hz
        }) {
            Some(x) if x.level_dbfs >= o.level_dbfs => {}
            Some(x) => *x = o.clone(),
            None => out.push(o.clone()),
        }
    }
    out
}

/// The steady-tone analysis of a long capture, block by block (see the module's docs). A span
/// of at most two blocks is analysed whole, exactly as [`ToneAnalyzer::analyze`] does.
pub fn tone(
    analyzer: &ToneAnalyzer,
    input: &StoredInput,
    cal: &Calibration,
    block: usize,
) -> Result<ToneResult> {
    let fs = input.sample_rate_hz;
    analyzer.band_high(fs)?;
    let steady = input.steadiness();
    check_steady_kind(input.channel, &steady, fs)?;
    // A span of at most two blocks is one block.
    let len = steady.end - steady.start;
    let blocks = split(
        steady.start,
        steady.end,
        if len > 2 * block { block } else { len.max(1) },
    );
    let parts = input.per_block(&blocks, |ci| analyzer.analyze_block(ci, cal))?;
    let mut result = if parts.len() == 1 {
        parts.into_iter().next().expect("one block")
    } else {
        combine_tone(parts, fs)
    };
    result.analysed_from_s = steady.start as f64 / fs;
    result.analysed_to_s = steady.end.min(steady.start + result.samples_analysed) as f64 / fs;
    result.level_drift_db = steady.drift_db;
    result.warnings.splice(0..0, steady_warnings(&steady, fs));
    Ok(result)
}

/// One figure per block, combined as powers (see the module's docs).
fn combine_tone(parts: Vec<ToneResult>, fs: f64) -> ToneResult {
    let n = parts.len();
    let first = &parts[0];
    let last = &parts[n - 1];
    let mut r = first.clone();
    r.samples_analysed = parts.iter().map(|p| p.samples_analysed).sum();
    r.duration_s = r.samples_analysed as f64 / fs;
    r.fundamental_hz = parts.iter().map(|p| p.fundamental_hz).sum::<f64>() / n as f64;
    r.fundamental_dbfs = power_mean_db(parts.iter().map(|p| p.fundamental_dbfs));
    let gain_db = r.fundamental_dbfs - first.fundamental_dbfs;
    let gain = 10f64.powf(gain_db / 20.0);
    r.fundamental_vrms = first.fundamental_vrms.map(|v| v * gain);
    r.fundamental_dbv = first.fundamental_dbv.map(|v| v + gain_db);
    r.fundamental_dbu = first.fundamental_dbu.map(|v| v + gain_db);
    r.output_w = first.output_w.map(|w| w * gain * gain);
    // n independent blocks: the scatter of the mean falls by sqrt(n).
    r.fundamental_sigma_db = rms(parts.iter().map(|p| p.fundamental_sigma_db)) / (n as f64).sqrt();
    for (i, h) in r.harmonics.iter_mut().enumerate() {
        let lines: Vec<_> = parts.iter().filter_map(|p| p.harmonics.get(i)).collect();
        h.level_percent = rms(lines.iter().map(|l| l.level_percent));
        h.level_dbc = 20.0 * (h.level_percent / 100.0).max(1e-300).log10();
        h.upper_bound = lines.iter().any(|l| l.upper_bound);
        let (s, c) = lines.iter().fold((0.0, 0.0), |(s, c), l| {
            let a = l.phase_deg.to_radians();
            (s + l.level_percent * a.sin(), c + l.level_percent * a.cos())
        });
        h.phase_deg = super::tone::wrap_degrees(s.atan2(c).to_degrees());
        h.level_vrms = rms_opt(lines.iter().map(|l| &l.level_vrms));
    }
    r.thd_percent = rms_opt(parts.iter().map(|p| &p.thd_percent));
    r.thd_db = r
        .thd_percent
        .map(|t| 20.0 * (t / 100.0).max(1e-300).log10());
    r.thd_upper_bound = parts.iter().any(|p| p.thd_upper_bound);
    r.thdn_percent = rms(parts.iter().map(|p| p.thdn_percent));
    r.thdn_db = 20.0 * (r.thdn_percent / 100.0).max(1e-300).log10();
    r.sinad_db = -r.thdn_db;
    r.enob_bits = (r.sinad_db - 1.76) / 6.02;
    let same_mains = parts.iter().all(|p| p.mains_hz == first.mains_hz);
    for (i, h) in r.hum.iter_mut().enumerate() {
        let lines: Vec<_> = parts
            .iter()
            .filter_map(|p| p.hum.get(i).filter(|l| l.order == h.order && same_mains))
            .collect();
        h.level_dbfs = power_mean_db(lines.iter().map(|l| l.level_dbfs));
        h.level_dbc = h.level_dbfs - r.fundamental_dbfs;
        h.upper_bound = lines.iter().any(|l| l.upper_bound) || lines.len() < n;
        h.level_vrms = rms_opt(lines.iter().map(|l| &l.level_vrms));
    }
    r.noise_dbfs = power_mean_db(parts.iter().map(|p| p.noise_dbfs));
    r.noise_vrms = rms_opt(parts.iter().map(|p| &p.noise_vrms));
    r.dc_offset = parts.iter().map(|p| p.dc_offset).sum::<f64>() / n as f64;
    r.crest_factor = parts.iter().map(|p| p.crest_factor).fold(0.0, f64::max);
    r.overload_samples = parts.iter().map(|p| p.overload_samples).sum();
    // Across the capture: from the first block's frequency to the last's.
    r.frequency_drift_ppm = Some((last.fundamental_hz / first.fundamental_hz - 1.0) * 1e6);
    r.phase_wander_deg = rms_opt(parts.iter().map(|p| &p.phase_wander_deg));
    r.analysis.blocks = n;
    r.oscillations = merge_oscillations(parts.iter().flat_map(|p| &p.oscillations));
    r.warnings = union_warnings(parts.iter().map(|p| &p.warnings));
    if !same_mains {
        r.warnings.push(C::MainsDiffers.say("the mains family detected differs between parts of the capture (50 and 60 Hz): the hum lines are upper bounds; give --mains"));
    }
    let spread = |v: &mut dyn Iterator<Item = f64>| {
        v.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| {
            (lo.min(x), hi.max(x))
        })
    };
    let (lo, hi) = spread(&mut parts.iter().map(|p| p.fundamental_dbfs));
    let (tlo, thi) = if r.thd_upper_bound {
        (0.0, 0.0)
    } else {
        spread(&mut parts.iter().filter_map(|p| p.thd_db))
    };
    let block_s = first.samples_analysed as f64 / fs;
    if hi - lo > LEVEL_WANDER_DB || thi - tlo > THD_WANDER_DB {
        r.warnings.push(C::FiguresMove.say(format!(
            "the figures move over the capture: across its {n} blocks of {block_s:.1} s the level spans {:.2} dB and THD {:.1} dB ({tlo:.1} to {thi:.1} dB); the figures here are averages. `ampnote trend` follows them second by second.",
            hi - lo,
            (thi - tlo).max(0.0)
        )));
    }
    r
}

/// Noise and hum of a long capture: equal blocks over the whole capture, combined as powers.
pub fn noise(
    analyzer: &NoiseAnalyzer,
    input: &StoredInput,
    band_hz: (f64, f64),
    mains: Mains,
    cal: &Calibration,
    block: usize,
) -> Result<NoiseResult> {
    let blocks = split(0, input.samples.len(), block);
    let parts = input.per_block(&blocks, |ci| analyzer.analyze(ci, band_hz, mains, cal))?;
    if parts.len() == 1 {
        return Ok(parts.into_iter().next().expect("one block"));
    }
    let n = parts.len();
    let first = &parts[0];
    let mut r = first.clone();
    r.duration_s = parts.iter().map(|p| p.duration_s).sum();
    r.noise_dbfs = power_mean_db(parts.iter().map(|p| p.noise_dbfs));
    r.noise_a_dbfs = power_mean_db(parts.iter().map(|p| p.noise_a_dbfs));
    r.hum_and_noise_dbfs = power_mean_db(parts.iter().map(|p| p.hum_and_noise_dbfs));
    r.noise_vrms = rms_opt(parts.iter().map(|p| &p.noise_vrms));
    r.noise_a_vrms = rms_opt(parts.iter().map(|p| &p.noise_a_vrms));
    r.hum_and_noise_vrms = rms_opt(parts.iter().map(|p| &p.hum_and_noise_vrms));
    // S/N re 1 W: the noise power is the mean, the reference the same.
    let snr = |f: fn(&NoiseResult) -> Option<f64>| -> Option<f64> {
        let v: Option<Vec<f64>> = parts.iter().map(f).collect();
        v.map(|v| -power_mean_db(v.into_iter().map(|s| -s)))
    };
    r.snr_re_1w_db = snr(|p| p.snr_re_1w_db);
    r.snr_a_re_1w_db = snr(|p| p.snr_a_re_1w_db);
    let same_mains = parts.iter().all(|p| p.mains_hz == first.mains_hz);
    for (i, h) in r.hum.iter_mut().enumerate() {
        let lines: Vec<_> = parts
            .iter()
            .filter_map(|p| p.hum.get(i).filter(|l| l.order == h.order && same_mains))
            .collect();
        h.level_dbfs = power_mean_db(lines.iter().map(|l| l.level_dbfs));
        h.level_vrms = rms_opt(lines.iter().map(|l| &l.level_vrms));
        h.at_noise_floor = lines.iter().any(|l| l.at_noise_floor) || lines.len() < n;
    }
    r.dc_offset = parts.iter().map(|p| p.dc_offset).sum::<f64>() / n as f64;
    r.overload_samples = parts.iter().map(|p| p.overload_samples).sum();
    r.oscillations = merge_oscillations(parts.iter().flat_map(|p| &p.oscillations));
    r.warnings = union_warnings(parts.iter().map(|p| &p.warnings));
    if !same_mains {
        r.warnings.push(C::MainsDiffers.say("the mains family detected differs between parts of the capture (50 and 60 Hz): give --mains"));
    }
    Ok(r)
}

/// IMD of a long capture: equal blocks over the whole capture, ratios as RMS means.
pub fn imd(
    analyzer: &ImdAnalyzer,
    input: &StoredInput,
    hint: Option<PairHint>,
    block: usize,
) -> Result<ImdResult> {
    let blocks = split(0, input.samples.len(), block);
    let parts = input.per_block(&blocks, |ci| analyzer.analyze(ci, hint))?;
    if parts.len() == 1 {
        return Ok(parts.into_iter().next().expect("one block"));
    }
    let n = parts.len();
    let first = &parts[0];
    let mut r = first.clone();
    let same_pair = parts
        .iter()
        .all(|p| (p.low_hz - first.low_hz).abs() < 1.0 && (p.high_hz - first.high_hz).abs() < 1.0);
    r.measured_ratio = parts.iter().map(|p| p.measured_ratio).sum::<f64>() / n as f64;
    r.dm2_percent = rms_opt(parts.iter().map(|p| &p.dm2_percent));
    r.dm3_percent = rms_opt(parts.iter().map(|p| &p.dm3_percent));
    r.imd_percent = rms_opt(parts.iter().map(|p| &p.imd_percent));
    r.dd2_percent = rms_opt(parts.iter().map(|p| &p.dd2_percent));
    r.dd3_percent = rms_opt(parts.iter().map(|p| &p.dd3_percent));
    for (i, l) in r.lines.iter_mut().enumerate() {
        let lines: Vec<_> = parts
            .iter()
            .filter_map(|p| p.lines.get(i).filter(|x| x.name == l.name))
            .collect();
        l.level_dbfs = power_mean_db(lines.iter().map(|x| x.level_dbfs));
        l.at_noise_floor = lines.iter().any(|x| x.at_noise_floor) || lines.len() < n;
    }
    r.warnings = union_warnings(parts.iter().map(|p| &p.warnings));
    if !same_pair {
        r.warnings.push(C::PairDiffers.say("the two tones found differ between parts of the capture: the capture is not one two-tone measurement"));
    }
    Ok(r)
}

/// One block of a trend.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct TrendPoint {
    /// The block's start, seconds from the capture's start.
    pub at_s: f64,
    pub level_dbfs: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub level_vrms: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub output_w: Option<f64>,
    pub thd_percent: Option<f64>,
    pub thdn_percent: Option<f64>,
    pub h2_dbc: Option<f64>,
    pub h3_dbc: Option<f64>,
    /// The strongest hum line measured above the noise: its frequency and level.
    pub hum_hz: Option<f64>,
    pub hum_dbfs: Option<f64>,
    /// Why this block has no figures, or what is doubtful about them.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

impl TrendPoint {
    /// A block (or reading) with no figures, and why.
    pub fn failed(at_s: f64, why: String) -> TrendPoint {
        TrendPoint {
            at_s,
            level_dbfs: None,
            level_vrms: None,
            output_w: None,
            thd_percent: None,
            thdn_percent: None,
            h2_dbc: None,
            h3_dbc: None,
            hum_hz: None,
            hum_dbfs: None,
            note: Some(why),
        }
    }

    /// The CSV columns of [`TrendPoint::csv_row`].
    pub const CSV_HEADER: &'static str = "channel,at_s,level_dbfs,level_vrms,output_w,thd_percent,thdn_percent,h2_dbc,h3_dbc,hum_hz,hum_dbfs,note";

    /// One CSV line (no newline): empty fields for figures not read, the note quoted.
    pub fn csv_row(&self, channel: usize) -> String {
        let f = |v: Option<f64>| v.map_or(String::new(), |x| format!("{x}"));
        let note = self.note.as_deref().unwrap_or("").replace('"', "\"\"");
        format!(
            "{channel},{},{},{},{},{},{},{},{},{},{},\"{note}\"",
            self.at_s,
            f(self.level_dbfs),
            f(self.level_vrms),
            f(self.output_w),
            f(self.thd_percent),
            f(self.thdn_percent),
            f(self.h2_dbc),
            f(self.h3_dbc),
            f(self.hum_hz),
            f(self.hum_dbfs)
        )
    }
}

/// How far one figure moved over the trend: last block against first, and its range.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Drift {
    pub first: f64,
    pub last: f64,
    /// last - first, in the figure's unit (dB for every figure a trend follows).
    pub change: f64,
    pub min: f64,
    pub max: f64,
}

/// Total drift of each figure, in dB (THD and THD+N as 20 log10 of the ratio).
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
pub struct TrendDrift {
    pub level_db: Option<Drift>,
    pub thd_db: Option<Drift>,
    pub thdn_db: Option<Drift>,
    pub h2_dbc: Option<Drift>,
    pub h3_dbc: Option<Drift>,
    /// The first block's strongest hum line, over the blocks where it stays the strongest.
    pub hum_dbfs: Option<Drift>,
}

/// A channel's figures block by block over a long capture.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct TrendResult {
    pub channel: usize,
    /// Block length, seconds.
    pub every_s: f64,
    /// The tone's extent in the capture (floor before and after left out), seconds.
    pub from_s: f64,
    pub to_s: f64,
    pub points: Vec<TrendPoint>,
    pub drift: TrendDrift,
    pub warnings: Vec<crate::warning::Warning>,
}

impl TrendResult {
    /// One line: how far the level and THD moved, over how long.
    pub fn headline(&self) -> String {
        let mut parts = vec![format!(
            "{} blocks of {} s over {:.0} s",
            self.points.len(),
            self.every_s,
            self.to_s - self.from_s
        )];
        if let Some(d) = &self.drift.level_db {
            parts.push(format!("level {:+.2} dB", d.change));
        }
        if let Some(d) = &self.drift.thd_db {
            parts.push(format!("THD {:+.2} dB", d.change));
        }
        parts.join(", ")
    }
}

/// The drift of the figure `get` over the points that have it.
fn drift_of(points: &[TrendPoint], get: impl Fn(&TrendPoint) -> Option<f64>) -> Option<Drift> {
    let v: Vec<f64> = points.iter().filter_map(get).collect();
    let (first, last) = (*v.first()?, *v.last()?);
    Some(Drift {
        first,
        last,
        change: last - first,
        min: v.iter().copied().fold(f64::INFINITY, f64::min),
        max: v.iter().copied().fold(f64::NEG_INFINITY, f64::max),
    })
}

fn pct_db(p: f64) -> f64 {
    20.0 * (p / 100.0).max(1e-300).log10()
}

/// Follow a tone's figures in blocks of `every_s` seconds from the tone's start to its end (the
/// floor before and after is left out; a part of a block at the end shorter than the block is
/// dropped). Each block gets the full steady-tone analysis; a block that cannot be analysed (a
/// dropout, the amplifier muted) keeps its place with no figures and a note saying why.
pub fn trend(
    analyzer: &ToneAnalyzer,
    input: &StoredInput,
    cal: &Calibration,
    every_s: f64,
) -> Result<TrendResult> {
    let fs = input.sample_rate_hz;
    analyzer.band_high(fs)?;
    let steady = input.steadiness();
    let len = (every_s * fs).round() as usize;
    let (start, end) = (steady.tone_start, steady.tone_end);
    let count = (end - start) / len.max(1);
    if len < super::tone::MIN_SAMPLES || count == 0 {
        return Err(crate::error::Error::TooShort {
            channel: input.channel,
            have_samples: end - start,
            have_s: (end - start) as f64 / fs,
            need_samples: len.max(super::tone::MIN_SAMPLES),
            need_s: len.max(super::tone::MIN_SAMPLES) as f64 / fs,
            why: format!(" for one block of --every {every_s} s"),
        });
    }
    let blocks: Vec<Range<usize>> = (0..count)
        .map(|i| start + i * len..start + (i + 1) * len)
        .collect();
    // A block that cannot be read keeps its place: its failure is its point.
    let results = input.per_block(&blocks, |ci| Ok(analyzer.analyze(ci, cal)))?;
    let points: Vec<TrendPoint> = blocks
        .iter()
        .zip(results)
        .map(|(b, r)| {
            let at_s = b.start as f64 / fs;
            match r {
                Ok(r) => point_of(at_s, &r),
                Err(e) => TrendPoint::failed(at_s, e.to_string()),
            }
        })
        .collect();
    let drift = TrendDrift {
        level_db: drift_of(&points, |p| p.level_dbfs),
        thd_db: drift_of(&points, |p| p.thd_percent.map(pct_db)),
        thdn_db: drift_of(&points, |p| p.thdn_percent.map(pct_db)),
        h2_dbc: drift_of(&points, |p| p.h2_dbc),
        h3_dbc: drift_of(&points, |p| p.h3_dbc),
        // The strongest hum line of the first block, followed where it stays the strongest.
        hum_dbfs: {
            let line = points.iter().find_map(|p| p.hum_hz);
            drift_of(&points, |p| p.hum_dbfs.filter(|_| p.hum_hz == line))
        },
    };
    let mut warnings = Vec::new();
    let failed = points.iter().filter(|p| p.level_dbfs.is_none()).count();
    if failed > 0 {
        warnings.push(C::FiguresMove.say(format!(
            "{failed} of {count} blocks could not be analysed (their notes say why): the drift is over the others"
        )));
    }
    if points.iter().all(|p| p.level_dbfs.is_none()) {
        return Err(crate::error::Error::WrongKind {
            channel: input.channel,
            found: format!(
                "no block of {every_s} s holds a steady tone ({})",
                points[0].note.as_deref().unwrap_or("no figures")
            ),
            next: "A trend follows one steady tone over time: record the amplifier playing one tone for the whole capture.".into(),
        });
    }
    Ok(TrendResult {
        channel: input.channel,
        every_s,
        from_s: start as f64 / fs,
        to_s: (start + count * len) as f64 / fs,
        points,
        drift,
        warnings,
    })
}

/// A trend point from one block's analysis; figures under the noise are left out (a bound is
/// not a reading to follow) and named in the note.
pub fn point_of(at_s: f64, r: &ToneResult) -> TrendPoint {
    let harmonic = |order: usize| {
        r.harmonics
            .iter()
            .find(|h| h.order == order && h.in_band && !h.upper_bound)
            .map(|h| h.level_dbc)
    };
    let hum = r
        .hum
        .iter()
        .filter(|h| !h.upper_bound)
        .max_by(|a, b| a.level_dbfs.total_cmp(&b.level_dbfs));
    let mut notes: Vec<String> = Vec::new();
    if r.thd_upper_bound {
        notes.push("THD under the noise".into());
    }
    if r.overload_samples > 0 {
        notes.push(format!("{} overloaded sample(s)", r.overload_samples));
    }
    for o in &r.oscillations {
        notes.push(format!(
            "{} at {:.2} Hz",
            match o.kind {
                super::oscillation::OscillationKind::Ultrasonic => "ultrasonic line",
                super::oscillation::OscillationKind::SubAudio => "sub-audio line",
                super::oscillation::OscillationKind::Motorboating => "level pumping",
            },
            o.frequency_hz
        ));
    }
    TrendPoint {
        at_s,
        level_dbfs: Some(r.fundamental_dbfs),
        level_vrms: r.fundamental_vrms,
        output_w: r.output_w,
        thd_percent: r.thd_percent.filter(|_| !r.thd_upper_bound),
        thdn_percent: Some(r.thdn_percent),
        h2_dbc: harmonic(2),
        h3_dbc: harmonic(3),
        hum_hz: hum.map(|h| h.frequency_hz),
        hum_dbfs: hum.map(|h| h.level_dbfs),
        note: (!notes.is_empty()).then(|| notes.join("; ")),
    }
}

/// What [`each_channel`] found: per channel its result, and the file's facts.
pub struct FileRun<R> {
    pub channels: Vec<(usize, Result<R>)>,
    /// Frames decoded (per channel).
    pub frames: usize,
    /// The file was cut short (and `accept_truncated` was given).
    pub truncated: bool,
}

/// Analyse each chosen channel (1-based) of the capture at `path`, which [`Capture::probe`]
/// described as `info`: a capture of ordinary length is decoded to `f64` one channel per worker
/// and given to `short`, channels in parallel; a long one (see [`is_long`]) one channel at a time
/// in compact storage to `long`, which works its blocks in parallel. A file that cannot be read
/// stops everything; a channel that cannot be analysed keeps its error beside the others.
///
/// [`Capture::probe`]: crate::capture::Capture::probe
pub fn each_channel<R: Send>(
    path: &std::path::Path,
    info: &crate::capture::SourceInfo,
    chosen: &[usize],
    accept_truncated: bool,
    short: impl Fn(&ChannelInput) -> Result<R> + Sync,
    long: impl Fn(&StoredInput) -> Result<R> + Sync,
) -> Result<FileRun<R>> {
    if is_long(info.frames_declared) {
        return each_stored_channel(path, info, chosen, accept_truncated, long);
    }
    let (overload_threshold, resolution_bits) = (
        info.encoding.overload_threshold(),
        info.encoding.resolution_bits(),
    );
    let runs: Vec<(usize, Result<R>, usize, bool)> = chosen
        .par_iter()
        .map(|&ch| {
            let cap = crate::capture::Capture::read_channels(path, accept_truncated, Some(&[ch]))?;
            let input = ChannelInput {
                channel: ch,
                samples: &cap.channels[0],
                sample_rate_hz: info.sample_rate_hz as f64,
                overload_threshold,
                resolution_bits,
            };
            Ok((ch, short(&input), cap.frames(), cap.truncated))
        })
        .collect::<Result<_>>()?;
    Ok(FileRun::from_runs(runs))
}

/// Each chosen channel in compact storage, one at a time, given to `f` (which works its blocks
/// in parallel), with a progress bar over the blocks: the long-capture half of [`each_channel`],
/// and the whole of a trend.
pub fn each_stored_channel<R>(
    path: &std::path::Path,
    info: &crate::capture::SourceInfo,
    chosen: &[usize],
    accept_truncated: bool,
    f: impl Fn(&StoredInput) -> Result<R>,
) -> Result<FileRun<R>> {
    let progress = Progress::new(0, "blocks");
    let mut runs = Vec::new();
    for &ch in chosen {
        progress.message(format!("channel {ch}: reading"));
        let stored = crate::capture::StoredChannel::read(path, accept_truncated, ch)?;
        progress.message(format!("channel {ch}"));
        let input = StoredInput {
            channel: ch,
            samples: &stored.samples,
            sample_rate_hz: info.sample_rate_hz as f64,
            overload_threshold: info.encoding.overload_threshold(),
            resolution_bits: info.encoding.resolution_bits(),
            progress: progress.clone(),
        };
        runs.push((ch, f(&input), stored.samples.len(), stored.truncated));
    }
    progress.finish();
    Ok(FileRun::from_runs(runs))
}

impl<R> FileRun<R> {
    fn from_runs(runs: Vec<(usize, Result<R>, usize, bool)>) -> Self {
        FileRun {
            frames: runs.first().map_or(0, |r| r.2),
            truncated: runs.iter().any(|r| r.3),
            channels: runs.into_iter().map(|(ch, r, _, _)| (ch, r)).collect(),
        }
    }

    /// What the reading itself leaves to say beside every channel's figures.
    pub fn reading_warnings(&self, info: &crate::capture::SourceInfo) -> Vec<Warning> {
        let mut w = Vec::new();
        if self.truncated {
            w.push(
                C::FileLength.say("the file was truncated: only the complete frames were analysed"),
            );
        }
        w.extend(info.length_warning().map(|m| C::FileLength.say(m)));
        w
    }
}
