//! Output power against distortion: a staircase of tone levels, each step analysed as a steady
//! tone, and the power where THD reaches 1 %, 3 % and 10 % (interpolated log-log between the two
//! steps that bracket it).
//!
//! Two ways in: the whole `steps` stimulus played at once ([`staircase_from_recording`]: on the
//! file rig, a recording made with any player and recorder), or a rig that plays each step itself
//! ([`run_staircase`]), which also refines the step size around each crossing and stops at a
//! distortion or power limit.

use crate::analysis::tone::{ChannelInput, Mains, ToneAnalyzer, ToneConfig, ToneResult};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::rig::Rig;
use crate::signal::stimulus::Step;
use crate::warning::WarningCode as C;
use serde::Serialize;

/// THD levels at which power is reported (common practice: 1 % is "clipping", 10 % the
/// practical maximum; REFERENCES.md, Output power).
pub const THD_TARGETS: [f64; 3] = [1.0, 3.0, 10.0];

/// Clipping is taken to begin at the first step where THD grows by more than this many dB per dB
/// of drive. A triode's second harmonic grows 1 dB per dB, its third 2 dB per dB; only clipping
/// makes THD climb faster.
pub const CLIPPING_SLOPE_DB_PER_DB: f64 = 3.0;

/// One step of the staircase.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct PowerStep {
    /// Stimulus level at the interface output, dBFS.
    pub drive_dbfs: f64,
    /// Fundamental at the interface input, dBFS.
    pub output_dbfs: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_vrms: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_dbv: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_dbu: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_w: Option<f64>,
    /// `null` when no harmonic lies in the band at this frequency and rate.
    pub thd_percent: Option<f64>,
    /// THD is mostly made of detection limits (an upper bound).
    #[serde(default)]
    pub thd_upper_bound: bool,
    pub thdn_percent: f64,
    /// `null` when the harmonic lies outside the band (or past Nyquist).
    pub h2_dbc: Option<f64>,
    pub h3_dbc: Option<f64>,
    /// Samples at or beyond the interface's full scale: such a step is left out of every figure.
    pub overload_samples: usize,
    pub excluded: bool,
    /// Oscillations the step's analysis found (see [`crate::analysis::oscillation`]): a
    /// parasitic oscillation often starts only near clipping.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub oscillations: Vec<crate::analysis::oscillation::Oscillation>,
}

/// Power at one THD level.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct PowerAtThd {
    pub thd_percent: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_w: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_vrms: Option<f64>,
    pub output_dbfs: f64,
    /// The drives of the two steps it lies between.
    pub between_drive_dbfs: [f64; 2],
}

/// The staircase of one channel at one frequency.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct PowerResult {
    pub channel: usize,
    pub frequency_hz: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub load_ohms: Option<f64>,
    pub steps: Vec<PowerStep>,
    /// The THD levels reached, in order; a level the staircase never reached is absent.
    pub power_at_thd: Vec<PowerAtThd>,
    /// Drive of the step where clipping begins (THD rising faster than
    /// [`CLIPPING_SLOPE_DB_PER_DB`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub clipping_drive_dbfs: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stopped_because: Option<String>,
    pub warnings: Vec<crate::warning::Warning>,
}

/// The band each step is analysed in: 20 Hz to 20 kHz, widened when H2 and H3 of a high test
/// frequency lie above 20 kHz, as far as the rate allows (the top 5 % below Nyquist is left to
/// the interface's anti-alias filter, common practice). Returns the high edge, and a note when it
/// was widened or when even that cannot hold H3.
pub fn step_band(frequency_hz: f64, sample_rate_hz: f64) -> (f64, Option<String>) {
    let usable = 0.95 * sample_rate_hz / 2.0;
    let wanted = 3.0 * frequency_hz * 1.02;
    if wanted <= 20_000.0 || usable <= 20_000.0 {
        let top = 20_000f64.min(sample_rate_hz / 2.0);
        let note = (wanted > top).then(|| band_note(frequency_hz, top));
        return (top, note);
    }
    let top = wanted.min(usable);
    let mut note =
        format!("at {frequency_hz:.0} Hz the band was widened to {top:.0} Hz to hold H2 and H3");
    if wanted > usable {
        note = band_note(frequency_hz, top);
    }
    (top, Some(note))
}

/// What the band `top` leaves out at `f`, and the rate that would hold H2 and H3.
fn band_note(f: f64, top: f64) -> String {
    let rate = [48_000.0, 96_000.0, 192_000.0, 384_000.0]
        .into_iter()
        .find(|&r| 0.95 * r / 2.0 >= 3.06 * f);
    let fix = match rate {
        Some(r) => format!("record at {r:.0} Hz or more (--rate {r:.0}) to hold H2 and H3"),
        None => "no common rate holds H2 and H3 here".to_string(),
    };
    if 2.0 * f > top {
        format!("at {f:.0} Hz no harmonic lies within the {top:.0} Hz band, so THD cannot be measured there; {fix}")
    } else {
        format!("at {f:.0} Hz only H2 lies within the {top:.0} Hz band: THD counts H2 alone; {fix}")
    }
}

/// How each step is analysed: a steady tone with harmonics up to the band's top (at most H40).
pub fn step_analyzer(frequency_hz: f64, sample_rate_hz: f64) -> Result<ToneAnalyzer> {
    let (top, _) = step_band(frequency_hz, sample_rate_hz);
    ToneAnalyzer::new(ToneConfig {
        max_harmonic: ((top / frequency_hz).floor() as usize).clamp(2, 40),
        fundamental_hint_hz: Some(frequency_hz),
        band_high_hz: Some(top),
        mains: Mains::Auto,
        ..ToneConfig::default()
    })
}

/// Turn one step's tone analysis into a staircase row.
pub fn step_from(drive_dbfs: f64, r: &ToneResult) -> PowerStep {
    let h = |o: usize| {
        r.harmonics
            .iter()
            .find(|h| h.order == o && h.in_band)
            .map(|h| h.level_dbc)
    };
    PowerStep {
        drive_dbfs,
        output_dbfs: r.fundamental_dbfs,
        output_vrms: r.fundamental_vrms,
        output_dbv: r.fundamental_dbv,
        output_dbu: r.fundamental_dbu,
        output_w: r.output_w,
        thd_percent: r.thd_percent,
        thd_upper_bound: r.thd_upper_bound,
        thdn_percent: r.thdn_percent,
        h2_dbc: h(2),
        h3_dbc: h(3),
        overload_samples: r.overload_samples,
        excluded: r.overload_samples > 0,
        oscillations: r.oscillations.clone(),
    }
}

/// Power at each THD target, interpolated log-log (log power against log THD) between the first
/// pair of steps that brackets it.
pub fn power_at_targets(steps: &[PowerStep], load_ohms: Option<f64>) -> Vec<PowerAtThd> {
    // Only steps with a measured THD (not a bound, not out of band) can bracket a target.
    let used: Vec<(&PowerStep, f64)> = steps
        .iter()
        .filter(|s| !s.excluded && !s.thd_upper_bound)
        .filter_map(|s| Some((s, s.thd_percent?)))
        .collect();
    THD_TARGETS
        .iter()
        .filter_map(|&t| {
            let w = used.windows(2).find(|w| w[0].1 < t && w[1].1 >= t)?;
            let ((a, ta), (b, tb)) = (w[0], w[1]);
            let f = (t.ln() - ta.ln()) / (tb.ln() - ta.ln());
            // Power goes as the fundamental's square: interpolate its dB level linearly in
            // log THD, which is log power against log THD.
            let dbfs = a.output_dbfs + f * (b.output_dbfs - a.output_dbfs);
            let vrms = match (a.output_vrms, b.output_vrms) {
                (Some(va), Some(vb)) => Some((va.ln() + f * (vb.ln() - va.ln())).exp()),
                _ => None,
            };
            Some(PowerAtThd {
                thd_percent: t,
                output_w: vrms.zip(load_ohms).map(|(v, r)| v * v / r),
                output_vrms: vrms,
                output_dbfs: dbfs,
                between_drive_dbfs: [a.drive_dbfs, b.drive_dbfs],
            })
        })
        .collect()
}

/// The first step where THD climbs faster than [`CLIPPING_SLOPE_DB_PER_DB`] (only among steps
/// whose THD is at least 0.3 %, so noise at low drive cannot trip it).
pub fn clipping_onset(steps: &[PowerStep]) -> Option<f64> {
    let used: Vec<(&PowerStep, f64)> = steps
        .iter()
        .filter(|s| !s.excluded)
        .filter_map(|s| Some((s, s.thd_percent?)))
        .collect();
    used.windows(2)
        .find(|w| {
            let dd = w[1].0.drive_dbfs - w[0].0.drive_dbfs;
            let dt = 20.0 * (w[1].1 / w[0].1).log10();
            dd > 0.0 && w[1].1 >= 0.3 && dt / dd > CLIPPING_SLOPE_DB_PER_DB
        })
        .map(|w| w[1].0.drive_dbfs)
}

/// Builds the result from the steps and says what the figures lack.
pub fn finish(
    channel: usize,
    frequency_hz: f64,
    sample_rate_hz: f64,
    cal: &Calibration,
    mut steps: Vec<PowerStep>,
    stopped_because: Option<String>,
) -> PowerResult {
    steps.sort_by(|a, b| a.drive_dbfs.total_cmp(&b.drive_dbfs));
    // A drive measured twice (a refinement landing on a coarse step) is listed once.
    steps.dedup_by(|later, earlier| (later.drive_dbfs - earlier.drive_dbfs).abs() < 1e-6);
    let load_ohms = cal.load_ohms.filter(|_| cal.has_volts());
    let mut warnings = Vec::new();
    let excluded: Vec<String> = steps
        .iter()
        .filter(|s| s.excluded)
        .map(|s| format!("{:.1}", s.drive_dbfs))
        .collect();
    if !excluded.is_empty() {
        warnings.push(C::StepsExcluded.say(format!(
            "the interface input overloaded at drive {} dBFS: those steps are left out (their distortion is the interface's, not the amplifier's); add attenuation",
            excluded.join(", ")
        )));
    }
    // Oscillations, each once, with the drives where it showed.
    let mut seen: Vec<(&crate::analysis::oscillation::Oscillation, Vec<f64>)> = Vec::new();
    for st in &steps {
        for o in &st.oscillations {
            match seen.iter_mut().find(|(x, _)| {
                x.kind == o.kind && (x.frequency_hz - o.frequency_hz).abs() <= 0.01 * o.frequency_hz
            }) {
                Some((_, drives)) => drives.push(st.drive_dbfs),
                None => seen.push((o, vec![st.drive_dbfs])),
            }
        }
    }
    for (o, drives) in seen {
        let w = o.warning();
        warnings.push(w.code.say(format!(
            "at drive {} dBFS: {}",
            drives
                .iter()
                .map(|d| format!("{d:.1}"))
                .collect::<Vec<_>>()
                .join(", "),
            w.message
        )));
    }
    if !cal.has_volts() {
        warnings.push(C::Uncalibrated.say("no calibration: levels are in dBFS; --input-fs-vrms and --attenuation add volts, --load-ohms watts (or --profile)"));
    } else if cal.load_ohms.is_none() {
        warnings.push(C::NoLoad.say("no load given: volts but no watts; add --load-ohms"));
    }
    let power_at_thd = power_at_targets(&steps, load_ohms);
    let (_, band) = step_band(frequency_hz, sample_rate_hz);
    let measurable = steps.iter().any(|s| s.thd_percent.is_some());
    if let Some(note) = band {
        warnings.push(C::BandNote.say(note));
    }
    if !measurable {
        warnings.push(C::LevelNotReached.say(
            "no power at 1 % THD: THD cannot be measured at this frequency and rate (see above)",
        ));
    } else if power_at_thd.iter().all(|p| p.thd_percent != 1.0) {
        warnings.push(C::LevelNotReached.say("THD never crossed 1 % within the staircase; extend it upward (--to) to find the 1 % point"));
    }
    PowerResult {
        channel,
        frequency_hz,
        load_ohms,
        clipping_drive_dbfs: clipping_onset(&steps),
        power_at_thd,
        steps,
        stopped_because,
        warnings,
    }
}

/// Analyse a capture of the `steps` stimulus. `latency` (samples) shifts every step's window;
/// find it with [`crate::procedure::align::find_envelope_lag`].
#[allow(clippy::too_many_arguments)]
pub fn power_from_capture(
    channel: usize,
    capture: &[f64],
    sample_rate_hz: f64,
    overload_threshold: f64,
    resolution_bits: u32,
    frequency_hz: f64,
    table: &[Step],
    latency: isize,
    cal: &Calibration,
) -> Result<PowerResult> {
    let analyzer = step_analyzer(frequency_hz, sample_rate_hz)?;
    // Every step analysed on its own core (rayon keeps the table's order, so the result is
    // the serial one); then taken in order.
    use rayon::prelude::*;
    let analysed: Vec<Option<Result<ToneResult>>> = table
        .par_iter()
        .map(|s| {
            let from = s.analyse_from_sample as isize + latency;
            let to = s.analyse_to_sample as isize + latency;
            if from < 0 || to as usize > capture.len() {
                return None;
            }
            let input = ChannelInput {
                channel,
                samples: &capture[from as usize..to as usize],
                sample_rate_hz,
                overload_threshold,
                resolution_bits,
            };
            Some(analyzer.analyze(&input, cal))
        })
        .collect();
    let mut steps = Vec::with_capacity(table.len());
    let mut missing = Vec::new();
    for (s, outcome) in table.iter().zip(analysed) {
        match outcome {
            None => missing.push(s.level_dbfs),
            Some(Ok(r)) => steps.push(step_from(s.level_dbfs, &r)),
            Some(Err(Error::NoTone { .. }))
            | Some(Err(Error::Silent { .. }))
            | Some(Err(Error::DcOnly { .. }))
            | Some(Err(Error::FarTooQuiet { .. })) => missing.push(s.level_dbfs),
            Some(Err(e)) => return Err(e),
        }
    }
    if steps.is_empty() {
        return Err(Error::WrongKind {
            channel,
            found: "no step of the staircase was found in the capture".into(),
            next: "Check that it is the recording of this stimulus and of this channel.".into(),
        });
    }
    check_follows_drive(channel, &steps)?;
    let mut r = finish(channel, frequency_hz, sample_rate_hz, cal, steps, None);
    if !missing.is_empty() {
        r.warnings.insert(
            0,
            C::StepsExcluded.say(format!(
                "{} step(s) missing from the capture (drive {} dBFS): a dropout, or the recording stopped early",
                missing.len(),
                missing.iter().map(|d| format!("{d:.1}")).collect::<Vec<_>>().join(", ")
            )),
        );
    }
    Ok(r)
}

/// Play a whole `generate steps` staircase (`stimulus`, with its step `table`) on `rig` (the
/// file rig hands over its recording), find it in the capture by its level envelope and analyse
/// every step.
pub fn staircase_from_recording(
    rig: &mut dyn Rig,
    channel: usize,
    (stimulus, sample_rate_hz): (&[f64], u32),
    frequency_hz: f64,
    table: &[Step],
    cal: &Calibration,
) -> Result<PowerResult> {
    let capture = rig.play_and_record(channel, stimulus, sample_rate_hz)?;
    let fs = sample_rate_hz as f64;
    // Where the staircase starts in the capture: its level envelope (10 ms blocks) against the
    // stimulus's, searched up to 2 s either way. Each step's window has its settle time to
    // spare, so 10 ms is precise enough.
    let block = (fs / 100.0) as usize;
    let first = table.first().map_or(0, |s| s.start_sample);
    let lag = crate::procedure::align::find_envelope_lag(
        &capture,
        stimulus,
        block,
        first,
        (2.0 * fs) as usize,
    );
    let Some((latency, _)) = lag.filter(|&(_, r)| r > 0.5) else {
        return Err(Error::WrongKind {
            channel,
            found: "the staircase's first step was not found in the capture".into(),
            next: "Check that this is the recording of the staircase stimulus, and of the right channel.".into(),
        });
    };
    power_from_capture(
        channel,
        &capture,
        fs,
        rig.overload_threshold(),
        rig.resolution_bits(),
        frequency_hz,
        table,
        latency,
        cal,
    )
}

/// Below 1 % THD an amplifier is close to linear: its output moves with its drive to within a
/// few hundredths of a dB per dB of drive (compression sets in near clipping; common practice).
/// A step whose output moves more than this (0.5 dB, or half the drive's own step) away from
/// the drive's move was not recorded from that drive.
const STEP_FOLLOW_TOLERANCE_DB: f64 = 0.5;

/// Refuse a capture whose steps do not follow the staircase they are labelled with: the capture
/// of another staircase (another step size, dwell or start) analysed against this one gives
/// drive labels that do not belong to the levels read.
pub fn check_follows_drive(channel: usize, steps: &[PowerStep]) -> Result<()> {
    let linear: Vec<&PowerStep> = steps
        .iter()
        .filter(|s| !s.excluded && s.thd_percent.unwrap_or(s.thdn_percent) < 1.0)
        .collect();
    let off: Vec<(f64, f64, f64, f64)> = linear
        .windows(2)
        .filter_map(|w| {
            let dd = w[1].drive_dbfs - w[0].drive_dbfs;
            let dout = w[1].output_dbfs - w[0].output_dbfs;
            ((dout - dd).abs() > STEP_FOLLOW_TOLERANCE_DB.max(0.5 * dd.abs())).then_some((
                w[0].drive_dbfs,
                w[1].drive_dbfs,
                dd,
                dout,
            ))
        })
        .collect();
    if let Some(&(a, b, dd, dout)) = off.first() {
        return Err(Error::WrongKind {
            channel,
            found: format!(
                "the output does not follow the staircase: from drive {a:.1} to {b:.1} dBFS it moves {dout:+.2} dB where the drive moves {dd:+.2} dB ({} of {} steps below 1 % THD are off like this), so the capture is not a recording of this staircase (another step size, dwell or start)",
                off.len(),
                linear.len().saturating_sub(1)
            ),
            next: "Give the staircase file this capture was recorded from with --stimulus, or record this one again.".into(),
        });
    }
    Ok(())
}

/// Settings of a staircase run on a rig.
#[derive(Debug, Clone, Copy)]
pub struct StaircaseSettings {
    pub frequency_hz: f64,
    pub sample_rate_hz: u32,
    pub from_dbfs: f64,
    pub step_db: f64,
    /// Stop once THD passes this (percent).
    pub stop_thd_percent: f64,
    /// Never drive into a step whose predicted power passes this (watts).
    pub max_w: f64,
    pub settle_s: f64,
    pub dwell_s: f64,
}

impl StaircaseSettings {
    /// Every setting finite and in range, checked before anything is opened or played: the power
    /// limit a positive number of watts (at most 10 kW), the THD stop above 0 and at most 100 %,
    /// the first drive at most 0 dBFS (full scale) and above -140 dBFS, the step 0.05-6 dB (at
    /// most 2800 steps from -140 dBFS to full scale),
    /// dwell 0.05-60 s, settle 0-60 s, the rate 8-384 kHz and the frequency 10 Hz to 0.45 x the
    /// rate.
    pub fn validated(self) -> Result<Self> {
        let bad = |what: String| Err(Error::InvalidSetting(what));
        let within = |x: f64, lo: f64, hi: f64| x.is_finite() && x >= lo && x <= hi;
        if !(self.max_w.is_finite() && self.max_w > 0.0 && self.max_w <= 10_000.0) {
            return bad(format!(
                "--max-w is the power limit no step may pass: a number of watts above 0 and at most 10000, got {}",
                crate::error::shown(self.max_w)
            ));
        }
        if !(self.stop_thd_percent.is_finite()
            && self.stop_thd_percent > 0.0
            && self.stop_thd_percent <= 100.0)
        {
            return bad(format!(
                "--stop-thd must lie above 0 and at most 100 %, got {}",
                crate::error::shown(self.stop_thd_percent)
            ));
        }
        if !within(self.from_dbfs, -140.0, 0.0) {
            return bad(format!(
                "--from is the first drive in dBFS: between -140 and 0 (full scale), got {}",
                crate::error::shown(self.from_dbfs)
            ));
        }
        if !within(self.step_db, 0.05, 6.0) {
            return bad(format!(
                "--step must lie between 0.05 and 6 dB, got {}",
                crate::error::shown(self.step_db)
            ));
        }
        if !within(self.dwell_s, 0.05, 60.0) {
            return bad(format!(
                "--dwell must lie between 0.05 and 60 s, got {}",
                crate::error::shown(self.dwell_s)
            ));
        }
        if !within(self.settle_s, 0.0, 60.0) {
            return bad(format!(
                "--settle must lie between 0 and 60 s, got {}",
                crate::error::shown(self.settle_s)
            ));
        }
        crate::capture::check_rate(self.sample_rate_hz)?;
        let top = 0.45 * self.sample_rate_hz as f64;
        if !within(self.frequency_hz, 10.0, top) {
            return bad(format!(
                "--freq must lie between 10 Hz and 0.45 x the rate ({top} Hz), got {}",
                crate::error::shown(self.frequency_hz)
            ));
        }
        Ok(self)
    }
}

/// Before the first step, a tone this low (-60 dBFS: 10 mV from a 10 V interface) gives the
/// chain's gain, so the first step's power is predicted like every other's.
pub const POWER_PROBE_DBFS: f64 = -60.0;

/// Checks, before anything is played, that the interface input survives the power limit: the
/// peak voltage it would see, `sqrt(2 P R) / attenuation`, must stay below its full-scale peak.
pub fn check_input_headroom(cal: &Calibration, max_w: f64) -> Result<()> {
    let (Some(peak), Some(fs_peak)) = (cal.input_peak_at_power(max_w), cal.input_full_scale_peak())
    else {
        return Err(Error::InvalidSetting(
            "a run on a rig needs the calibration (interface input full scale, attenuation, load) to keep the interface safe; give --profile or the flags".into(),
        ));
    };
    if peak > fs_peak {
        let att = cal.attenuation.unwrap_or(1.0);
        let needed = att * peak / fs_peak * 1.12; // 1 dB of margin
        return Err(Error::InvalidSetting(format!(
            "at the power limit of {max_w} W into {} ohm the interface input would see {peak:.2} V peak, above its full scale of {fs_peak:.2} V peak: raise the attenuation from {att:.2} to at least {needed:.1} ({:.1} dB), or lower --max-w",
            cal.load_ohms.unwrap_or(0.0),
            20.0 * needed.log10()
        )));
    }
    Ok(())
}

/// Play a tone at `frequency_hz` and `drive_dbfs` on `rig` for `settle + dwell` samples and
/// analyse the `dwell` after the settling part: one step of a staircase, or a probe.
pub fn tone_on_rig(
    rig: &mut dyn Rig,
    channel: usize,
    analyzer: &ToneAnalyzer,
    cal: &Calibration,
    tone: (f64, u32),
    drive_dbfs: f64,
    timing: (usize, usize),
) -> Result<ToneResult> {
    let mut one = tones_on_rig(rig, channel, analyzer, cal, tone, &[drive_dbfs], timing)?;
    Ok(one.remove(0))
}

/// [`tone_on_rig`] at each of `drives_dbfs`, in order, taken at once where the rig can
/// ([`Rig::play_and_record_each`]).
pub fn tones_on_rig(
    rig: &mut dyn Rig,
    channel: usize,
    analyzer: &ToneAnalyzer,
    cal: &Calibration,
    (frequency_hz, rate): (f64, u32),
    drives_dbfs: &[f64],
    (settle, dwell): (usize, usize),
) -> Result<Vec<ToneResult>> {
    let fs = rate as f64;
    let w = 2.0 * std::f64::consts::PI * frequency_hz / fs;
    let tones: Vec<Vec<f64>> = drives_dbfs
        .iter()
        .map(|d| {
            let a = 10f64.powf(d / 20.0);
            (0..settle + dwell)
                .map(|i| a * (w * i as f64).sin())
                .collect()
        })
        .collect();
    let caps = rig.play_and_record_each(channel, &tones, rate)?;
    caps.iter()
        .map(|cap| {
            analyzer.analyze(
                &ChannelInput {
                    channel,
                    samples: &cap[settle.min(cap.len())..],
                    sample_rate_hz: fs,
                    overload_threshold: rig.overload_threshold(),
                    resolution_bits: rig.resolution_bits(),
                },
                cal,
            )
        })
        .collect()
}

/// Ticks the bar when a step ends, however it ends.
struct StepTick<'a>(&'a crate::progress::Progress);

impl Drop for StepTick<'_> {
    fn drop(&mut self) {
        self.0.inc(1);
    }
}

/// Run the staircase on `rig` for one channel: coarse steps, finer steps (a fifth) across each THD
/// target the coarse ones jump over, until THD passes the stop limit, the next step's predicted
/// power passes the power limit, or the drive reaches 0 dBFS.
///
/// `progress` is ticked per step played (its length grows by the coarse steps up to full scale;
/// the staircase usually stops before).
pub fn run_staircase(
    rig: &mut dyn Rig,
    channel: usize,
    s: &StaircaseSettings,
    progress: &crate::progress::Progress,
) -> Result<PowerResult> {
    let s = &(*s).validated()?;
    let cal = rig.calibration();
    check_input_headroom(&cal, s.max_w)?;
    let analyzer = step_analyzer(s.frequency_hz, s.sample_rate_hz as f64)?;
    let fs = s.sample_rate_hz as f64;
    let settle = (s.settle_s * fs) as usize;
    let dwell = (s.dwell_s * fs) as usize;
    progress.extend(1 + (-s.from_dbfs / s.step_db).ceil().max(0.0) as u64);
    // The steps at `drives`, taken at once where the rig can (a simulator; never a bench with
    // an amplifier on it, see `Rig::parallel`), each ticking the bar.
    let measure_each = |rig: &mut dyn Rig, drives: &[f64]| -> Result<Vec<PowerStep>> {
        progress.message(match drives {
            [one] => format!("channel {channel}, {} Hz: {one:.1} dBFS", s.frequency_hz),
            [first, .., last] => format!(
                "channel {channel}, {} Hz: {first:.1} to {last:.1} dBFS, {} steps at once",
                s.frequency_hz,
                drives.len()
            ),
            [] => String::new(),
        });
        let ticks: Vec<StepTick> = drives.iter().map(|_| StepTick(progress)).collect();
        let r = tones_on_rig(
            rig,
            channel,
            &analyzer,
            &cal,
            (s.frequency_hz, s.sample_rate_hz),
            drives,
            (settle, dwell),
        )?;
        drop(ticks);
        Ok(drives
            .iter()
            .zip(&r)
            .map(|(&d, r)| step_from(d, r))
            .collect())
    };
    let measure = |rig: &mut dyn Rig, drive: f64| -> Result<PowerStep> {
        Ok(measure_each(rig, &[drive])?.remove(0))
    };
    let parallel = rig.parallel().max(1);
    // The first step's power, predicted from a low probe (the gain holds while the amplifier is
    // linear; compression only lowers the real figure): refused before it is played when it
    // would pass the limit.
    let probe_at = POWER_PROBE_DBFS.min(s.from_dbfs);
    let probe = measure(rig, probe_at)?;
    if let Some(w) = probe.output_w {
        let predicted = w * 10f64.powf((s.from_dbfs - probe_at) / 10.0);
        if predicted > s.max_w {
            let start = probe_at + 10.0 * (s.max_w / w).log10() - s.step_db;
            return Err(Error::InvalidSetting(format!(
                "the first step ({:.1} dBFS) would give about {predicted:.3} W into {} ohm, over the power limit of {} W (--max-w): start lower, at {start:.1} dBFS or below (--from)",
                s.from_dbfs,
                cal.load_ohms.unwrap_or(f64::NAN),
                s.max_w
            )));
        }
    }
    let mut steps: Vec<PowerStep> = Vec::new();
    let mut drive = s.from_dbfs;
    let stopped;
    // Coarse steps measured ahead, for `drive`, `drive + step`, ... (on a rig that takes several
    // at once; each within full scale and the power limit as predicted from the last step
    // measured, an upper bound since compression only lowers the real power).
    let mut ahead: std::collections::VecDeque<PowerStep> = Default::default();
    loop {
        if ahead.is_empty() {
            let last = steps.last().unwrap_or(&probe);
            let mut drives = vec![drive];
            while drives.len() < parallel {
                let d = drive + drives.len() as f64 * s.step_db;
                let within_limit = last
                    .output_w
                    .is_none_or(|w| w * 10f64.powf((d - last.drive_dbfs) / 10.0) <= s.max_w);
                if d > 0.0 || !within_limit {
                    break;
                }
                drives.push(d);
            }
            ahead.extend(measure_each(rig, &drives)?);
        }
        let cur = ahead.pop_front().expect("measured above");
        // Where THD cannot be measured (harmonics out of band), THD+N stands in: it is never
        // below THD, so the stop limit still holds.
        let distortion = |p: &PowerStep| p.thd_percent.unwrap_or(p.thdn_percent);
        let prev_thd = steps.last().map(distortion);
        let prev_drive = steps.last().map(|p| p.drive_dbfs);
        let (cur_thd, cur_w, overloaded) = (distortion(&cur), cur.output_w, cur.excluded);
        steps.push(cur);
        if overloaded {
            stopped = Some("the interface input overloaded; add attenuation".to_string());
            break;
        }
        // Refine across any target this coarse step jumped over.
        if let (Some(pt), Some(pd)) = (prev_thd, prev_drive) {
            if THD_TARGETS.iter().any(|&t| pt < t && cur_thd >= t) {
                let fine = s.step_db / 5.0;
                progress.extend(4);
                let mut between = Vec::new();
                let mut d = pd + fine;
                while d < drive - fine / 2.0 {
                    between.push(d);
                    d += fine;
                }
                // Between two steps already played: all of them at once where the rig can.
                for chunk in between.chunks(parallel) {
                    let mut overloaded = false;
                    for st in measure_each(rig, chunk)? {
                        overloaded = st.excluded;
                        steps.push(st);
                        if overloaded {
                            break;
                        }
                    }
                    if overloaded {
                        break;
                    }
                }
            }
        }
        if cur_thd >= s.stop_thd_percent {
            stopped = Some(format!(
                "THD passed the stop limit of {} %",
                s.stop_thd_percent
            ));
            break;
        }
        let next = drive + s.step_db;
        // A safety net under the validated settings: a staircase never runs past this many
        // steps (from -140 dBFS at the smallest step, refinements included, it needs under 4000).
        if steps.len() >= 4000 {
            stopped = Some("the staircase reached 4000 steps".to_string());
            break;
        }
        if next > 0.0 {
            stopped = Some("the drive reached full scale".to_string());
            break;
        }
        if let Some(w) = cur_w {
            if w * 10f64.powf(s.step_db / 10.0) > s.max_w {
                stopped = Some(format!(
                    "the next step would pass the power limit of {} W",
                    s.max_w
                ));
                break;
            }
        }
        drive = next;
    }
    progress.settle();
    Ok(finish(
        channel,
        s.frequency_hz,
        s.sample_rate_hz as f64,
        &cal,
        steps,
        stopped,
    ))
}
