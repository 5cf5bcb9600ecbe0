//! The simulated bench: converter, amplifier model, output transformer, dummy load, attenuator and
//! converter again (see [`super::model`]). Deterministic: the same model, stimulus and run number
//! give the same capture.

use super::model::{Bench, Channel, Model};
use super::Rig;
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::signal::dither::Rng;
use std::f64::consts::{PI, SQRT_2};

/// The amplifier's static transfer from grid volts to primary volts, tabulated on the load line
/// and read with cubic Hermite interpolation (solving the load line per sample would cost a
/// bisection of the Koren equation every sample).
struct Transfer {
    lo: f64,
    step: f64,
    v: Vec<f64>,
    slope: Vec<f64>,
}

impl Transfer {
    fn new(ch: &Channel, load_ohms: f64) -> Self {
        let line = ch.load_line(load_ohms);
        let lo = 3.0 * ch.bias_v;
        let hi = -ch.bias_v;
        let n: usize = 8193;
        let step = (hi - lo) / (n - 1) as f64;
        let v: Vec<f64> = (0..n)
            .map(|i| line.primary_voltage(lo + i as f64 * step))
            .collect();
        let slope: Vec<f64> = (0..n)
            .map(|i| {
                let a = v[i.saturating_sub(1)];
                let b = v[(i + 1).min(n - 1)];
                let span = ((i + 1).min(n - 1) - i.saturating_sub(1)) as f64 * step;
                (b - a) / span
            })
            .collect();
        Transfer { lo, step, v, slope }
    }

    fn at(&self, vg: f64) -> f64 {
        let x = ((vg - self.lo) / self.step).clamp(0.0, (self.v.len() - 1) as f64 - 1e-9);
        let i = x.floor() as usize;
        let t = x - i as f64;
        let (p0, p1) = (self.v[i], self.v[i + 1]);
        let (m0, m1) = (self.slope[i] * self.step, self.slope[i + 1] * self.step);
        let t2 = t * t;
        let t3 = t2 * t;
        (2.0 * t3 - 3.0 * t2 + 1.0) * p0
            + (t3 - 2.0 * t2 + t) * m0
            + (-2.0 * t3 + 3.0 * t2) * p1
            + (t3 - t2) * m1
    }
}

/// Second-order low-pass, bilinear transform of an analog prototype (RBJ cookbook form).
struct Biquad {
    b: [f64; 3],
    a: [f64; 3],
    x: [f64; 2],
    y: [f64; 2],
}

impl Biquad {
    fn lowpass(f0: f64, q: f64, fs: f64) -> Self {
        let w0 = 2.0 * PI * (f0.min(0.45 * fs)) / fs;
        let alpha = w0.sin() / (2.0 * q);
        let c = w0.cos();
        let a0 = 1.0 + alpha;
        Biquad {
            b: [(1.0 - c) / 2.0 / a0, (1.0 - c) / a0, (1.0 - c) / 2.0 / a0],
            a: [1.0, -2.0 * c / a0, (1.0 - alpha) / a0],
            x: [0.0; 2],
            y: [0.0; 2],
        }
    }

    fn run(&mut self, v: f64) -> f64 {
        let y = self.b[0] * v + self.b[1] * self.x[0] + self.b[2] * self.x[1]
            - self.a[1] * self.y[0]
            - self.a[2] * self.y[1];
        self.x = [v, self.x[0]];
        self.y = [y, self.y[0]];
        y
    }
}

/// A cold start: the driver's gain starts `cold_db` off its warm value and settles
/// exponentially with time constant `tau_s` (the valves' emission coming up as the cathodes heat),
/// counted over everything the rig has played since it was made. Invented, for the demo's trend.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Warmup {
    pub cold_db: f64,
    pub tau_s: f64,
}

/// The output transformer's leakage inductance (H) the simulated channel implies: the one whose
/// corner against the rated load and the winding resistance is the model's treble corner.
pub fn leakage_h(ch: &Channel, load_ohms: f64) -> f64 {
    (load_ohms + ch.winding_ohms) / (2.0 * PI * ch.treble_corner_hz)
}

/// What a capacitance `farads` across the load (`load_ohms`) does to the channel's output: the
/// leakage inductance L and winding resistance Rw into R || C over the same into R alone,
/// `(R + Rw + sL) / (R + Rw + s (L + Rw R C) + s^2 L R C)` (circuit closed form); 1 at DC, a
/// resonance near 1 / (2 pi sqrt(L C)).
pub fn capacitive_load(
    ch: &Channel,
    load_ohms: f64,
    farads: f64,
    f: f64,
) -> realfft::num_complex::Complex64 {
    let (r, rw, l, c) = (load_ohms, ch.winding_ohms, leakage_h(ch, load_ohms), farads);
    let s = realfft::num_complex::Complex64::new(0.0, 2.0 * PI * f);
    (s * l + (r + rw)) / (s * s * (l * r * c) + s * (l + rw * r * c) + (r + rw))
}

/// `v` (at `fs`) through the linear network `h` (its complex gain against frequency), exactly at
/// every frequency: in the frequency domain, zero-padded so nothing wraps round. Used for what
/// follows everything nonlinear in a channel ([`capacitive_load`], [`super::model::Crosstalk`]).
fn through(v: &mut [f64], fs: f64, h: impl Fn(f64) -> realfft::num_complex::Complex64) {
    let n = (2 * v.len()).next_power_of_two();
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let (fwd, inv) = (planner.plan_fft_forward(n), planner.plan_fft_inverse(n));
    let mut buf = vec![0.0; n];
    buf[..v.len()].copy_from_slice(v);
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("sizes match the plan");
    for (k, c) in spec.iter_mut().enumerate() {
        *c *= h(k as f64 * fs / n as f64) / n as f64;
    }
    spec[0].im = 0.0;
    spec[n / 2].im = 0.0;
    inv.process(&mut spec, &mut buf)
        .expect("sizes match the plan");
    v.copy_from_slice(&buf[..v.len()]);
}

/// The simulated bench as a [`Rig`].
pub struct SimRig {
    pub model: Model,
    load_ohms: f64,
    runs: u64,
    warmup: Option<Warmup>,
    /// Seconds played so far (the warm-up's clock).
    clock_s: f64,
    /// Load-line tables already built, by channel and load: a staircase plays dozens of steps
    /// into the same load, and each table costs thousands of load-line solutions.
    transfers: Vec<((usize, u64), std::sync::Arc<Transfer>)>,
    /// A capacitance across the dummy load (F), as a long speaker cable or an electrostatic
    /// speaker puts there; 0 for none.
    load_farads: f64,
}

impl SimRig {
    pub fn new(model: Model) -> Self {
        let load_ohms = model.bench.load_ohms;
        SimRig {
            model,
            load_ohms,
            runs: 0,
            warmup: None,
            clock_s: 0.0,
            transfers: Vec::new(),
            load_farads: 0.0,
        }
    }

    /// The bench with `microfarads` across the dummy load (0 to 100 uF).
    pub fn with_load_capacitance(mut self, microfarads: f64) -> Result<Self> {
        if !(microfarads.is_finite() && (0.0..=100.0).contains(&microfarads)) {
            return Err(Error::InvalidSetting(format!(
                "--load-uf must lie between 0 and 100 uF, got {}",
                crate::error::shown(microfarads)
            )));
        }
        self.load_farads = microfarads * 1e-6;
        Ok(self)
    }

    /// The bench switched on cold: see [`Warmup`].
    pub fn cold(model: Model, warmup: Warmup) -> Self {
        SimRig {
            warmup: Some(warmup),
            ..SimRig::new(model)
        }
    }

    /// The channel's load-line table for the present load, built once per channel and load.
    fn transfer(&mut self, channel: usize) -> Result<std::sync::Arc<Transfer>> {
        let ch = *self.channel(channel)?;
        let key = (channel, self.load_ohms.to_bits());
        if let Some((_, t)) = self.transfers.iter().find(|(k, _)| *k == key) {
            return Ok(std::sync::Arc::clone(t));
        }
        let t = std::sync::Arc::new(Transfer::new(&ch, self.load_ohms));
        self.transfers.push((key, std::sync::Arc::clone(&t)));
        Ok(t)
    }

    fn channel(&self, ch: usize) -> Result<&Channel> {
        match ch {
            1 => Ok(&self.model.left),
            2 => Ok(&self.model.right),
            _ => Err(Error::NoSuchChannel {
                requested: ch,
                available: 2,
            }),
        }
    }
}

impl Rig for SimRig {
    fn describe(&self) -> String {
        let c = if self.load_farads > 0.0 {
            format!(" || {} uF", self.load_farads * 1e6)
        } else {
            String::new()
        };
        format!(
            "simulated bench: {} into {} ohm{c}",
            self.model.name, self.load_ohms
        )
    }

    fn calibration(&self) -> Calibration {
        Calibration {
            load_ohms: Some(self.load_ohms),
            ..self.model.calibration()
        }
    }

    fn channels(&self) -> usize {
        2
    }

    fn overload_threshold(&self) -> f64 {
        let half = (1u64 << (self.model.bench.bits - 1)) as f64;
        (half - 1.0) / half
    }

    fn resolution_bits(&self) -> u32 {
        self.model.bench.bits as u32
    }

    fn set_load(&mut self, ohms: f64) -> Result<()> {
        self.load_ohms = super::checked_load(ohms)?;
        Ok(())
    }

    fn play_and_record(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>> {
        let ch = *self.channel(channel)?;
        self.runs += 1;
        let seed = self.model.bench.seed ^ (self.runs << 8) ^ channel as u64;
        let transfer = self.transfer(channel)?;
        let fs = sample_rate_hz as f64;
        let warmed: Vec<f64>;
        let stimulus = match self.warmup {
            Some(w) => {
                let t0 = self.clock_s;
                warmed = stimulus
                    .iter()
                    .enumerate()
                    .map(|(i, &s)| {
                        let t = t0 + i as f64 / fs;
                        s * 10f64.powf(w.cold_db * (-t / w.tau_s).exp() / 20.0)
                    })
                    .collect();
                &warmed[..]
            }
            None => stimulus,
        };
        self.clock_s += stimulus.len() as f64 / fs;
        Ok(simulate_with(
            &transfer,
            &self.model.bench,
            &ch,
            (self.load_ohms, self.load_farads),
            stimulus,
            fs,
            seed,
            None,
        ))
    }

    /// The driven channel as [`Rig::play_and_record`] gives it; every other channel idle (its
    /// input silent: its own hum and noise) with the model's [`super::model::Crosstalk`] of the driven
    /// channel's output voltage added at its output terminals.
    fn play_and_record_all(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        let driven = self.play_and_record(channel, stimulus, sample_rate_hz)?;
        let fs = sample_rate_hz as f64;
        let bench = self.model.bench;
        // The driven channel's voltage at the load, read back from its capture (the converter's
        // own noise in it is 100 dB and more below, and leaks as little as the rest).
        let volts = bench.attenuation * bench.input_fs_vrms * SQRT_2;
        let leak: Vec<f64> = match self.model.crosstalk {
            Some(x) => {
                let mut v: Vec<f64> = driven.iter().map(|y| y * volts).collect();
                through(&mut v, fs, |f| x.at(f));
                v
            }
            None => vec![0.0; driven.len()],
        };
        let silent = vec![0.0; stimulus.len()];
        let mut all = Vec::with_capacity(self.channels());
        for other in 1..=self.channels() {
            if other == channel {
                all.push(driven.clone());
                continue;
            }
            let ch = *self.channel(other)?;
            let transfer = self.transfer(other)?;
            let seed = self.model.bench.seed ^ (self.runs << 8) ^ ((other as u64) << 4);
            all.push(simulate_with(
                &transfer,
                &bench,
                &ch,
                (self.load_ohms, self.load_farads),
                &silent,
                fs,
                seed,
                Some(&leak),
            ));
        }
        Ok(all)
    }
}

/// Run `stimulus` (interface output samples, full scale 1.0) through the bench and one channel.
pub fn simulate(
    bench: &Bench,
    ch: &Channel,
    load_ohms: f64,
    stimulus: &[f64],
    fs: f64,
    seed: u64,
) -> Vec<f64> {
    simulate_with(
        &Transfer::new(ch, load_ohms),
        bench,
        ch,
        (load_ohms, 0.0),
        stimulus,
        fs,
        seed,
        None,
    )
}

/// [`simulate`] with the channel's load-line table already built for `load_ohms`; `added`
/// (volts, as long as `stimulus`) is added at the output terminals (another channel's crosstalk).
#[allow(clippy::too_many_arguments)]
fn simulate_with(
    transfer: &Transfer,
    bench: &Bench,
    ch: &Channel,
    (load_ohms, load_farads): (f64, f64),
    stimulus: &[f64],
    fs: f64,
    seed: u64,
    added: Option<&[f64]>,
) -> Vec<f64> {
    let mut rng = Rng::new(seed);
    let line = ch.load_line(load_ohms);
    let q = |x: f64, bits: u16| {
        let half = (1u64 << (bits - 1)) as f64;
        (x * half).round().clamp(-half, half - 1.0) / half
    };
    let dac_sigma = 10f64.powf(bench.dac_noise_dbfs / 20.0) / SQRT_2;
    let adc_sigma = 10f64.powf(bench.adc_noise_dbfs / 20.0) / SQRT_2;
    let k_grid = ch.grid_ohms / (ch.grid_ohms + ch.driver_ohms);
    let n = ch.turns_ratio();
    let divider = load_ohms / (load_ohms + ch.winding_ohms);
    // Bass corner: the primary inductance against the source (rp) in parallel with the load.
    let rp = ch.triode.rp(ch.bias_v, ch.b_plus_v);
    let r_src = rp * line.reflected_ohms / (rp + line.reflected_ohms);
    let f_bass = r_src / (2.0 * PI * ch.primary_inductance_h);
    let hp_a = 1.0 / (1.0 + 2.0 * PI * f_bass / fs); // one-pole high-pass coefficient
    let mut hp_prev_in = 0.0;
    let mut hp_prev_out = 0.0;
    let mut flux = 0.0;
    let leak = 1.0 - 2.0 * PI * 1.0 / fs;
    let core_peak = ch.core_reference_vrms * SQRT_2;
    let flux_ref = core_peak / (2.0 * PI * 20.0);
    let mut lp = Biquad::lowpass(ch.treble_corner_hz, ch.treble_q, fs);
    let noise_sigma = ch.noise_vrms * ((fs / 2.0) / 20_000.0).sqrt();
    let (wh, wr) = (2.0 * PI * ch.mains_hz / fs, 4.0 * PI * ch.mains_hz / fs);
    let full_in = bench.input_fs_vrms * SQRT_2;
    // The channel up to its output (the interface's DAC noise drawn here), then what is added at
    // the output and the ADC (hum, noise, quantisation). Without a capacitive load each sample
    // goes through both at once, so the noise draws keep their order.
    let mut front = |rng: &mut Rng, s: f64| {
        let dac = q(s, bench.bits) + dac_sigma * rng.gaussian();
        let v_in = dac * bench.output_fs_vrms * SQRT_2;
        let g = ch.driver_gain * v_in;
        let vg = ch.bias_v + g + ch.driver_h2_per_v * g * g;
        // Above 0 V the grid conducts: a smooth knee (0.5 V wide) into the divided slope.
        let over = 0.5 * (vg / 0.5).exp().ln_1p();
        let vg = vg - (1.0 - k_grid) * if vg > 20.0 { vg } else { over };
        let v_sec = transfer.at(vg) / n * divider;
        // Output transformer: bass roll-off, core distortion growing as flux (V / f) grows,
        // treble roll-off.
        let hp = hp_a * (hp_prev_out + v_sec - hp_prev_in);
        hp_prev_in = v_sec;
        hp_prev_out = hp;
        flux = flux * leak + hp / fs;
        let phi = flux / flux_ref;
        let cored = hp - 4.0 * ch.core_h3_at_20hz * core_peak * phi * phi * phi;
        lp.run(cored)
    };
    let back = |rng: &mut Rng, i: usize, mut v: f64| {
        v += ch.hum_vrms * SQRT_2 * (wh * i as f64 + 0.4).sin()
            + ch.ripple_vrms * SQRT_2 * (wr * i as f64 + 1.3).sin()
            + noise_sigma * rng.gaussian();
        let x = v / bench.attenuation / full_in + adc_sigma * rng.gaussian();
        q(x, bench.bits)
    };
    if load_farads > 0.0 || added.is_some() {
        let mut v: Vec<f64> = stimulus.iter().map(|&s| front(&mut rng, s)).collect();
        if load_farads > 0.0 {
            through(&mut v, fs, |f| {
                capacitive_load(ch, load_ohms, load_farads, f)
            });
        }
        if let Some(a) = added {
            v.iter_mut().zip(a).for_each(|(v, a)| *v += a);
        }
        return v
            .into_iter()
            .enumerate()
            .map(|(i, v)| back(&mut rng, i, v))
            .collect();
    }
    stimulus
        .iter()
        .enumerate()
        .map(|(i, &s)| {
            let v = front(&mut rng, s);
            back(&mut rng, i, v)
        })
        .collect()
}
