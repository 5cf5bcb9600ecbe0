//! FLAC and AIFF, decoded by symphonia (pure Rust, well kept, and the decoder most Rust audio
//! software shares; its FLAC decoder checks every frame's CRC). Its conversions to `f64` follow
//! the same scaling as ampnote's WAV reader (`s / 2^(B-1)`), so a capture gives the same samples
//! whichever of the formats it was saved in (the reference tests hold it to that).
//!
//! symphonia 0.5's facade crate has no AIFF feature; its RIFF crate has, so the AIFF reader is
//! taken from there and both readers are built directly (no probe: the first bytes already said
//! which format it is).

use super::{Encoding, SourceInfo, Store, MAX_RATE_HZ, MIN_RATE_HZ};
use crate::error::{Error, Result};
use std::path::Path;
use symphonia::core::audio::{AudioBuffer, Signal};
use symphonia::core::codecs::{self, DecoderOptions};
use symphonia::core::errors::Error as SymError;
use symphonia::core::formats::{FormatOptions, FormatReader};
use symphonia::core::io::MediaSourceStream;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Kind {
    Flac,
    Aiff,
}

impl Kind {
    fn name(self) -> &'static str {
        match self {
            Kind::Flac => "FLAC",
            Kind::Aiff => "AIFF",
        }
    }
}

fn damaged(path: &Path, kind: Kind, detail: impl std::fmt::Display) -> Error {
    Error::Undecodable {
        path: path.to_path_buf(),
        format: kind.name(),
        detail: detail.to_string(),
    }
}

fn open_reader(path: &Path, kind: Kind) -> Result<Box<dyn FormatReader>> {
    let file = super::open(path)?;
    let mss = MediaSourceStream::new(Box::new(file), Default::default());
    let opts = FormatOptions::default();
    let reader: std::result::Result<Box<dyn FormatReader>, SymError> = match kind {
        Kind::Flac => symphonia::default::formats::FlacReader::try_new(mss, &opts)
            .map(|r| Box::new(r) as Box<dyn FormatReader>),
        Kind::Aiff => symphonia_format_riff::AiffReader::try_new(mss, &opts)
            .map(|r| Box::new(r) as Box<dyn FormatReader>),
    };
    reader.map_err(|e| damaged(path, kind, format!("its header cannot be read: {e}")))
}

/// The header's facts, as for a WAV.
pub(super) fn probe(path: &Path, kind: Kind) -> Result<SourceInfo> {
    let reader = open_reader(path, kind)?;
    info_of(reader.as_ref(), path, kind)
}

fn info_of(reader: &dyn FormatReader, path: &Path, kind: Kind) -> Result<SourceInfo> {
    let unsupported = |detail: String| Error::UnsupportedFormat {
        path: path.to_path_buf(),
        detail,
    };
    let track = reader
        .default_track()
        .ok_or_else(|| damaged(path, kind, "it holds no audio track"))?;
    let p = &track.codec_params;
    let channel_count = p.channels.map_or(0, |c| c.count());
    if channel_count == 0 {
        return Err(unsupported("the header declares zero channels".into()));
    }
    let rate = p.sample_rate.unwrap_or(0);
    if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&rate) {
        return Err(Error::UnsupportedRate {
            path: path.to_path_buf(),
            rate_hz: rate,
        });
    }
    let encoding = match p.codec {
        codecs::CODEC_TYPE_FLAC => match p.bits_per_sample {
            Some(b @ 4..=32) => Encoding::Int { bits: b as u16 },
            b => return Err(unsupported(format!("FLAC with {b:?} bits per sample"))),
        },
        codecs::CODEC_TYPE_PCM_F32BE | codecs::CODEC_TYPE_PCM_F32LE => Encoding::Float32,
        codecs::CODEC_TYPE_PCM_F64BE | codecs::CODEC_TYPE_PCM_F64LE => Encoding::Float64,
        codecs::CODEC_TYPE_PCM_S8
        | codecs::CODEC_TYPE_PCM_S16BE
        | codecs::CODEC_TYPE_PCM_S16LE
        | codecs::CODEC_TYPE_PCM_S24BE
        | codecs::CODEC_TYPE_PCM_S24LE
        | codecs::CODEC_TYPE_PCM_S32BE
        | codecs::CODEC_TYPE_PCM_S32LE => match p.bits_per_sample {
            Some(b @ 1..=32) => Encoding::Int { bits: b as u16 },
            b => return Err(unsupported(format!("PCM with {b:?} bits per sample"))),
        },
        other => {
            return Err(unsupported(format!(
                "a compressed encoding ({}), not PCM or FLAC",
                other
            )))
        }
    };
    // AIFF states its frame count in the COMM chunk; symphonia 0.5's AIFF reader reports one
    // frame more than that (found by the format tests), so the chunk's own count is used.
    let frames = match kind {
        Kind::Aiff => aiff_frames(path).or(p.n_frames),
        Kind::Flac => p.n_frames,
    };
    if frames == Some(0) {
        return Err(Error::Empty {
            path: path.to_path_buf(),
        });
    }
    Ok(SourceInfo {
        container: match kind {
            Kind::Flac => super::Container::Flac,
            Kind::Aiff => super::Container::Aiff,
        },
        sample_rate_hz: rate,
        encoding,
        channel_count,
        frames_declared: frames.unwrap_or(u64::MAX),
        length_unknown: frames.is_none(),
        description_json: None,
        bytes_per_sample: 0,
    })
}

/// Decode the channels `numbers` (1-based) packet by packet, keeping only those.
/// One reader opened once: the header's facts (checked against `numbers`, 1-based, `None` for
/// every channel), then the chosen channels' samples.
pub(super) fn read<T: Store>(
    path: &Path,
    kind: Kind,
    numbers: Option<&[usize]>,
    accept_truncated: bool,
) -> Result<super::Selected<T>> {
    let mut reader = open_reader(path, kind)?;
    let info = info_of(reader.as_ref(), path, kind)?;
    let numbers = super::chosen(&info, numbers)?;
    let (channels, truncated) = decode(
        reader.as_mut(),
        path,
        kind,
        &info,
        &numbers,
        accept_truncated,
    )?;
    Ok(super::Selected {
        info,
        numbers,
        channels,
        truncated,
    })
}

fn decode<T: Store>(
    reader: &mut dyn FormatReader,
    path: &Path,
    kind: Kind,
    info: &SourceInfo,
    numbers: &[usize],
    accept_truncated: bool,
) -> Result<(Vec<Vec<T>>, bool)> {
    let track = reader
        .default_track()
        .ok_or_else(|| damaged(path, kind, "it holds no audio track"))?;
    let track_id = track.id;
    let mut decoder = symphonia::default::get_codecs()
        .make(&track.codec_params, &DecoderOptions { verify: true })
        .map_err(|e| damaged(path, kind, format!("no decoder for it: {e}")))?;
    // Reserve what the header promises, but never more frames than the file has bytes per
    // channel: a hostile header must not allocate gigabytes before the first frame.
    let file_bytes = std::fs::metadata(path).map_or(1 << 20, |m| m.len());
    let reserve = info
        .frames_declared
        .min(file_bytes / info.channel_count as u64)
        .min(1 << 26) as usize;
    let mut out: Vec<Vec<T>> = numbers
        .iter()
        .map(|_| Vec::with_capacity(reserve))
        .collect();
    let mut buf: Option<AudioBuffer<f64>> = None;
    let mut cut_short = false;
    loop {
        let packet = match reader.next_packet() {
            Ok(p) => p,
            Err(SymError::IoError(e)) if e.kind() == std::io::ErrorKind::UnexpectedEof => break,
            Err(SymError::ResetRequired) => break,
            Err(e) => return Err(damaged(path, kind, e)),
        };
        if packet.track_id() != track_id {
            continue;
        }
        let decoded = match decoder.decode(&packet) {
            Ok(d) => d,
            // A frame cut by the end of the file: the frames before it stand.
            Err(SymError::IoError(_)) => {
                cut_short = true;
                break;
            }
            Err(e) => return Err(damaged(path, kind, e)),
        };
        let spec = *decoded.spec();
        if spec.channels.count() != info.channel_count {
            return Err(damaged(
                path,
                kind,
                format!(
                    "a frame holds {} channel(s) where the header says {}",
                    spec.channels.count(),
                    info.channel_count
                ),
            ));
        }
        let b = match &mut buf {
            Some(b) if b.capacity() == decoded.capacity() && *b.spec() == spec => b,
            _ => buf.insert(AudioBuffer::new(decoded.capacity() as u64, spec)),
        };
        decoded.convert(b);
        for (o, &n) in out.iter_mut().zip(numbers) {
            o.extend(b.chan(n - 1).iter().map(|&v| T::from_f64(v)));
        }
    }
    let read = out.first().map_or(0, Vec::len) as u64;
    let truncated = cut_short || (!info.length_unknown && read < info.frames_declared);
    if read > info.frames_declared && !info.length_unknown {
        for o in &mut out {
            o.truncate(info.frames_declared as usize);
        }
    }
    super::check_length(
        path,
        info.frames_declared,
        read.min(info.frames_declared),
        truncated,
        accept_truncated,
    )?;
    Ok((out, truncated))
}

/// numSampleFrames of an AIFF's COMM chunk (big-endian; chunks padded to even lengths).
fn aiff_frames(path: &Path) -> Option<u64> {
    use std::io::Read;
    let mut r = std::io::BufReader::new(std::fs::File::open(path).ok()?);
    let mut head = [0u8; 12];
    r.read_exact(&mut head).ok()?;
    loop {
        let mut ch = [0u8; 8];
        r.read_exact(&mut ch).ok()?;
        let len = u32::from_be_bytes([ch[4], ch[5], ch[6], ch[7]]) as u64;
        if &ch[0..4] == b"COMM" {
            let mut c = [0u8; 6];
            r.read_exact(&mut c).ok()?;
            return Some(u32::from_be_bytes([c[2], c[3], c[4], c[5]]) as u64);
        }
        let n = len + (len & 1);
        if std::io::copy(&mut (&mut r).take(n), &mut std::io::sink()).ok()? < n {
            return None;
        }
    }
}
