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

fn rig_error(text: impl Into<String>) -> Error {
    Error::Device {
        detail: text.into(),
        retryable: false,
    }
}

/// A fault that running again may clear: a stalled stream, a gap, a busy device.
fn transient(text: impl Into<String>) -> Error {
    Error::Device {
        detail: text.into(),
        retryable: true,
    }
}

/// The host by name (`alsa`, `jack`, ...), or the system's default.
pub fn host_by_name(name: Option<&str>) -> Result<cpal::Host> {
    let available = cpal::available_hosts();
    let names = || {
        available
            .iter()
            .map(|h| h.name().to_lowercase())
            .collect::<Vec<_>>()
            .join(", ")
    };
    let Some(name) = name else {
        return Ok(cpal::default_host());
    };
    let id = cpal::ALL_HOSTS
        .iter()
        .find(|h| h.name().eq_ignore_ascii_case(name))
        .copied()
        .ok_or_else(|| {
            // A name the build does not know is a typo in the flag (usage), not a device fault.
            Error::InvalidSetting(format!(
                "no audio host called `{name}` in this build; available here: {}",
                names()
            ))
        })?;
    cpal::host_from_id(id).map_err(|e| {
        rig_error(format!(
            "the audio host `{name}` is not running ({e}); available here: {}. For JACK, start the server first (jackd or your session manager).",
            names()
        ))
    })
}

fn device_label(d: &cpal::Device) -> String {
    let id = d.id().map(|i| i.to_string()).unwrap_or_default();
    let desc = d.description().map(|x| x.to_string()).unwrap_or_default();
    if desc.is_empty() || desc == id {
        id
    } else {
        format!("{id} ({desc})")
    }
}

/// The device by name (its id, or part of its description, any case) or the default one.
fn pick_device(host: &cpal::Host, name: Option<&str>, output: bool) -> Result<cpal::Device> {
    let dir = if output { "output" } else { "input" };
    let Some(name) = name else {
        let d = if output {
            host.default_output_device()
        } else {
            host.default_input_device()
        };
        return d.ok_or_else(|| {
            rig_error(format!(
                "the {} host has no default {dir} device: is an interface connected? `ampnote devices` lists what there is",
                host.id().name()
            ))
        });
    };
    let devices: Vec<cpal::Device> = host
        .devices()
        .map_err(|e| rig_error(format!("cannot list devices: {e}")))?
        .filter(|d| {
            if output {
                d.supports_output()
            } else {
                d.supports_input()
            }
        })
        .collect();
    let wanted = name.to_lowercase();
    let exact = devices.iter().find(|d| {
        d.id()
            .map(|i| i.to_string().to_lowercase() == wanted)
            .unwrap_or(false)
    });
    let found = exact.or_else(|| {
        devices
            .iter()
            .find(|d| device_label(d).to_lowercase().contains(&wanted))
    });
    found.cloned().ok_or_else(|| {
        let list: Vec<String> = devices.iter().map(device_label).collect();
        rig_error(format!(
            "no {dir} device matches `{name}`; {dir} devices on the {} host: {}",
            host.id().name(),
            if list.is_empty() {
                "none".to_string()
            } else {
                list.join("; ")
            }
        ))
    })
}

/// A stream configuration with at least `channels` channels at `rate`, preferring 32-bit float,
/// then 32- and 16-bit integer.
fn pick_config(
    dev: &cpal::Device,
    output: bool,
    channels: usize,
    rate: u32,
    buffer: Option<u32>,
) -> Result<(StreamConfig, SampleFormat)> {
    let ranges: Vec<cpal::SupportedStreamConfigRange> = if output {
        dev.supported_output_configs().map(|x| x.collect())
    } else {
        dev.supported_input_configs().map(|x| x.collect())
    }
    .map_err(|e| {
        rig_error(format!(
            "{}: cannot read its configurations: {e}",
            device_label(dev)
        ))
    })?;
    let dir = if output { "output" } else { "input" };
    let rank = |f: SampleFormat| match f {
        SampleFormat::F32 => 0,
        SampleFormat::I32 => 1,
        SampleFormat::I16 => 2,
        _ => 9,
    };
    let best = ranges
        .iter()
        .filter(|r| {
            r.channels() as usize >= channels
                && r.contains_rate(rate)
                && rank(r.sample_format()) < 9
        })
        .min_by_key(|r| (rank(r.sample_format()), r.channels()));
    let Some(r) = best else {
        let rates: Vec<String> = ranges
            .iter()
            .map(|r| {
                if r.min_sample_rate() == r.max_sample_rate() {
                    format!(
                        "{} Hz x{} {}",
                        r.min_sample_rate(),
                        r.channels(),
                        r.sample_format()
                    )
                } else {
                    format!(
                        "{}-{} Hz x{} {}",
                        r.min_sample_rate(),
                        r.max_sample_rate(),
                        r.channels(),
                        r.sample_format()
                    )
                }
            })
            .collect();
        return Err(rig_error(format!(
            "the {dir} device {} refuses {rate} Hz with {channels} channel(s) in a format ampnote uses (f32, i32, i16); it offers: {}. Pick one of its rates with --rate, or other channels.",
            device_label(dev),
            if rates.is_empty() { "nothing".into() } else { rates.join(", ") }
        )));
    };
    Ok((
        StreamConfig {
            channels: r.channels(),
            sample_rate: rate,
            buffer_size: buffer.map_or(cpal::BufferSize::Default, cpal::BufferSize::Fixed),
        },
        r.sample_format(),
    ))
}

/// What the callbacks tell the main thread, all in atomics.
#[derive(Default)]
struct Shared {
    /// The input callback pushes into the ring only while armed.
    armed: AtomicBool,
    /// The output callback plays silence and empties the ring while muted (Ctrl-C, errors).
    mute: AtomicBool,
    /// Samples the current run wants played, and how many the output callback took so far.
    out_target: AtomicU64,
    out_taken: AtomicU64,
    /// Output callbacks that found the ring short while the run still had samples to play.
    underruns: AtomicU64,
    /// Input frames the ring had no room for.
    overflow_frames: AtomicU64,
    /// Input frames seen since the streams opened (armed or not).
    in_frames: AtomicU64,
    /// Frames taken by the output callback since the streams opened.
    out_frames: AtomicU64,
    xruns: AtomicU64,
    lost: AtomicBool,
    other_errors: AtomicU64,
}

impl Shared {
    fn gaps(&self) -> u64 {
        self.underruns.load(Relaxed)
            + self.xruns.load(Relaxed)
            + (self.overflow_frames.load(Relaxed) > 0) as u64
    }

    /// End a run: the output falls silent first, then the input stops filling the ring.
    fn stop_run(&self) {
        self.mute.store(true, Relaxed);
        self.armed.store(false, Relaxed);
        self.out_target.store(0, Relaxed);
    }
}

/// Notices a device that went away, or an input that stopped delivering data for 3 s.
struct Watchdog {
    since: Instant,
    frames: u64,
}

impl Watchdog {
    fn new(sh: &Shared) -> Watchdog {
        Watchdog {
            since: Instant::now(),
            frames: sh.in_frames.load(Relaxed),
        }
    }

    /// What is wrong, if anything.
    fn check(&mut self, sh: &Shared) -> Option<&'static str> {
        if sh.lost.load(Relaxed) {
            return Some(
                "the audio device went away mid run (unplugged, or the sound server stopped)",
            );
        }
        let now = sh.in_frames.load(Relaxed);
        if now != self.frames {
            (self.since, self.frames) = (Instant::now(), now);
        } else if self.since.elapsed() > Duration::from_secs(3) {
            return Some("the input stopped delivering data for 3 s (device stalled or gone)");
        }
        None
    }
}

fn on_error(shared: Arc<Shared>) -> impl FnMut(cpal::Error) + Send + 'static {
    move |e: cpal::Error| match e.kind() {
        cpal::ErrorKind::Xrun => {
            shared.xruns.fetch_add(1, Relaxed);
        }
        cpal::ErrorKind::DeviceNotAvailable
        | cpal::ErrorKind::StreamInvalidated
        | cpal::ErrorKind::HostUnavailable => shared.lost.store(true, Relaxed),
        _ => {
            shared.other_errors.fetch_add(1, Relaxed);
        }
    }
}

fn build_output<T>(
    dev: &cpal::Device,
    cfg: StreamConfig,
    mut ring: rtrb::Consumer<f32>,
    shared: Arc<Shared>,
) -> Result<cpal::Stream>
where
    T: SizedSample + FromSample<f32>,
{
    let ch = cfg.channels as usize;
    let s2 = shared.clone();
    dev.build_output_stream::<T, _, _>(
        cfg,
        move |data: &mut [T], _info: &cpal::OutputCallbackInfo| {
            let n = data.len();
            let avail = ring.slots();
            let take = avail.min(n);
            let mute = shared.mute.load(Relaxed);
            if let Ok(chunk) = ring.read_chunk(take) {
                let (a, b) = chunk.as_slices();
                if mute {
                    data[..take].fill(T::EQUILIBRIUM);
                } else {
                    for (d, s) in data[..take].iter_mut().zip(a.iter().chain(b)) {
                        *d = T::from_sample(*s);
                    }
                }
                chunk.commit_all();
            }
            data[take..].fill(T::EQUILIBRIUM);
            let before = shared.out_taken.fetch_add(take as u64, Relaxed);
            let target = shared.out_target.load(Relaxed);
            if take < n && before + (take as u64) < target && !mute {
                shared.underruns.fetch_add(1, Relaxed);
            }
            shared.out_frames.fetch_add((n / ch) as u64, Relaxed);
        },
        on_error(s2),
        None,
    )
    .map_err(|e| open_error(dev, "output", e))
}

fn build_input<T>(
    dev: &cpal::Device,
    cfg: StreamConfig,
    mut ring: rtrb::Producer<f32>,
    shared: Arc<Shared>,
) -> Result<cpal::Stream>
where
    T: SizedSample,
    f32: FromSample<T>,
{
    let ch = cfg.channels as usize;
    let s2 = shared.clone();
    dev.build_input_stream::<T, _, _>(
        cfg,
        move |data: &[T], _info: &cpal::InputCallbackInfo| {
            let n = data.len();
            if shared.armed.load(Relaxed) {
                let room = ring.slots();
                let put = room.min(n) / ch * ch;
                if put < n {
                    shared
                        .overflow_frames
                        .fetch_add(((n - put) / ch) as u64, Relaxed);
                }
                if let Ok(chunk) = ring.write_chunk_uninit(put) {
                    chunk.fill_from_iter(data[..put].iter().map(|v| f32::from_sample(*v)));
                }
            }
            shared.in_frames.fetch_add((n / ch) as u64, Relaxed);
        },
        on_error(s2),
        None,
    )
    .map_err(|e| open_error(dev, "input", e))
}

fn open_error(dev: &cpal::Device, dir: &str, e: cpal::Error) -> Error {
    let hint = match e.kind() {
        cpal::ErrorKind::DeviceBusy => {
            "another program holds it: close it, or pick the sound server's host (--host)"
        }
        cpal::ErrorKind::DeviceNotAvailable => "it is gone: reconnect it, then `ampnote devices`",
        cpal::ErrorKind::UnsupportedConfig => {
            "it refuses this rate or channel count: `ampnote devices` lists what it takes"
        }
        cpal::ErrorKind::PermissionDenied => "no permission: add the user to the `audio` group",
        _ => "`ampnote devices` lists the devices and what they take",
    };
    rig_error(format!(
        "cannot open the {dir} stream of {}: {e}; {hint}",
        device_label(dev)
    ))
}

/// Both streams at one rate, running.
struct Engine {
    rate: u32,
    out_channels: usize,
    in_channels: usize,
    out_ring: rtrb::Producer<f32>,
    in_ring: rtrb::Consumer<f32>,
    shared: Arc<Shared>,
    buffer_frames: Option<u32>,
    // Dropped last: the streams stop before the rings go away.
    _out: cpal::Stream,
    _in: cpal::Stream,
}

impl Engine {
    /// Throw away whatever waits in the input ring.
    fn discard_input(&mut self) {
        while let Ok(c) = self.in_ring.read_chunk(self.in_ring.slots()) {
            if c.is_empty() {
                break;
            }
            c.commit_all();
        }
    }

    /// Hand every whole input frame waiting in the ring to `take`.
    fn drain_input(&mut self, mut take: impl FnMut(&[f32])) {
        let ich = self.in_channels;
        if let Ok(chunk) = self.in_ring.read_chunk(self.in_ring.slots() / ich * ich) {
            let (a, b) = chunk.as_slices();
            a.chunks_exact(ich)
                .chain(b.chunks_exact(ich))
                .for_each(&mut take);
            chunk.commit_all();
        }
    }

    /// Queue up to `frames` output frames, sample `i` being `sample(i)` on output `out` and
    /// silence on the others, as far as the ring has room; the number queued.
    fn queue_output(&mut self, out: usize, frames: usize, sample: impl Fn(usize) -> f64) -> usize {
        let och = self.out_channels;
        let n = (self.out_ring.slots() / och).min(frames);
        if n == 0 {
            return 0;
        }
        match self.out_ring.write_chunk_uninit(n * och) {
            Ok(chunk) => {
                let it = (0..n).flat_map(|i| {
                    let v = sample(i) as f32;
                    (0..och).map(move |c| if c == out { v } else { 0.0 })
                });
                chunk.fill_from_iter(it);
                n
            }
            Err(_) => 0,
        }
    }

    /// Output frames queued and not yet played.
    fn output_queued(&self) -> usize {
        (self.out_ring.buffer().capacity() - self.out_ring.slots()) / self.out_channels
    }
}

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
            return Err(Error::InvalidSetting(format!(
                "the stimulus would reach {:+.1} dBFS at the interface input (its peak {:+.1} dBFS times a gain of {:+.1} dB): lower the level, or add attenuation",
                20.0 * (peak * gain).log10(),
                20.0 * peak.log10(),
                20.0 * gain.log10()
            )));
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
        catch_interrupt();
        let (out, inp) = self.mapping(channel)?;
        let k = channel - 1;
        let peak = self.ready(channel, sample_rate_hz, stimulus)?;
        let framed = framing::frame(stimulus, sample_rate_hz);
        for attempt in 0..2 {
            let raw = self.run_signal(out, &[inp], &framed.signal, sample_rate_hz)?;
            match framing::assess(&raw.channels[0], &framed, sample_rate_hz, raw.reported_gaps) {
                Verdict::Whole { aligned, located } => {
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
                    return Ok(aligned);
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

/// A device's configurations in a few lines: per rate range, the channel counts and formats.
fn summarise(ranges: &[cpal::SupportedStreamConfigRange]) -> Vec<String> {
    // (rate range, fewest channels, most channels, formats)
    type Group = ((u32, u32), u16, u16, Vec<String>);
    let mut groups: Vec<Group> = Vec::new();
    for r in ranges {
        let key = (r.min_sample_rate(), r.max_sample_rate());
        let fmt = r.sample_format().to_string();
        match groups.iter_mut().find(|g| g.0 == key) {
            Some(g) => {
                g.1 = g.1.min(r.channels());
                g.2 = g.2.max(r.channels());
                if !g.3.contains(&fmt) {
                    g.3.push(fmt);
                }
            }
            None => groups.push((key, r.channels(), r.channels(), vec![fmt])),
        }
    }
    groups
        .into_iter()
        .map(|((lo, hi), cmin, cmax, fmts)| {
            let rate = if lo == hi {
                format!("{lo} Hz")
            } else if hi >= 1_000_000 {
                "any rate".to_string()
            } else {
                format!("{lo}-{hi} Hz")
            };
            let ch = if cmin == cmax {
                format!("{cmin} ch")
            } else {
                format!("{cmin}-{cmax} ch")
            };
            format!("{ch}, {rate}, {}", fmts.join("/"))
        })
        .collect()
}

/// The audio hosts this build knows, and what each offers (`ampnote devices`).
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DeviceList {
    pub hosts: Vec<HostInfo>,
}

/// One audio host (ALSA, JACK, PulseAudio, ...).
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct HostInfo {
    pub name: String,
    /// Whether its server or library is running here.
    pub running: bool,
    /// Why it could not be opened or listed, if so.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
    pub devices: Vec<DeviceInfo>,
}

/// One device of a host, with its channel, rate and format ranges summarised.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DeviceInfo {
    pub name: String,
    pub default_output: bool,
    pub default_input: bool,
    /// Output configurations, each "channels, rates, format".
    pub outputs: Vec<String>,
    pub inputs: Vec<String>,
}

/// What `ampnote devices` lists.
pub fn list_devices() -> DeviceList {
    let available = cpal::available_hosts();
    let mut hosts = Vec::new();
    for id in cpal::ALL_HOSTS {
        let mut info = HostInfo {
            name: id.name().to_string(),
            running: available.contains(id),
            error: None,
            devices: Vec::new(),
        };
        if !info.running {
            hosts.push(info);
            continue;
        }
        let host = match cpal::host_from_id(*id) {
            Ok(h) => h,
            Err(e) => {
                info.error = Some(format!("cannot open: {e}"));
                hosts.push(info);
                continue;
            }
        };
        let def_out = host.default_output_device().map(|d| device_label(&d));
        let def_in = host.default_input_device().map(|d| device_label(&d));
        match host.devices() {
            Ok(devices) => {
                for d in devices {
                    let name = device_label(&d);
                    let summary =
                        |r: std::result::Result<
                            Vec<cpal::SupportedStreamConfigRange>,
                            cpal::Error,
                        >| { r.map(|r| summarise(&r)).unwrap_or_default() };
                    info.devices.push(DeviceInfo {
                        default_output: def_out.as_deref() == Some(name.as_str()),
                        default_input: def_in.as_deref() == Some(name.as_str()),
                        outputs: summary(
                            d.supported_output_configs().map(|x| x.collect::<Vec<_>>()),
                        ),
                        inputs: summary(d.supported_input_configs().map(|x| x.collect::<Vec<_>>())),
                        name,
                    });
                }
            }
            Err(e) => info.error = Some(format!("cannot list devices: {e}")),
        }
        hosts.push(info);
    }
    DeviceList { hosts }
}

impl DeviceList {
    /// The list as text: hosts, their devices (defaults marked), and each device's ranges.
    pub fn to_table(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        for h in &self.hosts {
            if !h.running {
                let _ = writeln!(s, "host {}: not running here", h.name);
                continue;
            }
            match &h.error {
                Some(e) if h.devices.is_empty() => {
                    let _ = writeln!(s, "host {}: {e}", h.name);
                    continue;
                }
                _ => {
                    let _ = writeln!(s, "host {}", h.name);
                }
            }
            if h.devices.is_empty() {
                let _ = writeln!(s, "  no devices (is its server running?)");
            }
            for d in &h.devices {
                let mut marks = Vec::new();
                if d.default_output {
                    marks.push("default output");
                }
                if d.default_input {
                    marks.push("default input");
                }
                let _ = writeln!(
                    s,
                    "  {}{}",
                    d.name,
                    if marks.is_empty() {
                        String::new()
                    } else {
                        format!("  [{}]", marks.join(", "))
                    }
                );
                for l in &d.outputs {
                    let _ = writeln!(s, "    out {l}");
                }
                for l in &d.inputs {
                    let _ = writeln!(s, "    in  {l}");
                }
            }
        }
        if s.is_empty() {
            s.push_str("no audio hosts in this build\n");
        }
        s
    }
}
