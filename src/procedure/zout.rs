//! Output impedance and damping factor by the two-load method.
//!
//! With the same drive, the output voltage is `V1` into `R1` and `V2` into `R2`:
//! `Z_out = (V2 - V1) / (V1 / R1 - V2 / R2)`; damping factor = `R_nominal / Z_out`
//! (REFERENCES.md, Output impedance). Two loaded measurements, never an open circuit: a tube
//! amplifier's output transformer must not run unloaded (common practice). The voltages may be in
//! any unit common to both (dBFS through the same interface and attenuator will do).

use crate::analysis::fit::sine_fit_time_domain;
use crate::analysis::sweep::{
    ResponseAnalyzer, ResponseConfig, ResponsePoint, ResponseResult, SweepParams,
};
use crate::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig, ToneResult};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::procedure::drive;
use crate::rig::Rig;
use crate::warning::WarningCode as C;
use realfft::num_complex::Complex64;
use serde::Serialize;

/// The two-load formula.
pub fn two_load(v1: f64, r1: f64, v2: f64, r2: f64) -> Result<f64> {
    check_loads(r1, r2)?;
    let den = v1 / r1 - v2 / r2;
    if den.abs() < 1e-300 {
        return Err(Error::ReadingsTooClose { a: v1, b: v2 });
    }
    Ok((v2 - v1) / den)
}

/// Both loads within 0.1 ohm to 100 kohm (the calibration's load range), and different.
pub fn check_loads(r1: f64, r2: f64) -> Result<()> {
    for (name, r) in [("first load", r1), ("second load", r2)] {
        if !(r.is_finite() && (0.1..=1e5).contains(&r)) {
            return Err(Error::InvalidSetting(format!(
                "the {name} must lie between 0.1 and 100000 ohm, got {r}"
            )));
        }
    }
    if (r1 - r2).abs() < 1e-9 * r1.max(r2) {
        return Err(Error::InvalidSetting(
            "the two loads must differ (for example the rated load and twice it)".into(),
        ));
    }
    Ok(())
}

/// Output impedance at one frequency, or one point of the curve across the band.
#[derive(Debug, Clone, Copy, Serialize, serde::Deserialize)]
pub struct ZoutPoint {
    pub frequency_hz: f64,
    /// |Z|.
    pub zout_ohms: f64,
    /// The nominal load over |Z|.
    pub damping_factor: f64,
    /// The phase of Z, degrees (positive: inductive), and its real and imaginary parts; absent
    /// when the two captures do not share a clock (separate recordings), and |Z| then comes from
    /// the magnitudes alone.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub phase_deg: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub resistance_ohms: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reactance_ohms: Option<f64>,
    /// The series inductance that gives the reactance, microhenries (inductive points only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub inductance_uh: Option<f64>,
}

/// The two-load formula on complex voltages (the same drive, loads `r1` and `r2`).
pub fn two_load_complex(v1: Complex64, r1: f64, v2: Complex64, r2: f64) -> Result<Complex64> {
    check_loads(r1, r2)?;
    let den = v1 / r1 - v2 / r2;
    if den.norm() < 1e-300 {
        return Err(Error::ReadingsTooClose {
            a: v1.norm(),
            b: v2.norm(),
        });
    }
    Ok((v2 - v1) / den)
}

/// The result of a two-load measurement.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ZoutResult {
    pub channel: usize,
    pub load_a_ohms: f64,
    pub load_b_ohms: f64,
    /// The load the damping factor refers to (the lower of the two, taken as the rated one).
    pub nominal_load_ohms: f64,
    /// At the tone's frequency, or at 1 kHz for sweeps.
    pub frequency_hz: f64,
    pub zout_ohms: f64,
    /// The phase of Z at `frequency_hz`, degrees (positive: inductive). Present when both
    /// captures share one time base with the stimulus (a rig's): `zout_ohms` is then |Z| from
    /// the two-load formula on complex voltages. Absent for separate recordings, whose
    /// `zout_ohms` comes from the magnitudes alone (exact where Z is resistive; where it is
    /// not, below |Z|: 1.53 against 1.63 ohm for 1.5 + j0.63 ohm between 8 and 16 ohm).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub phase_deg: Option<f64>,
    /// One standard deviation of `zout_ohms` from the noise of the two readings (absent when
    /// their noise is not known).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub zout_sigma_ohms: Option<f64>,
    pub damping_factor: f64,
    /// Across the band (sweep captures only).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub points: Vec<ZoutPoint>,
    pub warnings: Vec<crate::warning::Warning>,
}

/// Common-practice cautions and sanity checks on a result.
pub fn zout_warnings(load_a: f64, load_b: f64, z: f64) -> Vec<crate::warning::Warning> {
    let mut w = Vec::new();
    if load_a.max(load_b) > 100.0 * load_a.min(load_b) {
        w.push(C::OpenLoad.say("one load is nearly an open circuit: never run a tube amplifier unloaded; use the rated load and about twice it"));
    }
    if z < 0.0 {
        w.push(C::Implausible.say("a negative output impedance: the readings are noisy or the loads were swapped; check which capture went with which load"));
    }
    w
}

/// Build a result from the two voltages (any common unit) at one frequency.
pub fn from_levels(
    channel: usize,
    frequency_hz: f64,
    v_a: f64,
    load_a: f64,
    v_b: f64,
    load_b: f64,
) -> Result<ZoutResult> {
    let z = two_load(v_a, load_a, v_b, load_b)?;
    let nominal = load_a.min(load_b);
    Ok(ZoutResult {
        channel,
        load_a_ohms: load_a,
        load_b_ohms: load_b,
        nominal_load_ohms: nominal,
        frequency_hz,
        zout_ohms: z,
        phase_deg: None,
        zout_sigma_ohms: None,
        damping_factor: nominal / z,
        points: Vec::new(),
        warnings: zout_warnings(load_a, load_b, z),
    })
}

/// Above this a tone's output impedance from two separate recordings is said to lack its phase:
/// an output transformer's leakage inductance (tens of microhenries at the secondary, common
/// practice) adds a tenth of an ohm of reactance by 1 kHz, where |Z| from the magnitudes is
/// still within a fraction of a percent, and ten times that by 10 kHz.
const PHASE_MATTERS_HZ: f64 = 2000.0;

impl ZoutResult {
    /// The headline set from the complex Z at `frequency_hz` (both captures on one time base).
    fn set_complex(&mut self, z: Complex64) {
        self.zout_ohms = z.norm();
        self.damping_factor = self.nominal_load_ohms / z.norm();
        self.phase_deg = Some(z.arg().to_degrees());
        self.warnings = zout_warnings(self.load_a_ohms, self.load_b_ohms, z.norm());
    }
}

/// The fundamental's complex amplitude at `f_hz` (rate `fs`) over `x[from..to]`, by the IEEE
/// 1057 sine fit ([`sine_fit_time_domain`]) with DC and the second and third harmonics fitted
/// beside it so they do not lean on it: two captures of one steady tone on the same span give
/// their ratio as a complex voltage ratio.
fn phasor(x: &[f64], from: usize, to: usize, f_hz: f64, fs: f64) -> Option<Complex64> {
    let span = &x[from.min(x.len())..to.min(x.len())];
    let freqs: Vec<f64> = (1..=3)
        .map(|k| k as f64 * f_hz / fs)
        .filter(|&f| f < 0.5)
        .collect();
    // x = A cos(wn) + B sin(wn) = Re[(A - jB) e^{jwn}].
    let (lines, _dc) = sine_fit_time_domain(span, &freqs)?;
    let (a, b) = lines[0];
    Some(Complex64::new(a, -b))
}

/// Two readings differ by a real change only past four standard deviations of their noise
/// (normal statistics: noise alone passes that with probability 6e-5).
const DISTINCT_SIGMAS: f64 = 4.0;

/// Refuse two readings whose levels (dB) differ by no more than their noise allows: the same
/// capture twice, or the load not switched between them. `sigma_db` is one standard deviation of
/// the difference.
pub fn check_distinct(
    channel: usize,
    level_a_db: f64,
    level_b_db: f64,
    sigma_db: f64,
) -> Result<()> {
    let d = level_b_db - level_a_db;
    if d.abs() <= DISTINCT_SIGMAS * sigma_db {
        return Err(Error::WrongKind {
            channel,
            found: format!(
                "the two captures read the same level within their noise (they differ by {} dB where their noise and wander allow {} dB): the load was not switched between them, or one recording was given twice",
                small(d),
                small(DISTINCT_SIGMAS * sigma_db)
            ),
            next: "Record one capture into each load (the rated load, then about twice it), switching loads with the amplifier muted; never leave a tube amplifier's output open.".into(),
        });
    }
    Ok(())
}

/// A small dB figure readable at any size: fixed point down to a thousandth, then exponent.
fn small(x: f64) -> String {
    if x == 0.0 || x.abs() >= 1e-3 {
        format!("{x:.3}")
    } else {
        format!("{x:.1e}")
    }
}

/// One standard deviation of the two-load impedance from one of the level difference `sigma_db`:
/// with `g = v2 / v1`, `Z = (g - 1) / (1/R1 - g/R2)` and `dZ/dg = (1/R1 - 1/R2) / (1/R1 - g/R2)^2`.
pub fn zout_sigma(v1: f64, r1: f64, v2: f64, r2: f64, sigma_db: f64) -> f64 {
    let g = v2 / v1;
    let den = 1.0 / r1 - g / r2;
    ((1.0 / r1 - 1.0 / r2) / (den * den)).abs() * g * sigma_db * std::f64::consts::LN_10 / 20.0
}

/// The two-load result from two steady-tone analyses (same drive, loads `load_a` and `load_b`):
/// refuses tones at different frequencies and levels that do not differ beyond their noise.
pub fn from_tones(
    channel: usize,
    a: &ToneResult,
    load_a: f64,
    b: &ToneResult,
    load_b: f64,
) -> Result<ZoutResult> {
    check_loads(load_a, load_b)?;
    let (fa, fb) = (a.fundamental_hz, b.fundamental_hz);
    if (fa - fb).abs() > 0.01 * fa.max(fb) {
        return Err(Error::WrongKind {
            channel,
            found: format!(
                "the two captures hold tones at different frequencies ({fa:.1} Hz and {fb:.1} Hz)"
            ),
            next: "Record both loads with the same tone at the same drive.".into(),
        });
    }
    // The noise of each reading, and half the level's own movement across each span: a level
    // that wanders by d within a capture cannot be trusted to better than about d/2 against
    // another capture.
    let sigma = [
        a.fundamental_sigma_db,
        b.fundamental_sigma_db,
        a.level_drift_db / 2.0,
        b.level_drift_db / 2.0,
    ]
    .iter()
    .map(|x| x * x)
    .sum::<f64>()
    .sqrt();
    check_distinct(channel, a.fundamental_dbfs, b.fundamental_dbfs, sigma)?;
    let (va, vb) = (
        10f64.powf(a.fundamental_dbfs / 20.0),
        10f64.powf(b.fundamental_dbfs / 20.0),
    );
    let mut r = from_levels(channel, fa, va, load_a, vb, load_b)?;
    r.zout_sigma_ohms = Some(zout_sigma(va, load_a, vb, load_b, sigma));
    Ok(r)
}

/// What the two-load measurement plays into each load.
#[derive(Debug, Clone, Copy)]
pub enum ZoutDrive<'a> {
    /// A steady tone; its frequency when known (the analysis looks there first).
    Tone {
        signal: &'a [f64],
        hint_hz: Option<f64>,
    },
    /// A sweep: Z across the band from the two responses.
    Sweep {
        signal: &'a [f64],
        params: SweepParams,
    },
}

/// A two-load measurement, the same on every rig.
#[derive(Debug, Clone, Copy)]
pub struct ZoutPlan<'a> {
    /// The rated load first, then about twice it.
    pub loads: [f64; 2],
    pub drive: ZoutDrive<'a>,
    pub sample_rate_hz: u32,
    /// A tone only: rescale it per channel to give this power (W) into the first load; the
    /// second field is the level (dBFS) the signal was made at.
    pub watts: Option<(f64, f64)>,
}

/// Play the plan into both loads on `rig` and work out the output impedance of `channel`. The
/// rig is left on the first (rated) load.
pub fn measure(rig: &mut dyn Rig, channel: usize, plan: &ZoutPlan) -> Result<ZoutResult> {
    let [ra, rb] = plan.loads;
    check_loads(ra, rb)?;
    let rate = plan.sample_rate_hz;
    let scaled: Option<Vec<f64>> = match (plan.watts, plan.drive) {
        (None, _) => None,
        (Some(_), ZoutDrive::Sweep { .. }) => {
            return Err(Error::InvalidSetting(
                "--watts sets a tone's drive; drop it with --sweep (or use --level)".into(),
            ))
        }
        (Some(_), ZoutDrive::Tone { hint_hz: None, .. }) => {
            return Err(Error::InvalidSetting(
                "--watts needs the tone's frequency (--freq)".into(),
            ))
        }
        (
            Some((w, made_at_dbfs)),
            ZoutDrive::Tone {
                signal,
                hint_hz: Some(f),
            },
        ) => {
            rig.set_load(ra)?;
            let found = drive::drive_for_power(rig, channel, f, rate, w)?;
            Some(drive::rescaled(signal, made_at_dbfs, found.drive_dbfs))
        }
    };
    let played = match plan.drive {
        ZoutDrive::Tone { signal, .. } | ZoutDrive::Sweep { signal, .. } => signal,
    };
    let played = scaled.as_deref().unwrap_or(played);
    let caps = rig.play_and_record_loads(channel, played, rate, &[ra, rb])?;
    rig.set_load(ra)?;
    if caps[0] == caps[1] {
        return Err(Error::WrongKind {
            channel,
            found: "the two captures hold the same samples: one recording given twice".into(),
            next: "Give the capture into the first load, then the one into the second.".into(),
        });
    }
    let (fs, thr, bits) = (rate as f64, rig.overload_threshold(), rig.resolution_bits());
    match plan.drive {
        ZoutDrive::Sweep { signal, params } => {
            let an = ResponseAnalyzer::new(ResponseConfig::default())?;
            let a = an.analyze(channel, signal, params, &caps[0], fs, thr)?;
            let b = an.analyze(channel, signal, params, &caps[1], fs, thr)?;
            let clock = rig.shares_clock().then_some(fs);
            from_responses(channel, &a, ra, &b, rb, clock)
        }
        ZoutDrive::Tone { hint_hz, .. } => {
            let an = ToneAnalyzer::new(ToneConfig {
                fundamental_hint_hz: hint_hz,
                ..ToneConfig::default()
            })?;
            let level = |samples: &[f64]| {
                an.analyze(
                    &ChannelInput {
                        channel,
                        samples,
                        sample_rate_hz: fs,
                        overload_threshold: thr,
                        resolution_bits: bits,
                    },
                    &Calibration::default(),
                )
            };
            let (ta, tb) = (level(&caps[0])?, level(&caps[1])?);
            let mut res = from_tones(channel, &ta, ra, &tb, rb)?;
            if rig.shares_clock() {
                // Both captures are aligned with the stimulus: the same span of each gives the
                // complex ratio of the two voltages, and Z with its phase.
                let span = (
                    (ta.analysed_from_s * fs).round() as usize,
                    (ta.analysed_to_s * fs).round() as usize,
                );
                let f = ta.fundamental_hz;
                let pa = phasor(&caps[0], span.0, span.1, f, fs);
                let pb = phasor(&caps[1], span.0, span.1, f, fs);
                if let Some((pa, pb)) = pa.zip(pb).filter(|(pa, _)| pa.norm() > 0.0) {
                    let z = two_load_complex(Complex64::new(1.0, 0.0), ra, pb / pa, rb)?;
                    res.set_complex(z);
                }
            } else if res.frequency_hz > PHASE_MATTERS_HZ {
                res.warnings.push(C::PhaseUnknown.say(format!(
                    "two recordings of a tone give |Z| from their magnitudes alone, exact only where Z is resistive; at {:.0} Hz an output transformer's leakage inductance can make it reactive, and the figure then reads low (1.53 ohm for 1.5 + j0.63 ohm between 8 and 16 ohm). Measure on a rig (--rig) for |Z| with its phase, or at 1 kHz",
                    res.frequency_hz
                )));
            }
            Ok(res)
        }
    }
}

/// Z across the band from two responses to the same sweep. The difference of the two curves
/// must stand out of its own point-to-point scatter (a real output impedance changes smoothly
/// with frequency; noise changes from one point to the next).
///
/// `shared_clock`: the sample rate when both captures share one time base with the stimulus (a
/// rig's captures): the responses are then set against each other as complex voltages, both at
/// the first capture's latency, and Z has its phase (a transformer's leakage inductance makes it
/// rise with frequency). Separate recordings (`None`) give |Z| from the magnitudes only, exact
/// only where Z is resistive, and say so.
pub fn from_responses(
    channel: usize,
    a: &ResponseResult,
    ra: f64,
    b: &ResponseResult,
    rb: f64,
    shared_clock: Option<f64>,
) -> Result<ZoutResult> {
    check_loads(ra, rb)?;
    let lin = |r: &ResponseResult, db: f64| 10f64.powf((r.reference_gain_db + db) / 20.0);
    let diff: Vec<f64> = a
        .points
        .iter()
        .zip(&b.points)
        .map(|(pa, pb)| {
            (b.reference_gain_db + pb.magnitude_db) - (a.reference_gain_db + pa.magnitude_db)
        })
        .collect();
    // Robust scatter of one difference: the median absolute step between neighbours, scaled to
    // a standard deviation (1.4826 for normal data) and divided by sqrt 2 (a step holds two).
    let mut steps: Vec<f64> = diff.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    steps.sort_by(f64::total_cmp);
    let sigma = steps.get(steps.len() / 2).copied().unwrap_or(0.0) * 1.4826 / 2f64.sqrt();
    check_distinct(channel, a.reference_gain_db, b.reference_gain_db, sigma)?;
    let mut res = from_levels(channel, a.reference_hz, lin(a, 0.0), ra, lin(b, 0.0), rb)?;
    res.zout_sigma_ohms = Some(zout_sigma(lin(a, 0.0), ra, lin(b, 0.0), rb, sigma));
    let nominal = res.nominal_load_ohms;
    // Each response's phase has its own latency taken out; with a shared clock, the second is
    // put back on the first's time base (a delay d turns the phase by -360 f d).
    let voltage = |r: &ResponseResult, p: &ResponsePoint, fs: f64| {
        let shift = -360.0 * p.frequency_hz * (r.latency_samples - a.latency_samples) / fs;
        Complex64::from_polar(lin(r, p.magnitude_db), (p.phase_deg + shift).to_radians())
    };
    res.points = a
        .points
        .iter()
        .zip(&b.points)
        .filter_map(|(pa, pb)| {
            let Some(fs) = shared_clock else {
                let z = two_load(lin(a, pa.magnitude_db), ra, lin(b, pb.magnitude_db), rb).ok()?;
                return Some(ZoutPoint {
                    frequency_hz: pa.frequency_hz,
                    zout_ohms: z,
                    damping_factor: nominal / z,
                    phase_deg: None,
                    resistance_ohms: None,
                    reactance_ohms: None,
                    inductance_uh: None,
                });
            };
            let z = two_load_complex(voltage(a, pa, fs), ra, voltage(b, pb, fs), rb).ok()?;
            let w = 2.0 * std::f64::consts::PI * pa.frequency_hz;
            Some(ZoutPoint {
                frequency_hz: pa.frequency_hz,
                zout_ohms: z.norm(),
                damping_factor: nominal / z.norm(),
                phase_deg: Some(z.arg().to_degrees()),
                resistance_ohms: Some(z.re),
                reactance_ohms: Some(z.im),
                inductance_uh: (z.im > 0.0).then(|| z.im / w * 1e6),
            })
        })
        .collect();
    // With the phase known, the headline at the reference frequency is the complex Z there
    // (interpolated in log frequency between its two neighbouring points).
    let parts: Vec<(f64, f64, f64)> = res
        .points
        .iter()
        .filter_map(|p| Some((p.frequency_hz, p.resistance_ohms?, p.reactance_ohms?)))
        .collect();
    if parts.len() >= 2 {
        let at = |pick: fn(&(f64, f64, f64)) -> f64| {
            let pairs: Vec<(f64, f64)> = parts.iter().map(|p| (p.0, pick(p))).collect();
            crate::analysis::sweep::interpolate_log(&pairs, res.frequency_hz)
        };
        res.set_complex(Complex64::new(at(|p| p.1), at(|p| p.2)));
    }
    if shared_clock.is_none() && !res.points.is_empty() {
        res.warnings.push(C::PhaseUnknown.say(
            "the two recordings do not share a clock, so Z across the band comes from magnitudes only: exact where it is resistive, not where it is reactive (a transformer's leakage inductance at high frequencies). Measure on a rig (--rig) for |Z| with its phase",
        ));
    }
    Ok(res)
}
