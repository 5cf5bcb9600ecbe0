//! Reading captures from any recorder's file: WAV (with BWF chunks), RF64/BW64 of any size, FLAC
//! and AIFF, in integer PCM or 32/64-bit float; decoded one channel at a time, in blocks, to
//! `f64` ([`Capture`]) or, for long captures, to the narrowest storage that keeps every bit of the
//! source ([`StoredChannel`]: 32-bit float holds any 24-bit or 32-bit float source exactly).
//!
//! Scaling convention: an integer sample `s` of `B` bits becomes `s / 2^(B-1)`, so the most
//! negative code is exactly -1.0 and a float sample is taken as it is. 0 dBFS is the RMS of a sine
//! whose peak is 1.0 (AES17), so a full-scale sine reads 0 dBFS.

mod coded;
mod riff;

use crate::error::{Error, Result};
use std::io::Read;
use std::path::Path;

/// How samples were stored in the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Encoding {
    /// Two's complement integer PCM of `bits` bits.
    Int { bits: u16 },
    /// IEEE 754 single precision, full scale = 1.0.
    Float32,
    /// IEEE 754 double precision, full scale = 1.0.
    Float64,
}

impl Encoding {
    /// The smallest magnitude that counts as "at or beyond full scale" for this encoding: the
    /// largest positive code for integers (the most negative code is -1.0 exactly), 1.0 for float.
    pub fn overload_threshold(self) -> f64 {
        match self {
            Encoding::Int { bits } => {
                let half = (1u64 << (bits - 1)) as f64;
                (half - 1.0) / half
            }
            Encoding::Float32 | Encoding::Float64 => 1.0,
        }
    }

    /// The mantissa or word length in bits, for resolution-floor warnings.
    pub fn resolution_bits(self) -> u32 {
        match self {
            Encoding::Int { bits } => bits as u32,
            Encoding::Float32 => 24,
            Encoding::Float64 => 53,
        }
    }

    /// Human-readable name ("24-bit integer", "32-bit float").
    pub fn describe(self) -> String {
        match self {
            Encoding::Int { bits } => format!("{bits}-bit integer"),
            Encoding::Float32 => "32-bit float".to_string(),
            Encoding::Float64 => "64-bit float".to_string(),
        }
    }

    /// 32-bit float storage holds every sample of this encoding exactly (integers of up to 24
    /// bits, 32-bit float); 32-bit integers and 64-bit float need 64-bit storage.
    pub fn fits_f32(self) -> bool {
        match self {
            Encoding::Int { bits } => bits <= 24,
            Encoding::Float32 => true,
            Encoding::Float64 => false,
        }
    }
}

/// Lowest and highest sample rates ampnote accepts (Hz).
pub const MIN_RATE_HZ: u32 = 8_000;
pub const MAX_RATE_HZ: u32 = 384_000;

/// A rate a rig run or a stimulus may use: the range ampnote reads.
pub fn check_rate(rate_hz: u32) -> crate::error::Result<()> {
    if (MIN_RATE_HZ..=MAX_RATE_HZ).contains(&rate_hz) {
        Ok(())
    } else {
        Err(crate::error::Error::InvalidSetting(format!(
            "--rate must lie between {MIN_RATE_HZ} and {MAX_RATE_HZ} Hz, got {rate_hz}"
        )))
    }
}

/// RIFF chunk id under which ampnote stores a stimulus description (JSON) in the WAVs it makes.
/// Players and recorders skip chunks they do not know.
pub const DESCRIPTION_CHUNK: &[u8; 4] = b"ampn";

/// The kind of file a capture came in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Container {
    /// RIFF/WAVE (also Broadcast WAVE).
    Wav,
    /// RF64 or BW64: WAVE with 64-bit sizes, for files over 4 GiB.
    Rf64,
    Flac,
    Aiff,
}

impl Container {
    pub fn name(self) -> &'static str {
        match self {
            Container::Wav => "WAV",
            Container::Rf64 => "RF64",
            Container::Flac => "FLAC",
            Container::Aiff => "AIFF",
        }
    }
}

/// What a file's header says, before any sample is decoded.
#[derive(Debug, Clone)]
pub struct SourceInfo {
    pub container: Container,
    pub sample_rate_hz: u32,
    pub encoding: Encoding,
    /// Channels in the file.
    pub channel_count: usize,
    /// Frames the header promises (a truncated file holds fewer); `u64::MAX` when the header
    /// leaves the length open (see `length_unknown`).
    pub frames_declared: u64,
    /// The data chunk's length was 0 or 0xFFFFFFFF, as recorders that stream or crash leave it:
    /// the samples run to the end of the file.
    pub length_unknown: bool,
    /// The stimulus description ampnote embedded, if the file is one of its stimuli.
    pub description_json: Option<String>,
    /// Bytes per sample in a WAV's data chunk (0 for the coded formats).
    bytes_per_sample: usize,
}

impl SourceInfo {
    /// A warning when the header left the length open, else `None`.
    pub fn length_warning(&self) -> Option<String> {
        self.length_unknown.then(|| "the WAV header left the data length open (a recorder that stopped abruptly?): the samples were read to the end of the file".to_string())
    }
}

/// How a sample is kept in memory: `f64` for the analysis, `f32` for long captures of sources
/// that fit it (half the memory, no bit lost; see [`Encoding::fits_f32`]).
pub trait Store: Copy + Send + Sync + 'static {
    fn from_f64(v: f64) -> Self;
    fn to_f64(self) -> f64;
}

impl Store for f64 {
    #[inline]
    fn from_f64(v: f64) -> Self {
        v
    }
    #[inline]
    fn to_f64(self) -> f64 {
        self
    }
}

impl Store for f32 {
    #[inline]
    fn from_f64(v: f64) -> Self {
        v as f32
    }
    #[inline]
    fn to_f64(self) -> f64 {
        self as f64
    }
}

/// One channel of a long capture, in the storage its encoding needs.
#[derive(Debug, Clone)]
pub enum StoredSamples {
    F32(Vec<f32>),
    F64(Vec<f64>),
}

impl StoredSamples {
    pub fn len(&self) -> usize {
        match self {
            StoredSamples::F32(v) => v.len(),
            StoredSamples::F64(v) => v.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Samples `range` as `f64`, for one block of analysis.
    pub fn block(&self, range: std::ops::Range<usize>) -> Vec<f64> {
        match self {
            StoredSamples::F32(v) => v[range].iter().map(|&s| s as f64).collect(),
            StoredSamples::F64(v) => v[range].to_vec(),
        }
    }
}

/// One decoded channel of a capture, kept compactly (see [`StoredSamples`]).
#[derive(Debug, Clone)]
pub struct StoredChannel {
    pub info: SourceInfo,
    pub channel: usize,
    pub samples: StoredSamples,
    pub truncated: bool,
}

impl StoredChannel {
    /// Decode channel `number` (1-based) of the file at `path`.
    pub fn read(path: &Path, accept_truncated: bool, number: usize) -> Result<StoredChannel> {
        // The header first, for the storage the encoding needs.
        let f32_fits = Capture::probe(path)?.encoding.fits_f32();
        let one = Some(&[number][..]);
        let (info, samples, truncated) = if f32_fits {
            let mut s = read_selected::<f32>(path, accept_truncated, one)?;
            (
                s.info,
                StoredSamples::F32(s.channels.remove(0)),
                s.truncated,
            )
        } else {
            let mut s = read_selected::<f64>(path, accept_truncated, one)?;
            (
                s.info,
                StoredSamples::F64(s.channels.remove(0)),
                s.truncated,
            )
        };
        Ok(StoredChannel {
            info,
            channel: number,
            samples,
            truncated,
        })
    }
}

/// A decoded capture: one `Vec<f64>` per selected channel, all the same length.
#[derive(Debug, Clone)]
pub struct Capture {
    pub sample_rate_hz: u32,
    pub encoding: Encoding,
    /// Channels in the file (all of them, selected or not).
    pub channel_count: usize,
    /// 1-based numbers of the channels in [`Capture::channels`].
    pub channel_numbers: Vec<usize>,
    pub channels: Vec<Vec<f64>>,
    /// The file ended before its header said it would and `accept_truncated` was set.
    pub truncated: bool,
    /// The stimulus description ampnote embedded, if the file is one of its stimuli.
    pub description_json: Option<String>,
}

impl Capture {
    /// Frames (samples per channel).
    pub fn frames(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }

    /// Samples of channel `number` (1-based), if it was decoded.
    pub fn channel(&self, number: usize) -> Option<&[f64]> {
        self.channel_numbers
            .iter()
            .position(|&c| c == number)
            .map(|i| self.channels[i].as_slice())
    }

    /// Open and decode every channel of a capture file (any format [`Capture::probe`] reads).
    /// With `accept_truncated`, a file cut short keeps the complete frames it holds and sets
    /// [`Capture::truncated`]; otherwise it is an error.
    pub fn read(path: &Path, accept_truncated: bool) -> Result<Capture> {
        Self::read_channels(path, accept_truncated, None)
    }

    /// Decode only the channels numbered in `channels` (1-based; `None` for all). Reading one
    /// channel at a time keeps memory at one channel's samples for long multichannel files.
    pub fn read_channels(
        path: &Path,
        accept_truncated: bool,
        channels: Option<&[usize]>,
    ) -> Result<Capture> {
        let s = read_selected::<f64>(path, accept_truncated, channels)?;
        Ok(Capture {
            sample_rate_hz: s.info.sample_rate_hz,
            encoding: s.info.encoding,
            channel_count: s.info.channel_count,
            channel_numbers: s.numbers,
            channels: s.channels,
            truncated: s.truncated,
            description_json: s.info.description_json,
        })
    }

    /// Read only the header: WAV, RF64/BW64, FLAC or AIFF, told apart by their first bytes.
    pub fn probe(path: &Path) -> Result<SourceInfo> {
        let mut r = std::io::BufReader::new(open(path)?);
        match sniff(&mut r, path)? {
            Sniffed::Riff => riff::read_header(&mut r, path),
            Sniffed::Coded(kind) => coded::probe(path, kind),
        }
    }

    /// Decode WAV bytes from any reader; `path` only names the source in errors. (WAV and RF64
    /// only: the coded formats are read from files.)
    pub fn from_reader<R: Read>(
        mut reader: R,
        path: &Path,
        accept_truncated: bool,
    ) -> Result<Capture> {
        let info = riff::read_header(&mut reader, path)?;
        let numbers: Vec<usize> = (1..=info.channel_count).collect();
        let (channels, truncated) =
            riff_samples::<_, f64>(&mut reader, &info, path, accept_truncated, &numbers, None)?;
        Ok(Capture {
            sample_rate_hz: info.sample_rate_hz,
            encoding: info.encoding,
            channel_count: info.channel_count,
            channel_numbers: numbers,
            channels,
            truncated,
            description_json: info.description_json,
        })
    }
}

fn open(path: &Path) -> Result<std::fs::File> {
    std::fs::File::open(path).map_err(|source| Error::Open {
        path: path.to_path_buf(),
        source,
    })
}

enum Sniffed {
    Riff,
    Coded(coded::Kind),
}

/// Tell the format from the first four bytes (the reader is left at the start).
fn sniff<R: std::io::BufRead>(r: &mut R, path: &Path) -> Result<Sniffed> {
    let head = r.fill_buf().map_err(|source| Error::Open {
        path: path.to_path_buf(),
        source,
    })?;
    let not_audio = |detail: &str| Error::NotAudio {
        path: path.to_path_buf(),
        detail: detail.to_string(),
    };
    if head.len() < 4 {
        return Err(not_audio("the file is shorter than any audio header"));
    }
    match &head[..4] {
        b"RIFF" | b"RF64" | b"BW64" => Ok(Sniffed::Riff),
        b"fLaC" => Ok(Sniffed::Coded(coded::Kind::Flac)),
        b"FORM" => Ok(Sniffed::Coded(coded::Kind::Aiff)),
        _ => Err(not_audio(
            "no WAV, RF64, FLAC or AIFF signature at the start",
        )),
    }
}

/// What [`read_selected`] decoded: the header's facts, the channels' numbers and samples, and
/// whether the file was cut short (accepted only with `accept_truncated`).
struct Selected<T> {
    info: SourceInfo,
    numbers: Vec<usize>,
    channels: Vec<Vec<T>>,
    truncated: bool,
}

/// The channels `numbers` asks for (1-based; `None` for all), each checked against the file.
fn chosen(info: &SourceInfo, numbers: Option<&[usize]>) -> Result<Vec<usize>> {
    match numbers {
        None => Ok((1..=info.channel_count).collect()),
        Some(list) => {
            for &c in list {
                select_channels(info.channel_count, Some(c))?;
            }
            Ok(list.to_vec())
        }
    }
}

/// Decode the channels `numbers` (1-based; `None` for all) of the file at `path` into storage
/// `T`, opening it and reading its header once.
fn read_selected<T: Store>(
    path: &Path,
    accept_truncated: bool,
    numbers: Option<&[usize]>,
) -> Result<Selected<T>> {
    let file = open(path)?;
    let file_bytes = file.metadata().map(|m| m.len()).ok();
    let mut r = std::io::BufReader::with_capacity(1 << 16, file);
    match sniff(&mut r, path)? {
        Sniffed::Riff => {
            let info = riff::read_header(&mut r, path)?;
            let numbers = chosen(&info, numbers)?;
            let (channels, truncated) =
                riff_samples(&mut r, &info, path, accept_truncated, &numbers, file_bytes)?;
            Ok(Selected {
                info,
                numbers,
                channels,
                truncated,
            })
        }
        Sniffed::Coded(kind) => {
            drop(r);
            coded::read(path, kind, numbers, accept_truncated)
        }
    }
}

/// The samples of a WAV/RF64 after its header.
fn riff_samples<R: Read, T: Store>(
    reader: &mut R,
    info: &SourceInfo,
    path: &Path,
    accept_truncated: bool,
    numbers: &[usize],
    file_bytes: Option<u64>,
) -> Result<(Vec<Vec<T>>, bool)> {
    let p = || path.to_path_buf();
    // Reserve what the header promises, but never more than the file can hold: a corrupt
    // header must not make us allocate gigabytes before the first sample.
    let frame_bytes = (info.bytes_per_sample * info.channel_count) as u64;
    let reserve = info
        .frames_declared
        .min(file_bytes.map_or(1 << 20, |b| b / frame_bytes)) as usize;
    let mut out: Vec<Vec<T>> = numbers
        .iter()
        .map(|_| Vec::with_capacity(reserve))
        .collect();
    let read_frames =
        riff::decode_pcm(reader, info, numbers, &mut out).map_err(|e| Error::NotWav {
            path: p(),
            detail: format!("reading samples failed: {e}"),
        })?;
    let truncated = !info.length_unknown && read_frames < info.frames_declared;
    check_length(
        path,
        info.frames_declared,
        read_frames,
        truncated,
        accept_truncated,
    )?;
    Ok((out, truncated))
}

/// A file cut short is refused unless accepted; one with no frame is always refused.
fn check_length(
    path: &Path,
    expected_frames: u64,
    read_frames: u64,
    truncated: bool,
    accept_truncated: bool,
) -> Result<()> {
    if truncated && !accept_truncated {
        return Err(Error::Truncated {
            path: path.to_path_buf(),
            expected_frames,
            read_frames,
        });
    }
    if read_frames == 0 {
        return Err(Error::Empty {
            path: path.to_path_buf(),
        });
    }
    Ok(())
}

/// Pick channels by 1-based number; `None` means all of them.
pub fn select_channels(available: usize, requested: Option<usize>) -> Result<Vec<usize>> {
    match requested {
        None => Ok((1..=available).collect()),
        Some(ch) if ch >= 1 && ch <= available => Ok(vec![ch]),
        Some(ch) => Err(Error::NoSuchChannel {
            requested: ch,
            available,
        }),
    }
}
