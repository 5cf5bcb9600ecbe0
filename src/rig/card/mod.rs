//! The live rig: an audio interface through cpal (feature `live`).
//!
//! Both streams open once per sample rate and keep running: the output plays silence until a
//! run pushes frames, the input is thrown away until a run arms it. The audio callbacks only copy
//! between the device's buffers and two lock-free ring buffers (rtrb) and count what went wrong
//! in atomics: no allocation, no lock, no I/O. The main thread feeds the output ring, drains the
//! input ring, and checks every capture with the markers of [`super::framing`]: latency, polarity,
//! lost or inserted frames, holes, clock drift. A capture with a gap is kept under a name that
//! says it is partial and retried once.

use super::framing::{self, Verdict};
use super::{Rig, RigOptions};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use cpal::traits::{DeviceTrait, HostTrait, StreamTrait};
use cpal::{FromSample, Sample, SampleFormat, SizedSample, StreamConfig};
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering::Relaxed};
use std::sync::Arc;
use std::time::{Duration, Instant};

use super::{catch_interrupt, interrupted};

mod device;
mod engine;
mod list;
pub(crate) use device::*;
use engine::*;
pub use list::*;

/// One run's raw capture: the chosen inputs, and what went wrong.
pub struct RawRun {
    pub channels: Vec<Vec<f64>>,
    pub reported_gaps: u64,
}

/// Pre-flight findings for one amplifier channel.
#[derive(Debug, Clone, Copy)]
pub struct Preflight {
    pub latency_ms: f64,
    pub gain: f64,
}

/// The live rig.
pub struct CardRig {
    host: cpal::Host,
    out_dev: cpal::Device,
    in_dev: cpal::Device,
    opts: RigOptions,
    engine: Option<Engine>,
    preflight: Vec<Option<Preflight>>,
    /// Per channel, the rate and the latency residual of its first whole capture: later
    /// captures are cut on the same whole-sample grid ([`framing::assess_near`]), so their
    /// phases stay comparable however the latency rounds.
    grid: Vec<Option<(u32, f64)>>,
    /// Latest gain from output to input per channel (peak in / peak out), for the headroom check.
    gain: Vec<Option<f64>>,
    load_ohms: Option<f64>,
    /// Per channel, what the runs noticed since the last `take_notes`.
    notes: Vec<Vec<crate::warning::Warning>>,
    in_preflight: bool,
}

impl CardRig {
    /// Open the host and devices `opts` names (streams open at the first run's rate).
    pub fn open(device: Option<&str>, opts: &RigOptions) -> Result<CardRig> {
        let host = host_by_name(opts.host.as_deref())?;
        if opts.self_patch && host.id() != cpal::HostId::Jack {
            return Err(Error::InvalidSetting(
                "--self-patch connects ampnote's own ports and works with the JACK host only (--host jack); with other hosts loop the interface's output to its input with a cable".into(),
            ));
        }
        let out_dev = pick_device(&host, device, true)?;
        let in_dev = pick_device(&host, opts.input_device.as_deref().or(device), false)?;
        if opts.outputs.len() != opts.inputs.len() || opts.outputs.is_empty() {
            return Err(Error::InvalidSetting(format!(
                "--outputs and --inputs must name one interface channel per amplifier channel, as many of each; got {} and {}",
                opts.outputs.len(),
                opts.inputs.len()
            )));
        }
        let n = opts.outputs.len();
        Ok(CardRig {
            host,
            out_dev,
            in_dev,
            opts: opts.clone(),
            engine: None,
            preflight: vec![None; n],
            grid: vec![None; n],
            gain: vec![None; n],
            load_ohms: opts.calibration.load_ohms,
            notes: vec![Vec::new(); n],
            in_preflight: false,
        })
    }

    fn engine(&mut self, rate: u32) -> Result<&mut Engine> {
        if self.engine.as_ref().is_some_and(|e| e.rate != rate) {
            self.engine = None;
            self.preflight.iter_mut().for_each(|p| *p = None);
        }
        if self.engine.is_none() {
            self.engine = Some(self.open_engine(rate)?);
        }
        Ok(self.engine.as_mut().expect("just opened"))
    }

    fn open_engine(&self, rate: u32) -> Result<Engine> {
        let need_out = *self.opts.outputs.iter().max().expect("checked");
        let need_in = *self.opts.inputs.iter().max().expect("checked");
        let (ocfg, ofmt) =
            pick_config(&self.out_dev, true, need_out, rate, self.opts.buffer_frames)?;
        let (icfg, ifmt) =
            pick_config(&self.in_dev, false, need_in, rate, self.opts.buffer_frames)?;
        let (och, ich) = (ocfg.channels as usize, icfg.channels as usize);
        // One second of room each way: the main thread tops up and drains every few ms.
        let (out_ring, out_cons) = rtrb::RingBuffer::<f32>::new(rate as usize * och);
        let (in_prod, in_ring) = rtrb::RingBuffer::<f32>::new(rate as usize * ich);
        let shared = Arc::new(Shared::default());
        let o = match ofmt {
            SampleFormat::I16 => build_output::<i16>(&self.out_dev, ocfg, out_cons, shared.clone()),
            SampleFormat::I32 => build_output::<i32>(&self.out_dev, ocfg, out_cons, shared.clone()),
            _ => build_output::<f32>(&self.out_dev, ocfg, out_cons, shared.clone()),
        }?;
        let i = match ifmt {
            SampleFormat::I16 => build_input::<i16>(&self.in_dev, icfg, in_prod, shared.clone()),
            SampleFormat::I32 => build_input::<i32>(&self.in_dev, icfg, in_prod, shared.clone()),
            _ => build_input::<f32>(&self.in_dev, icfg, in_prod, shared.clone()),
        }?;
        i.play()
            .map_err(|e| transient(format!("cannot start the input stream: {e}")))?;
        o.play()
            .map_err(|e| transient(format!("cannot start the output stream: {e}")))?;
        let buffer_frames = i.buffer_size().ok();
        if self.opts.self_patch {
            jack_self_patch(&self.opts.outputs, &self.opts.inputs)?;
        }
        eprintln!(
            "live: {} at {rate} Hz; output {} ({och} ch, {ofmt}), input {} ({ich} ch, {ifmt}){}",
            self.host.id().name(),
            device_label(&self.out_dev),
            device_label(&self.in_dev),
            buffer_frames.map_or(String::new(), |b| format!(", {b}-frame buffers"))
        );
        Ok(Engine {
            rate,
            out_channels: och,
            in_channels: ich,
            out_ring,
            in_ring,
            shared,
            buffer_frames,
            _out: o,
            _in: i,
        })
    }

    /// Play `signal` on device output `out` (0-based) and capture device inputs `ins` (0-based)
    /// from before the output starts until `signal` and a latency allowance have come back.
    fn run_signal(
        &mut self,
        out: usize,
        ins: &[usize],
        signal: &[f64],
        rate: u32,
    ) -> Result<RawRun> {
        let keep_dir = self.opts.keep_dir.clone();
        let mut drop_pending = if self.in_preflight {
            0
        } else {
            std::mem::take(&mut self.opts.test_drop_frames)
        };
        let e = self.engine(rate)?;
        let fs = rate as f64;
        let sh = e.shared.clone();
        // Start counting afresh.
        e.discard_input();
        let gaps_before = sh.gaps();
        sh.overflow_frames.store(0, Relaxed);
        sh.mute.store(false, Relaxed);
        let preroll = (0.1 * fs) as usize;
        let allowance = (0.3 * fs) as usize + 4 * e.buffer_frames.unwrap_or(4096) as usize;
        let wanted = preroll + signal.len() + allowance;
        let mut caps: Vec<Vec<f64>> = ins.iter().map(|_| Vec::with_capacity(wanted)).collect();
        sh.armed.store(true, Relaxed);
        let mut pushed = 0usize;
        let mut started = false;
        let mut watchdog = Watchdog::new(&sh);
        loop {
            e.drain_input(|frame| {
                // The test hook: lose frames once, half way through the stimulus.
                if drop_pending > 0 && caps[0].len() > preroll + signal.len() / 2 {
                    drop_pending -= 1;
                    return;
                }
                for (cap, &i) in caps.iter_mut().zip(ins) {
                    cap.push(frame[i] as f64);
                }
            });
            let got = caps[0].len();
            // Input first: the stimulus starts only once the input is delivering data.
            if !started && got >= preroll {
                sh.out_taken.store(0, Relaxed);
                sh.out_target
                    .store((signal.len() * e.out_channels) as u64, Relaxed);
                started = true;
            }
            if started && pushed < signal.len() {
                let rest = &signal[pushed..];
                pushed += e.queue_output(out, rest.len(), |i| rest[i]);
            }
            if got >= wanted {
                break;
            }
            if interrupted() {
                sh.stop_run();
                let kept = keep_partial(&keep_dir, &caps, rate, "interrupted");
                return Err(Error::Interrupted(kept));
            }
            if let Some(why) = watchdog.check(&sh) {
                sh.stop_run();
                let kept = keep_partial(&keep_dir, &caps, rate, "failed");
                return Err(transient(format!("{why}{kept}")));
            }
            std::thread::sleep(Duration::from_millis(2));
        }
        sh.stop_run();
        let gaps = sh.gaps() - gaps_before;
        Ok(RawRun {
            channels: caps,
            reported_gaps: gaps,
        })
    }

    fn mapping(&self, channel: usize) -> Result<(usize, usize)> {
        let k = channel
            .checked_sub(1)
            .filter(|&k| k < self.opts.outputs.len());
        let Some(k) = k else {
            return Err(Error::InvalidSetting(format!(
                "amplifier channel {channel} has no interface channels: --outputs and --inputs name {} channel(s)",
                self.opts.outputs.len()
            )));
        };
        Ok((self.opts.outputs[k] - 1, self.opts.inputs[k] - 1))
    }

    /// A short low-level chirp to `channel`'s output before anything loud: it must come back on
    /// the channel's input and not on the others; gives latency, polarity and gain.
    pub fn preflight(&mut self, channel: usize, rate: u32) -> Result<Preflight> {
        let (out, inp) = self.mapping(channel)?;
        let mut ins: Vec<usize> = self.opts.inputs.iter().map(|i| i - 1).collect();
        ins.sort_unstable();
        ins.dedup();
        let framed = framing::frame(&vec![0.0; (0.05 * rate as f64) as usize], rate);
        self.in_preflight = true;
        let raw = self.run_signal(out, &ins, &framed.signal, rate);
        self.in_preflight = false;
        let raw = raw?;
        let found: Vec<(usize, Option<framing::Located>)> = ins
            .iter()
            .zip(&raw.channels)
            .map(|(&i, c)| (i, framing::locate(c, &framed, rate).ok()))
            .collect();
        let l = framing::judge_preflight(out, inp, &found).map_err(|fault| {
            let hint = matches!(fault, framing::PreflightFault::Nowhere { .. })
                && self.host.id() == cpal::HostId::Jack
                && !self.opts.self_patch;
            rig_error(format!(
                "pre-flight: {fault}{}",
                if hint {
                    "; with JACK, check the connections"
                } else {
                    ""
                }
            ))
        })?;
        let p = Preflight {
            latency_ms: l.latency_samples / rate as f64 * 1e3,
            gain: l.gain,
        };
        eprintln!(
            "live: pre-flight channel {channel}: output {} -> input {}, latency {:.2} ms, gain {:+.2} dB (input dBFS over output dBFS), polarity {}",
            out + 1,
            inp + 1,
            p.latency_ms,
            20.0 * p.gain.abs().log10(),
            if p.gain < 0.0 { "INVERTED" } else { "same" }
        );
        Ok(p)
    }
}

impl CardRig {
    /// Streams open at `rate`, the channel's pre-flight done, and the stimulus's projected peak at
    /// the interface input (its peak times the gain last seen) below full scale. Returns the
    /// stimulus's peak.
    fn ready(&mut self, channel: usize, rate: u32, stimulus: &[f64]) -> Result<f64> {
        let k = channel - 1;
        if self.engine.as_ref().is_none_or(|e| e.rate != rate) || self.preflight[k].is_none() {
            self.engine(rate)?;
            let p = self.preflight(channel, rate)?;
            self.preflight[k] = Some(p);
            if self.gain[k].is_none() {
                self.gain[k] = Some(p.gain.abs());
            }
        }
        let peak = stimulus.iter().fold(0.0f64, |a, v| a.max(v.abs()));
        let gain = self.gain[k].unwrap_or(1.0);
        if peak * gain > 0.999 {
            return Err(Error::WouldClipInput {
                reach_dbfs: 20.0 * (peak * gain).log10(),
                peak_dbfs: 20.0 * peak.log10(),
                gain_db: 20.0 * gain.log10(),
            });
        }
        Ok(peak)
    }
}

/// Write what a broken run captured, named as partial; the suffix for an error message.
fn keep_partial(dir: &std::path::Path, caps: &[Vec<f64>], rate: u32, what: &str) -> String {
    let n = caps.iter().map(Vec::len).min().unwrap_or(0);
    if n == 0 {
        return "; nothing was captured".into();
    }
    let chans: Vec<Vec<f64>> = caps.iter().map(|c| c[..n].to_vec()).collect();
    let stamp = crate::notebook::timestamp_for_file();
    let path: PathBuf = dir.join(format!("{what}-{stamp}.partial.wav"));
    let r = std::fs::create_dir_all(dir).map_err(|e| Error::Write {
        path: dir.to_path_buf(),
        source: e,
    });
    match r.and_then(|_| {
        crate::signal::wav::write_wav(
            &path,
            rate,
            &chans,
            crate::signal::wav::WavFormat::Float32,
            1,
        )
    }) {
        Ok(()) => format!(
            "; what was captured ({:.2} s) is kept as {}, not as a result",
            n as f64 / rate as f64,
            path.display()
        ),
        Err(e) => format!("; the partial capture could not be kept: {e}"),
    }
}

/// Connect ampnote's own JACK output ports to its input ports (output k to input k), for checking
/// the rig with no amplifier.
fn jack_self_patch(outputs: &[usize], inputs: &[usize]) -> Result<()> {
    let (client, _) = jack::Client::new("ampnote_patch", jack::ClientOptions::NO_START_SERVER)
        .map_err(|e| {
            rig_error(format!(
                "JACK: cannot connect to the server to patch ports: {e}"
            ))
        })?;
    let base = format!("cpal_client_{}", std::process::id());
    let ports = client.ports(Some(&format!("^{base}")), None, jack::PortFlags::empty());
    let find = |suffix: &str| ports.iter().find(|p| p.ends_with(suffix)).cloned();
    for (o, i) in outputs.iter().zip(inputs) {
        let (Some(op), Some(ip)) = (
            find(&format!(":out_{}", o - 1)),
            find(&format!(":in_{}", i - 1)),
        ) else {
            return Err(rig_error(format!(
                "JACK: ampnote's ports out_{} / in_{} are not there to patch (ports seen: {})",
                o - 1,
                i - 1,
                ports.join(", ")
            )));
        };
        client
            .connect_ports_by_name(&op, &ip)
            .map_err(|e| rig_error(format!("JACK: cannot connect {op} to {ip}: {e}")))?;
    }
    Ok(())
}

impl Rig for CardRig {
    fn describe(&self) -> String {
        format!(
            "live: {} host, output {}, input {}",
            self.host.id().name(),
            device_label(&self.out_dev),
            device_label(&self.in_dev)
        )
    }

    fn calibration(&self) -> Calibration {
        Calibration {
            load_ohms: self.load_ohms,
            ..self.opts.calibration
        }
    }

    fn channels(&self) -> usize {
        self.opts.outputs.len()
    }

    fn overload_threshold(&self) -> f64 {
        0.999
    }

    fn take_notes(&mut self, channel: usize) -> Vec<crate::warning::Warning> {
        channel
            .checked_sub(1)
            .and_then(|k| self.notes.get_mut(k))
            .map(std::mem::take)
            .unwrap_or_default()
    }

    fn resolution_bits(&self) -> u32 {
        24
    }

    fn set_load(&mut self, ohms: f64) -> Result<()> {
        if self.load_ohms == Some(ohms) {
            return Ok(());
        }
        eprintln!(
            "Switch the dummy load to {ohms} ohm, then press Enter. Mute or switch off the amplifier first; a tube amplifier must never run without its load."
        );
        let mut line = String::new();
        let n = std::io::stdin().read_line(&mut line).unwrap_or(0);
        if n == 0 || interrupted() {
            return Err(rig_error(
                "the load was not confirmed (no answer on the terminal); nothing was measured on it",
            ));
        }
        self.load_ohms = Some(ohms);
        Ok(())
    }

    fn watch(
        &mut self,
        channel: usize,
        table: &[f64],
        rate: u32,
        window: usize,
        hop: usize,
        look: &mut dyn FnMut(&[f64]) -> bool,
    ) -> Result<()> {
        catch_interrupt();
        let (out, inp) = self.mapping(channel)?;
        self.ready(channel, rate, table)?;
        let e = self.engine(rate)?;
        let sh = e.shared.clone();
        e.discard_input();
        sh.mute.store(false, Relaxed);
        sh.out_taken.store(0, Relaxed);
        sh.out_target.store(0, Relaxed);
        // The latest input, with room for a hop or two before the oldest part is dropped.
        let mut buf: Vec<f64> = Vec::with_capacity(2 * window + rate as usize);
        let (mut total, mut next_at) = (0usize, window);
        let underruns0 = sh.underruns.load(Relaxed);
        let mut pos = 0usize;
        let mut watchdog = Watchdog::new(&sh);
        sh.armed.store(true, Relaxed);
        let outcome = loop {
            // Keep about half a second queued on the output: the analysis may take a while.
            let want = (rate as usize / 2).saturating_sub(e.output_queued());
            if want > 0 {
                let n = e.queue_output(out, want, |i| table[(pos + i) % table.len()]);
                if n > 0 {
                    pos = (pos + n) % table.len();
                    // Endless from the first push on: every short output buffer counts.
                    sh.out_target.store(u64::MAX, Relaxed);
                }
            }
            e.drain_input(|frame| {
                buf.push(frame[inp] as f64);
                total += 1;
            });
            if buf.len() > 2 * window {
                buf.drain(..buf.len() - window);
            }
            // One reading every `hop` frames on average, whatever the host's buffer size.
            if buf.len() >= window && total >= next_at {
                next_at += hop;
                if !look(&buf[buf.len() - window..]) {
                    break Ok(());
                }
            }
            if interrupted() {
                break Ok(());
            }
            if let Some(why) = watchdog.check(&sh) {
                break Err(transient(why));
            }
            std::thread::sleep(Duration::from_millis(5));
        };
        sh.stop_run();
        let short = sh.underruns.load(Relaxed) - underruns0;
        if short > 0 {
            eprintln!("live: the output ran short {short} time(s) while watching (readings then were wrong): is the computer busy?");
        }
        outcome
    }

    fn play_and_record(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<f64>> {
        let mut all = self.capture(channel, stimulus, sample_rate_hz, false)?;
        Ok(all.swap_remove(0))
    }

    /// Every amplifier channel's input recorded while `channel`'s output plays; the markers
    /// come back on the driven channel's input only, and its alignment (one clock, one stream)
    /// holds for every input.
    fn play_and_record_all(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
    ) -> Result<Vec<Vec<f64>>> {
        self.capture(channel, stimulus, sample_rate_hz, true)
    }
}

impl CardRig {
    /// Play `stimulus` framed by its markers into `channel` and record its input (with `all`,
    /// every amplifier channel's input too, in channel order); judged and aligned by the markers
    /// on the driven channel's input, retried once when broken.
    fn capture(
        &mut self,
        channel: usize,
        stimulus: &[f64],
        sample_rate_hz: u32,
        all: bool,
    ) -> Result<Vec<Vec<f64>>> {
        catch_interrupt();
        let (out, inp) = self.mapping(channel)?;
        let k = channel - 1;
        let peak = self.ready(channel, sample_rate_hz, stimulus)?;
        let framed = framing::frame(stimulus, sample_rate_hz);
        // The inputs recorded and which of them is the driven channel's.
        let (ins, mine): (Vec<usize>, usize) = if all {
            (self.opts.inputs.iter().map(|i| i - 1).collect(), k)
        } else {
            (vec![inp], 0)
        };
        for attempt in 0..2 {
            let raw = self.run_signal(out, &ins, &framed.signal, sample_rate_hz)?;
            let near = self.grid[k]
                .filter(|(rate, _)| *rate == sample_rate_hz)
                .map_or(0.0, |(_, r)| r);
            match framing::assess_near(
                &raw.channels[mine],
                &framed,
                sample_rate_hz,
                raw.reported_gaps,
                near,
            ) {
                Verdict::Whole { aligned, located } => {
                    if self.grid[k].is_none_or(|(rate, _)| rate != sample_rate_hz) {
                        self.grid[k] = Some((sample_rate_hz, located.residual));
                    }
                    let fs = sample_rate_hz as f64;
                    if located.drift_ppm.abs() >= 1.0 {
                        let note = format!(
                            "the interface's output and input clocks differ by {:+.1} ppm (separate clocks?): frequencies read on the input clock, and a sweep's phase at high frequencies is approximate",
                            located.drift_ppm
                        );
                        eprintln!("live: channel {channel}: {note}");
                        self.notes[k].push(crate::warning::WarningCode::Rig.say(note));
                    }
                    if attempt > 0 {
                        self.notes[k].push(crate::warning::WarningCode::Rig.say("the first capture had a gap and was measured again (its partial capture is kept in the captures folder)"));
                    }
                    let lat = located.latency_samples / fs * 1e3;
                    if let Some(p) = self.preflight[k] {
                        if (lat - p.latency_ms).abs() > 1.0 / fs * 1e3 {
                            eprintln!("live: channel {channel}: latency now {lat:.2} ms (pre-flight {:.2} ms)", p.latency_ms);
                        }
                    }
                    let over = aligned.iter().filter(|v| v.abs() >= 0.999).count();
                    if over > 0 {
                        eprintln!("live: channel {channel}: the interface input reached full scale on {over} sample(s): add attenuation or lower the level");
                    }
                    let out_peak = aligned.iter().fold(0.0f64, |a, v| a.max(v.abs()));
                    if peak > 1e-3 {
                        self.gain[k] = Some(out_peak / peak);
                    }
                    let start = framing::stimulus_start(&located, &framed);
                    return Ok(raw
                        .channels
                        .iter()
                        .enumerate()
                        .map(|(i, c)| {
                            if i == mine {
                                aligned.clone()
                            } else {
                                c[start..start + framed.stimulus_len].to_vec()
                            }
                        })
                        .collect());
                }
                Verdict::Broken(why) => {
                    let kept =
                        keep_partial(&self.opts.keep_dir, &raw.channels, sample_rate_hz, "gap");
                    if attempt == 0 {
                        eprintln!("live: channel {channel}: {why}{kept}; retrying once");
                    } else {
                        return Err(transient(format!(
                            "channel {channel}: {why}, again on the retry{kept}"
                        )));
                    }
                }
            }
        }
        unreachable!("the loop returns")
    }
}
