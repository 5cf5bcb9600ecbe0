//! The running streams: the audio callbacks (copy between the device and the rings, count
//! faults in atomics, nothing else), the watchdog, and the engine that owns both streams.

use super::*;

/// What the callbacks tell the main thread, all in atomics.
#[derive(Default)]
pub(super) struct Shared {
    /// The input callback pushes into the ring only while armed.
    pub(super) armed: AtomicBool,
    /// The output callback plays silence and empties the ring while muted (Ctrl-C, errors).
    pub(super) mute: AtomicBool,
    /// Samples the current run wants played, and how many the output callback took so far.
    pub(super) out_target: AtomicU64,
    pub(super) out_taken: AtomicU64,
    /// Output callbacks that found the ring short while the run still had samples to play.
    pub(super) underruns: AtomicU64,
    /// Input frames the ring had no room for.
    pub(super) overflow_frames: AtomicU64,
    /// Input frames seen since the streams opened (armed or not).
    pub(super) in_frames: AtomicU64,
    /// Frames taken by the output callback since the streams opened.
    pub(super) out_frames: AtomicU64,
    pub(super) xruns: AtomicU64,
    pub(super) lost: AtomicBool,
    pub(super) other_errors: AtomicU64,
}

impl Shared {
    pub(super) fn gaps(&self) -> u64 {
        self.underruns.load(Relaxed)
            + self.xruns.load(Relaxed)
            + (self.overflow_frames.load(Relaxed) > 0) as u64
    }

    /// End a run: the output falls silent first, then the input stops filling the ring.
    pub(super) fn stop_run(&self) {
        self.mute.store(true, Relaxed);
        self.armed.store(false, Relaxed);
        self.out_target.store(0, Relaxed);
    }
}

/// Notices a device that went away, or an input that stopped delivering data for 3 s.
pub(super) struct Watchdog {
    pub(super) since: Instant,
    pub(super) frames: u64,
}

impl Watchdog {
    pub(super) fn new(sh: &Shared) -> Watchdog {
        Watchdog {
            since: Instant::now(),
            frames: sh.in_frames.load(Relaxed),
        }
    }

    /// What is wrong, if anything.
    pub(super) fn check(&mut self, sh: &Shared) -> Option<&'static str> {
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

pub(super) fn on_error(shared: Arc<Shared>) -> impl FnMut(cpal::Error) + Send + 'static {
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

pub(super) fn build_output<T>(
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

pub(super) fn build_input<T>(
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

/// Both streams at one rate, running.
pub(super) struct Engine {
    pub(super) rate: u32,
    pub(super) out_channels: usize,
    pub(super) in_channels: usize,
    pub(super) out_ring: rtrb::Producer<f32>,
    pub(super) in_ring: rtrb::Consumer<f32>,
    pub(super) shared: Arc<Shared>,
    pub(super) buffer_frames: Option<u32>,
    // Dropped last: the streams stop before the rings go away.
    pub(super) _out: cpal::Stream,
    pub(super) _in: cpal::Stream,
}

impl Engine {
    /// Throw away whatever waits in the input ring.
    pub(super) fn discard_input(&mut self) {
        while let Ok(c) = self.in_ring.read_chunk(self.in_ring.slots()) {
            if c.is_empty() {
                break;
            }
            c.commit_all();
        }
    }

    /// Hand every whole input frame waiting in the ring to `take`.
    pub(super) fn drain_input(&mut self, mut take: impl FnMut(&[f32])) {
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
    pub(super) fn queue_output(
        &mut self,
        out: usize,
        frames: usize,
        sample: impl Fn(usize) -> f64,
    ) -> usize {
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
    pub(super) fn output_queued(&self) -> usize {
        (self.out_ring.buffer().capacity() - self.out_ring.slots()) / self.out_channels
    }
}
