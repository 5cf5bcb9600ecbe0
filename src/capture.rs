//! Reading captures: WAV files from any recorder, decoded to `f64` per channel.
//!
//! Scaling convention: an integer sample `s` of `B` bits becomes `s / 2^(B-1)`, so the most
//! negative code is exactly -1.0 and a float sample is taken as it is. 0 dBFS is the RMS of a sine
//! whose peak is 1.0 (AES17), so a full-scale sine reads 0 dBFS.

use crate::error::{Error, Result};
use std::io::Read;
use std::path::{Path, PathBuf};

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

/// A decoded capture: one `Vec<f64>` per channel, all the same length.
#[derive(Debug, Clone)]
pub struct Capture {
    pub sample_rate_hz: u32,
    pub encoding: Encoding,
    pub channels: Vec<Vec<f64>>,
    /// The file ended before its header said it would and `accept_truncated` was set.
    pub truncated: bool,
}

impl Capture {
    /// Frames (samples per channel).
    pub fn frames(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }

    /// Open and decode a WAV file. With `accept_truncated`, a file cut short keeps the complete
    /// frames it holds and sets [`Capture::truncated`]; otherwise it is an error.
    pub fn read_wav(path: &Path, accept_truncated: bool) -> Result<Capture> {
        let file = std::fs::File::open(path).map_err(|source| Error::Open {
            path: path.to_path_buf(),
            source,
        })?;
        Self::from_reader(std::io::BufReader::with_capacity(1 << 16, file), path, accept_truncated)
    }

    /// Decode WAV bytes from any reader; `path` only names the source in errors.
    pub fn from_reader<R: Read>(reader: R, path: &Path, accept_truncated: bool) -> Result<Capture> {
        let p = || path.to_path_buf();
        let reader = hound::WavReader::new(reader).map_err(|e| header_error(e, p()))?;
        let spec = reader.spec();
        let n_ch = spec.channels as usize;
        if n_ch == 0 {
            return Err(Error::UnsupportedFormat {
                path: p(),
                detail: "the header declares zero channels".into(),
            });
        }
        if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&spec.sample_rate) {
            return Err(Error::UnsupportedRate {
                path: p(),
                rate_hz: spec.sample_rate,
            });
        }
        let encoding = match (spec.sample_format, spec.bits_per_sample) {
            (hound::SampleFormat::Int, b @ (8 | 16 | 24 | 32)) => Encoding::Int { bits: b },
            (hound::SampleFormat::Float, 32) => Encoding::Float32,
            (fmt, b) => {
                return Err(Error::UnsupportedFormat {
                    path: p(),
                    detail: format!("{b}-bit {fmt:?}"),
                })
            }
        };
        let expected_frames = reader.duration() as u64;
        if expected_frames == 0 {
            return Err(Error::Empty { path: p() });
        }
        let mut channels: Vec<Vec<f64>> = (0..n_ch)
            .map(|_| Vec::with_capacity(expected_frames as usize))
            .collect();
        let outcome = match encoding {
            Encoding::Int { bits } => {
                let scale = 1.0 / (1u64 << (bits - 1)) as f64;
                decode(reader.into_samples::<i32>(), &mut channels, |s| s as f64 * scale)
            }
            Encoding::Float32 => decode(reader.into_samples::<f32>(), &mut channels, f64::from),
        };
        // Keep complete frames only.
        let frames = channels.iter().map(Vec::len).min().unwrap_or(0);
        for ch in &mut channels {
            ch.truncate(frames);
        }
        let truncated = match outcome {
            Ok(()) => false,
            Err(hound::Error::IoError(e)) if is_eof(&e) => true,
            Err(e) => {
                return Err(Error::NotWav {
                    path: p(),
                    detail: format!("reading samples failed: {e}"),
                })
            }
        };
        if truncated && !accept_truncated {
            return Err(Error::Truncated {
                path: p(),
                expected_frames,
                read_frames: frames as u64,
            });
        }
        if frames == 0 {
            return Err(Error::Empty { path: p() });
        }
        Ok(Capture {
            sample_rate_hz: spec.sample_rate,
            encoding,
            channels,
            truncated,
        })
    }
}

/// Deinterleave into `channels`, stopping at the first error.
fn decode<S, I>(iter: I, channels: &mut [Vec<f64>], convert: impl Fn(S) -> f64) -> hound::Result<()>
where
    I: Iterator<Item = hound::Result<S>>,
{
    let n_ch = channels.len();
    let mut c = 0;
    for s in iter {
        channels[c].push(convert(s?));
        c += 1;
        if c == n_ch {
            c = 0;
        }
    }
    Ok(())
}

fn header_error(e: hound::Error, path: PathBuf) -> Error {
    match e {
        hound::Error::Unsupported => Error::UnsupportedFormat {
            path,
            detail: "an encoding hound cannot decode (compressed or unusual layout)".into(),
        },
        hound::Error::IoError(io) if is_eof(&io) => Error::NotWav {
            path,
            detail: "the file ends inside its header".into(),
        },
        hound::Error::IoError(source) => Error::Open { path, source },
        other => Error::NotWav {
            path,
            detail: other.to_string(),
        },
    }
}

/// hound reports a short read as `ErrorKind::Other` with this message; std as `UnexpectedEof`.
fn is_eof(e: &std::io::Error) -> bool {
    e.kind() == std::io::ErrorKind::UnexpectedEof || e.to_string().contains("Failed to read enough bytes")
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
