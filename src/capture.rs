//! Reading captures: WAV files from any recorder, decoded to `f64` per channel.
//!
//! Scaling convention: an integer sample `s` of `B` bits becomes `s / 2^(B-1)`, so the most
//! negative code is exactly -1.0 and a float sample is taken as it is. 0 dBFS is the RMS of a sine
//! whose peak is 1.0 (AES17), so a full-scale sine reads 0 dBFS.

use crate::error::{Error, Result};
use std::io::Read;
use std::path::Path;

/// How samples were stored in the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Encoding {
    /// Two's complement integer PCM of `bits` bits.
    Int { bits: u16 },
    /// IEEE 754 single precision, full scale = 1.0.
    Float32,
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
            Encoding::Float32 => 1.0,
        }
    }

    /// The mantissa or word length in bits, for resolution-floor warnings.
    pub fn resolution_bits(self) -> u32 {
        match self {
            Encoding::Int { bits } => bits as u32,
            Encoding::Float32 => 24,
        }
    }

    /// Human-readable name ("24-bit integer", "32-bit float").
    pub fn describe(self) -> String {
        match self {
            Encoding::Int { bits } => format!("{bits}-bit integer"),
            Encoding::Float32 => "32-bit float".to_string(),
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

/// What a WAV header says, before any sample is decoded.
#[derive(Debug, Clone)]
pub struct WavInfo {
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
    bytes_per_sample: usize,
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

    /// Open and decode every channel of a WAV file. With `accept_truncated`, a file cut short
    /// keeps the complete frames it holds and sets [`Capture::truncated`]; otherwise it is an error.
    pub fn read_wav(path: &Path, accept_truncated: bool) -> Result<Capture> {
        Self::read_wav_channels(path, accept_truncated, None)
    }

    /// Decode only the channels numbered in `channels` (1-based; `None` for all). Reading one
    /// channel at a time keeps memory at one channel's samples for long multichannel files.
    pub fn read_wav_channels(
        path: &Path,
        accept_truncated: bool,
        channels: Option<&[usize]>,
    ) -> Result<Capture> {
        let file = std::fs::File::open(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        let file_bytes = file.metadata().map(|m| m.len()).ok();
        Self::from_reader_channels(
            std::io::BufReader::with_capacity(1 << 16, file),
            path,
            accept_truncated,
            channels,
            file_bytes,
        )
    }

    /// Read only the header.
    pub fn probe_wav(path: &Path) -> Result<WavInfo> {
        let file = std::fs::File::open(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        let mut r = std::io::BufReader::new(file);
        read_header(&mut r, path)
    }

    /// Decode WAV bytes from any reader; `path` only names the source in errors.
    pub fn from_reader<R: Read>(reader: R, path: &Path, accept_truncated: bool) -> Result<Capture> {
        Self::from_reader_channels(reader, path, accept_truncated, None, None)
    }

    fn from_reader_channels<R: Read>(
        mut reader: R,
        path: &Path,
        accept_truncated: bool,
        channels: Option<&[usize]>,
        file_bytes: Option<u64>,
    ) -> Result<Capture> {
        let p = || path.to_path_buf();
        let info = read_header(&mut reader, path)?;
        let numbers: Vec<usize> = match channels {
            None => (1..=info.channel_count).collect(),
            Some(list) => {
                for &c in list {
                    select_channels(info.channel_count, Some(c))?;
                }
                list.to_vec()
            }
        };
        // Reserve what the header promises, but never more than the file can hold: a corrupt
        // header must not make us allocate gigabytes before the first sample.
        let frame_bytes = (info.bytes_per_sample * info.channel_count) as u64;
        let reserve = info
            .frames_declared
            .min(file_bytes.map_or(1 << 20, |b| b / frame_bytes)) as usize;
        let mut out: Vec<Vec<f64>> = numbers
            .iter()
            .map(|_| Vec::with_capacity(reserve))
            .collect();
        let read_frames =
            decode_pcm(&mut reader, &info, &numbers, &mut out).map_err(|e| Error::NotWav {
                path: p(),
                detail: format!("reading samples failed: {e}"),
            })?;
        let truncated = !info.length_unknown && read_frames < info.frames_declared;
        if truncated && !accept_truncated {
            return Err(Error::Truncated {
                path: p(),
                expected_frames: info.frames_declared,
                read_frames,
            });
        }
        if read_frames == 0 {
            return Err(Error::Empty { path: p() });
        }
        Ok(Capture {
            sample_rate_hz: info.sample_rate_hz,
            encoding: info.encoding,
            channel_count: info.channel_count,
            channel_numbers: numbers,
            channels: out,
            truncated,
            description_json: info.description_json,
        })
    }
}

/// Parse the RIFF/WAVE header up to the first data byte and check the format. (hound writes
/// ampnote's files; reading is done here so that the data chunk can be decoded in blocks, one
/// channel at a time, and so that container size and valid bits are both known.)
fn read_header<R: Read>(reader: &mut R, path: &Path) -> Result<WavInfo> {
    let p = || path.to_path_buf();
    let not_wav = |detail: &str| Error::NotWav {
        path: p(),
        detail: detail.to_string(),
    };
    let unsupported = |detail: String| Error::UnsupportedFormat { path: p(), detail };
    let mut head = [0u8; 12];
    reader
        .read_exact(&mut head)
        .map_err(|_| not_wav("the file is shorter than a WAV header"))?;
    if &head[0..4] == b"RF64" {
        return Err(unsupported(
            "RF64 (a WAV variant for files over 4 GiB)".into(),
        ));
    }
    if &head[0..4] != b"RIFF" || &head[8..12] != b"WAVE" {
        return Err(not_wav("no RIFF/WAVE signature at the start"));
    }
    let mut fmt: Option<(u16, usize, u32, usize, u16)> = None; // tag, channels, rate, block align, valid bits
    let mut container_bits = 0u16;
    let mut description_json = None;
    let data_len = loop {
        let mut ch = [0u8; 8];
        reader
            .read_exact(&mut ch)
            .map_err(|_| not_wav("the file ends before its data chunk"))?;
        let len = u32::from_le_bytes([ch[4], ch[5], ch[6], ch[7]]) as u64;
        match &ch[0..4] {
            b"fmt " => {
                if fmt.is_some() {
                    return Err(not_wav(
                        "it has two format chunks (a damaged or hand-joined file): which one holds is unknown",
                    ));
                }
                if len < 16 {
                    return Err(not_wav(&format!(
                        "its format chunk is {len} bytes, shorter than the 16 every WAV needs"
                    )));
                }
                let mut f = vec![0u8; len.min(4096) as usize];
                reader
                    .read_exact(&mut f)
                    .map_err(|_| not_wav("the file ends inside its format chunk"))?;
                skip(reader, len - f.len() as u64 + (len & 1))
                    .map_err(|_| not_wav("the file ends inside its format chunk"))?;
                let u16_at = |i: usize| u16::from_le_bytes([f[i], f[i + 1]]);
                let mut tag = u16_at(0);
                let channels = u16_at(2) as usize;
                let rate = u32::from_le_bytes([f[4], f[5], f[6], f[7]]);
                let block_align = u16_at(12) as usize;
                let mut bits = u16_at(14);
                container_bits = bits;
                if tag == 0xFFFE && f.len() < 40 {
                    return Err(not_wav(&format!(
                        "its format chunk says WAVE_FORMAT_EXTENSIBLE but is {} bytes, too short for the extension (40 needed)",
                        f.len()
                    )));
                }
                if tag == 0xFFFE {
                    // WAVE_FORMAT_EXTENSIBLE: valid bits, then the sub-format GUID whose first
                    // two bytes are the real format tag.
                    let valid = u16_at(18);
                    if valid > 0 {
                        bits = valid;
                    }
                    tag = u16_at(24);
                }
                fmt = Some((tag, channels, rate, block_align, bits));
            }
            b"data" => break len,
            id if id == DESCRIPTION_CHUNK && len <= 1 << 20 => {
                let mut body = vec![0u8; len as usize];
                reader
                    .read_exact(&mut body)
                    .map_err(|_| not_wav("the file ends inside its description chunk"))?;
                skip(reader, len & 1)
                    .map_err(|_| not_wav("the file ends before its data chunk"))?;
                description_json = String::from_utf8(body).ok();
            }
            _ => skip(reader, len + (len & 1))
                .map_err(|_| not_wav("the file ends before its data chunk"))?,
        }
    };
    let (tag, n_ch, rate, block_align, bits) =
        fmt.ok_or_else(|| not_wav("no format chunk before the data"))?;
    if n_ch == 0 {
        return Err(unsupported("the header declares zero channels".into()));
    }
    if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&rate) {
        return Err(Error::UnsupportedRate {
            path: p(),
            rate_hz: rate,
        });
    }
    let bps = block_align / n_ch;
    if bps == 0 || bps * n_ch != block_align {
        return Err(not_wav(&format!(
            "its block size ({block_align} bytes) does not fit {n_ch} channel(s)"
        )));
    }
    // The header's three sizes must agree: block_align = channels x bytes per sample, and the
    // bytes per sample hold the sample's bits (bits_per_sample rounded up to whole bytes).
    if container_bits == 0 || bps != (container_bits as usize).div_ceil(8) {
        return Err(not_wav(&format!(
            "its header disagrees with itself: bits_per_sample {container_bits} needs {} byte(s) per sample, but block_align {block_align} over {n_ch} channel(s) gives {bps}",
            (container_bits as usize).div_ceil(8)
        )));
    }
    if bits > container_bits {
        return Err(not_wav(&format!(
            "its header disagrees with itself: {bits} valid bits in {container_bits}-bit samples"
        )));
    }
    let encoding = match (tag, bits, bps) {
        (1, b @ (8 | 16 | 24 | 32), 1..=4) if bps * 8 >= b as usize => Encoding::Int { bits: b },
        (3, 32, 4) => Encoding::Float32,
        (1, b, _) => {
            return Err(unsupported(format!(
                "{b}-bit integer PCM in {bps}-byte containers"
            )))
        }
        (3, b, _) => return Err(unsupported(format!("{b}-bit float"))),
        (t, _, _) => {
            return Err(unsupported(format!(
                "format tag 0x{t:04X}, not PCM or float (a compressed encoding)"
            )))
        }
    };
    // Recorders that crash or stream leave 0 or 0xFFFFFFFF here; both mean "read to the end".
    let length_unknown = data_len == 0 || data_len == 0xFFFF_FFFF;
    let frames_declared = if length_unknown {
        u64::MAX
    } else {
        data_len / block_align as u64
    };
    if frames_declared == 0 {
        return Err(Error::Empty { path: p() });
    }
    Ok(WavInfo {
        length_unknown,
        description_json,
        sample_rate_hz: rate,
        encoding,
        channel_count: n_ch,
        frames_declared,
        bytes_per_sample: bps,
    })
}

/// Skip `n` bytes.
fn skip<R: Read>(r: &mut R, n: u64) -> std::io::Result<()> {
    let copied = std::io::copy(&mut r.take(n), &mut std::io::sink())?;
    if copied < n {
        return Err(std::io::Error::from(std::io::ErrorKind::UnexpectedEof));
    }
    Ok(())
}

/// Decode interleaved PCM frames in 64 KiB blocks into the chosen channels (1-based numbers),
/// stopping at the declared length or the end of the file. Returns the complete frames read.
fn decode_pcm<R: Read>(
    reader: &mut R,
    info: &WavInfo,
    numbers: &[usize],
    out: &mut [Vec<f64>],
) -> std::io::Result<u64> {
    let bps = info.bytes_per_sample;
    let frame = bps * info.channel_count;
    let frames_per_block = ((1usize << 16) / frame).max(1);
    let mut buf = vec![0u8; frames_per_block * frame];
    let mut frames_done = 0u64;
    let offsets: Vec<usize> = numbers.iter().map(|&c| (c - 1) * bps).collect();
    loop {
        let want_frames =
            (info.frames_declared - frames_done).min(frames_per_block as u64) as usize;
        if want_frames == 0 {
            break;
        }
        let want = want_frames * frame;
        let mut got = 0;
        while got < want {
            match reader.read(&mut buf[got..want]) {
                Ok(0) => break,
                Ok(k) => got += k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        }
        let whole = got / frame;
        let frames = buf[..whole * frame].chunks_exact(frame);
        for (o, &off) in out.iter_mut().zip(&offsets) {
            let f = frames.clone();
            match (info.encoding, bps) {
                (Encoding::Float32, _) => o.extend(f.map(|f| {
                    f32::from_le_bytes([f[off], f[off + 1], f[off + 2], f[off + 3]]) as f64
                })),
                (_, 1) => o.extend(f.map(|f| (f[off] as f64 - 128.0) / 128.0)),
                (_, 2) => {
                    o.extend(f.map(|f| i16::from_le_bytes([f[off], f[off + 1]]) as f64 / 32_768.0))
                }
                (_, 3) => o.extend(f.map(|f| {
                    (i32::from_le_bytes([0, f[off], f[off + 1], f[off + 2]]) >> 8) as f64
                        / 8_388_608.0
                })),
                // 4-byte integer containers hold their valid bits left-justified (WAVE format
                // rules), so scaling by 2^31 gives full scale for 24-in-32 as well.
                _ => o.extend(f.map(|f| {
                    i32::from_le_bytes([f[off], f[off + 1], f[off + 2], f[off + 3]]) as f64
                        / 2_147_483_648.0
                })),
            }
        }
        frames_done += whole as u64;
        if got < want {
            break;
        }
    }
    Ok(frames_done)
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
