//! WAV files: reading captures and writing stimuli and raw captures (32-bit float).
//!
//! Sits at the edges of the data flow: the recording rig ([`crate::rig::recording`]) reads a
//! capture with [`read_wav`]; `tragus stimulus` and the store write signals with
//! [`write_wav_f32`] / [`encode_wav_f32`]. Parsing is done by `hound`; this module adds the
//! checks that make any outside file safe to read (truncation, odd formats, non-finite
//! samples) and error messages of the form `path: what was expected, what was found`.
//!
//! Integer scaling (common practice, the convention of most audio libraries): an n-bit
//! sample `v` becomes `v / 2^(n−1)`, so the most negative code is exactly −1.0 and the most
//! positive is `1 − 2^(1−n)` (i16: `v / 32768`, 24-bit: `v / 8388608`, i32: `v / 2^31`).
//! Float samples are taken as they are.

use std::io::{Cursor, Write};
use std::path::{Path, PathBuf};

/// A decoded WAV file: samples per channel at one rate, full scale ±1.0.
#[derive(Debug, Clone, PartialEq)]
pub struct WavData {
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Samples per channel (index = channel number in the file), full scale ±1.0.
    pub channels: Vec<Vec<f32>>,
}

impl WavData {
    /// Number of samples per channel (all channels have the same length).
    pub fn n_samples(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }
}

/// A WAV file that could not be read or written: the file and what went wrong.
#[derive(Debug, thiserror::Error)]
#[error("{path}: {kind}")]
pub struct WavError {
    /// The file (`<memory>` for in-memory data).
    pub path: String,
    /// What was expected and what was found.
    pub kind: WavErrorKind,
}

/// What went wrong with a WAV file; each message says what was expected and what was found.
#[derive(Debug, thiserror::Error)]
pub enum WavErrorKind {
    /// The file could not be opened or read.
    #[error("expected a readable file, found {0}")]
    Io(#[source] std::io::Error),
    /// The destination could not be written.
    #[error("expected a writable destination, found {0}")]
    WriteIo(#[source] std::io::Error),
    /// The file does not start like a RIFF/WAVE file.
    #[error("expected a WAV file (bytes 0..4 \"RIFF\", 8..12 \"WAVE\"), found {found}")]
    NotWav {
        /// What the first bytes are, escaped.
        found: String,
    },
    /// The file ends inside the header, before the data chunk starts.
    #[error(
        "expected a complete WAV header (RIFF, fmt and data chunk headers), \
         found the file ends after {n_bytes} bytes"
    )]
    TruncatedHeader {
        /// Length of the file, bytes.
        n_bytes: usize,
    },
    /// The header is there but inconsistent.
    #[error("expected a well-formed WAV header, found {0}")]
    Malformed(String),
    /// The sample format is not one this station reads.
    #[error("expected 16-, 24- or 32-bit integer PCM or 32-bit float samples, found {found}")]
    Unsupported {
        /// The format found.
        found: String,
    },
    /// The header declares no channels.
    #[error("expected at least one channel, found 0")]
    ZeroChannels,
    /// The data chunk is shorter than its header says.
    #[error(
        "expected {n_expected} samples per channel (data chunk header), found {n_found} \
         (truncated: {n_found} of {n_expected} samples)"
    )]
    Truncated {
        /// Whole frames present, samples per channel.
        n_found: usize,
        /// Frames the header declares, samples per channel.
        n_expected: usize,
    },
    /// A float sample is NaN or infinite.
    #[error("expected finite samples, found {value} at sample {index} of channel {channel}")]
    NonFinite {
        /// Channel number (0-based).
        channel: usize,
        /// Sample index in the channel (0-based).
        index: usize,
        /// The value found.
        value: f32,
    },
    /// Data handed to the writer cannot form a WAV file.
    #[error("expected {expected}, found {found}")]
    BadSignal {
        /// What the writer needs.
        expected: String,
        /// What it was given.
        found: String,
    },
}

/// Where a WAV came from, for messages.
fn path_text(path: &Path) -> String {
    path.display().to_string()
}

/// Read a WAV file: PCM 16/24/32-bit integer or 32-bit float, any number of channels.
///
/// Integers are scaled to ±1.0 full scale as the module doc says. Never panics on file
/// contents; every problem is a [`WavError`] naming the file.
pub fn read_wav(path: impl AsRef<Path>) -> Result<WavData, WavError> {
    let path = path.as_ref();
    let bytes = std::fs::read(path).map_err(|e| WavError {
        path: path_text(path),
        kind: WavErrorKind::Io(e),
    })?;
    decode_wav(&bytes).map_err(|kind| WavError {
        path: path_text(path),
        kind,
    })
}

/// Decode a WAV file held in memory (the same rules as [`read_wav`]).
pub fn decode_wav(bytes: &[u8]) -> Result<WavData, WavErrorKind> {
    check_riff(bytes)?;
    // hound reads the header up to the data chunk and leaves the rest for later, so this
    // succeeds on a file whose data is cut short; the checks below catch that.
    let header =
        hound::WavReader::new(Cursor::new(bytes)).map_err(|e| header_error(e, bytes.len()))?;
    let spec = header.spec();
    let n_total = header.len() as usize;
    let data_start = header.into_inner().position() as usize;
    if spec.channels == 0 {
        return Err(WavErrorKind::ZeroChannels);
    }
    // The data chunk's length is the u32 just before its first byte (RIFF chunk header).
    let data_len = bytes
        .get(data_start.saturating_sub(4)..data_start)
        .and_then(|b| <[u8; 4]>::try_from(b).ok())
        .map_or(0, |b| u32::from_le_bytes(b) as usize);
    // hound has checked that the data length is a whole number of samples and frames.
    let bytes_per_sample = data_len
        .checked_div(n_total)
        .unwrap_or_else(|| usize::from(spec.bits_per_sample).div_ceil(8));
    let bits = spec.bits_per_sample;
    let supported = matches!(
        (spec.sample_format, bits, bytes_per_sample),
        (hound::SampleFormat::Int, 16, 2)
            | (hound::SampleFormat::Int, 24, 3)
            | (hound::SampleFormat::Int, 24, 4)
            | (hound::SampleFormat::Int, 32, 4)
            | (hound::SampleFormat::Float, 32, 4)
    );
    if !supported {
        let kind = match spec.sample_format {
            hound::SampleFormat::Int => "integer PCM",
            hound::SampleFormat::Float => "float",
        };
        let found = if usize::from(bits) == 8 * bytes_per_sample {
            format!("{bits}-bit {kind}")
        } else {
            format!("{bits}-bit {kind} in {bytes_per_sample}-byte containers")
        };
        return Err(WavErrorKind::Unsupported { found });
    }
    let n_channels = usize::from(spec.channels);
    let frame_bytes = bytes_per_sample * n_channels;
    let n_expected = n_total / n_channels;
    let available = bytes.len().saturating_sub(data_start);
    if available < data_len {
        // Checked before decoding so that a header promising gigabytes never allocates them.
        return Err(WavErrorKind::Truncated {
            n_found: available / frame_bytes,
            n_expected,
        });
    }

    let reader = hound::WavReader::new(Cursor::new(bytes))
        .map_err(|e| WavErrorKind::Malformed(hound_text(&e)))?;
    let mut channels: Vec<Vec<f32>> = (0..n_channels)
        .map(|_| Vec::with_capacity(n_expected))
        .collect();
    match spec.sample_format {
        hound::SampleFormat::Float => {
            for (i, s) in reader.into_samples::<f32>().enumerate() {
                let v = s.map_err(|e| WavErrorKind::Malformed(hound_text(&e)))?;
                let (channel, index) = (i % n_channels, i / n_channels);
                if !v.is_finite() {
                    return Err(WavErrorKind::NonFinite {
                        channel,
                        index,
                        value: v,
                    });
                }
                channels[channel].push(v);
            }
        }
        hound::SampleFormat::Int => {
            let scale = 1.0 / f64::from(1u32 << (bits - 1));
            for (i, s) in reader.into_samples::<i32>().enumerate() {
                let v = s.map_err(|e| WavErrorKind::Malformed(hound_text(&e)))?;
                channels[i % n_channels].push((f64::from(v) * scale) as f32);
            }
        }
    }
    Ok(WavData {
        sample_rate_hz: spec.sample_rate,
        channels,
    })
}

/// The RIFF/WAVE magic, checked by hand so the message can show what the file is instead.
fn check_riff(bytes: &[u8]) -> Result<(), WavErrorKind> {
    if bytes.is_empty() {
        return Err(WavErrorKind::NotWav {
            found: "an empty file".into(),
        });
    }
    let head = &bytes[..bytes.len().min(4)];
    if head != &b"RIFF"[..head.len()] {
        return Err(WavErrorKind::NotWav {
            found: format!("\"{}\" at byte 0", head.escape_ascii()),
        });
    }
    if bytes.len() < 12 {
        return Err(WavErrorKind::TruncatedHeader {
            n_bytes: bytes.len(),
        });
    }
    if &bytes[8..12] != b"WAVE" {
        return Err(WavErrorKind::NotWav {
            found: format!("RIFF form type \"{}\"", bytes[8..12].escape_ascii()),
        });
    }
    Ok(())
}

/// Map a hound error met while reading the header.
fn header_error(e: hound::Error, n_bytes: usize) -> WavErrorKind {
    match e {
        // Reading from memory fails only when the bytes run out.
        hound::Error::IoError(_) => WavErrorKind::TruncatedHeader { n_bytes },
        hound::Error::FormatError("file contains zero channels") => WavErrorKind::ZeroChannels,
        hound::Error::Unsupported => WavErrorKind::Unsupported {
            found: "a format tag other than PCM (1), IEEE float (3) or extensible PCM/float".into(),
        },
        other => WavErrorKind::Malformed(hound_text(&other)),
    }
}

/// hound's messages start with a capital and a prefix; ours are lowercase.
fn hound_text(e: &hound::Error) -> String {
    match e {
        hound::Error::FormatError(reason) => (*reason).to_string(),
        other => {
            let s = other.to_string();
            let s = s.trim_end_matches('.');
            let mut c = s.chars();
            match c.next() {
                Some(first) => first.to_lowercase().chain(c).collect(),
                None => String::new(),
            }
        }
    }
}

/// Encode channels as a 32-bit float WAV (interleaved), in memory.
///
/// Every channel must have the same length; there must be 1..=65535 channels and the data
/// must fit the 4 GiB RIFF limit. Samples are stored bit for bit (no clipping, no dither).
pub fn encode_wav_f32(sample_rate_hz: u32, channels: &[Vec<f32>]) -> Result<Vec<u8>, WavErrorKind> {
    let bad = |expected: &str, found: String| WavErrorKind::BadSignal {
        expected: expected.into(),
        found,
    };
    if channels.is_empty() {
        return Err(bad("at least one channel to write", "none".into()));
    }
    let n_channels = u16::try_from(channels.len())
        .map_err(|_| bad("at most 65535 channels", format!("{}", channels.len())))?;
    if sample_rate_hz == 0 {
        return Err(bad("a sample rate above 0 Hz", "0 Hz".into()));
    }
    let n_samples = channels[0].len();
    if let Some((i, c)) = channels
        .iter()
        .enumerate()
        .find(|(_, c)| c.len() != n_samples)
    {
        return Err(bad(
            "channels of equal length",
            format!(
                "channel 0 has {n_samples} samples, channel {i} has {}",
                c.len()
            ),
        ));
    }
    // RIFF sizes are u32; leave room for the 44-byte header.
    let data_bytes = (n_samples as u64) * u64::from(n_channels) * 4;
    if data_bytes > u64::from(u32::MAX) - 64 {
        return Err(bad(
            "at most 4 GiB of sample data",
            format!("{data_bytes} bytes"),
        ));
    }
    let spec = hound::WavSpec {
        channels: n_channels,
        sample_rate: sample_rate_hz,
        bits_per_sample: 32,
        sample_format: hound::SampleFormat::Float,
    };
    let mut out = Cursor::new(Vec::with_capacity(data_bytes as usize + 64));
    let as_kind = |e: hound::Error| match e {
        hound::Error::IoError(io) => WavErrorKind::WriteIo(io),
        other => WavErrorKind::Malformed(hound_text(&other)),
    };
    {
        let mut w = hound::WavWriter::new(&mut out, spec).map_err(as_kind)?;
        for k in 0..n_samples {
            for c in channels {
                w.write_sample(c[k]).map_err(as_kind)?;
            }
        }
        w.finalize().map_err(as_kind)?;
    }
    Ok(out.into_inner())
}

/// Write channels as a 32-bit float WAV file (interleaved).
///
/// The file is written beside its destination under a temporary name, synced, then renamed
/// over the destination, so a crash leaves either the old file or the complete new one,
/// never half a file.
pub fn write_wav_f32(
    path: impl AsRef<Path>,
    sample_rate_hz: u32,
    channels: &[Vec<f32>],
) -> Result<(), WavError> {
    let path = path.as_ref();
    let err = |kind| WavError {
        path: path_text(path),
        kind,
    };
    let bytes = encode_wav_f32(sample_rate_hz, channels).map_err(err)?;
    write_atomically(path, &bytes).map_err(|e| err(WavErrorKind::WriteIo(e)))
}

/// Write `bytes` to a temporary sibling of `path`, sync it, and rename it into place.
fn write_atomically(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let name = path.file_name().ok_or_else(|| {
        std::io::Error::new(std::io::ErrorKind::InvalidInput, "the path names no file")
    })?;
    let mut tmp_name = std::ffi::OsString::from(".");
    tmp_name.push(name);
    tmp_name.push(format!(".tmp-{}", std::process::id()));
    let tmp: PathBuf = path.with_file_name(tmp_name);
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        drop(f);
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        // Best effort: the temporary file is ours and useless now.
        let _ = std::fs::remove_file(&tmp);
    }
    result
}
