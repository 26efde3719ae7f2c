//! The sound-card rig: plays the stimulus on a real output device and records a real input
//! device through cpal (feature `soundcard`).
//!
//! # Real-time path
//! The stimulus is rendered (interleaved, device channel order) before the streams start
//! and moved into the output callback, which only copies from it with a cursor and converts
//! to the device format. The input callback converts to `f32` and pushes into a lock-free
//! SPSC ring (`rtrb`) that the calling thread drains. Neither callback allocates, locks or
//! does I/O; the error callback only pushes the error kind into a second ring and bumps
//! atomic counters. A full input ring, and every cpal xrun or stream error, is counted and
//! makes the measurement a retest ([`Capture::xruns`], [`Capture::faults`]).
//!
//! A sound server hides its own underruns unless its client library passes them on: through
//! ALSA's `pulse` plugin a server-side underrun reaches cpal as an xrun only while the
//! plugin's `handle_underrun` option is on (its default in the plugin versions read; the
//! test server's ALSA configuration sets it explicitly, and a station should too).
//!
//! # Recording without a sweep
//! [`SoundcardRig::play_and_record`] plays given buffers (silence for a sound calibrator,
//! a tone for a drive reading) and records every input through the same streams and
//! callbacks; a recording with any xrun or fault is an error there, never a reading.
//!
//! # Alignment (what is removed from the recording)
//! The input starts before the output, so the recording holds some silence, then the
//! stimulus delayed by the device path. The capture handed on starts at the recording
//! sample where stimulus sample 0 arrived:
//! - with an electrical loopback (`loopback_input` replays `loopback_output`), at the lag of
//!   the loopback's correlation peak with that output's stimulus: only the converter and
//!   driver path is removed, and the acoustic delay of the unit stays in the capture for the
//!   analysis to measure;
//! - without one, at the lag of the peak of the summed, per-channel normalised |cross-
//!   correlation| of each route's input with its output's stimulus: the whole delay up to
//!   that peak is removed (device and acoustic), nothing more; the analysis then measures a
//!   latency near 0.
//!
//! The lag is [`Capture::device_latency_samples`]. A recording in which no route (or the
//! loopback) carries the stimulus cannot be aligned: that is a fault (retest), because
//! without a loopback a dead unit and a dead rig look the same.
//!
//! # Clock check
//! With a loopback, the delay of the first and last thirds of the sweep gives the drift of
//! the input clock against the output clock ([`super::align::drift_ppm`]); with separate
//! input and output devices, above [`SoundcardSpec::max_clock_drift_ppm`] it is a fault.

use super::align;
use super::SoundcardSpec;
use super::{Capture, Guard, GuardTrip, Rig, RigError};
use crate::dsp::sweep::Stimulus;
use cpal::traits::{DeviceTrait, HostTrait, StreamTrait};
use cpal::{
    ErrorKind, FromSample, Sample, SampleFormat, SizedSample, StreamConfig,
    SupportedStreamConfigRange, I24, U24,
};
use std::sync::atomic::{AtomicBool, AtomicU32, AtomicU64, AtomicUsize, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

/// Recording kept after the last stimulus sample was handed to the output, beyond the
/// output and input latencies the device reports in its callback timestamps, s: the
/// reported latencies miss converter and server-internal delays (a few ms on a USB
/// interface, up to tens of ms through a sound server), so 0.3 s leaves ample room.
const TAIL_S: f64 = 0.3;
/// Reported latencies above this are not believed (a wrong timestamp would otherwise keep
/// the run recording), s.
const MAX_REPORTED_LATENCY_S: f64 = 5.0;
/// Pause between building the output stream and starting it, ms.
const STREAM_SETTLE_MS: u64 = 50;
/// No input for this long while a run is in progress means the device is gone, s.
const STALL_S: f64 = 2.0;
/// Input ring capacity, s of audio: the collecting thread drains it every few ms, so only a
/// stalled process fills it.
const RING_S: f64 = 2.0;
/// Search range for each loopback segment around the aligned delay, samples: ±64 covers
/// 100 ppm of drift over 13 s of sweep; a dropout shifts the delay by a whole buffer
/// (hundreds of samples) and the segment is then not found.
const DRIFT_SEARCH_SAMPLES: usize = 64;
/// Number of loopback segments (a line fit with six degrees of freedom left to show a jump;
/// gaps between segments stay unchecked, but a lost buffer shifts every later segment).
const LOOPBACK_SEGMENTS: usize = 8;
/// Longest loopback segment, samples (see [`align::spread_segments`]).
const LOOPBACK_SEGMENT_SAMPLES: usize = 2048;
/// The loopback check starts where the sweep passes this, Hz: below it an interface's
/// DC-blocking high-pass adds group delay (first-order high-pass: τ = ω_c/(ω_c² + ω²), a
/// textbook result; 2 Hz delays 35 Hz by about 12 samples at 48 kHz), which would read as
/// drift.
const LOOPBACK_FROM_HZ: f64 = 200.0;
/// The drift fit uses the loopback segments above this, Hz: a segment of a few hundred Hz
/// holds only a few cycles and its correlation peak is too broad to place to a tenth of a
/// sample (measured: 0.3 sample off at 250 Hz in the unit test's sweep).
const DRIFT_FROM_HZ: f64 = 1000.0;
/// Largest loopback delay residual from the straight line that is still a continuous
/// recording, samples: converter group-delay differences above 200 Hz stay well below one
/// sample, a lost buffer is hundreds.
const MAX_LOOPBACK_RESIDUAL_SAMPLES: f64 = 2.0;

/// Preference among sample formats when a device offers several at the plan's rate: float
/// first (no conversion loss), then the widest integers.
const FORMAT_PREFERENCE: [SampleFormat; 12] = [
    SampleFormat::F32,
    SampleFormat::F64,
    SampleFormat::I32,
    SampleFormat::I24,
    SampleFormat::I64,
    SampleFormat::U32,
    SampleFormat::U24,
    SampleFormat::U64,
    SampleFormat::I16,
    SampleFormat::U16,
    SampleFormat::I8,
    SampleFormat::U8,
];

/// Input or output.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Direction {
    Input,
    Output,
}

impl Direction {
    fn word(self) -> &'static str {
        match self {
            Direction::Input => "input",
            Direction::Output => "output",
        }
    }
}

/// One opened device direction: the device, its stream settings, its name for messages.
struct Endpoint {
    device: cpal::Device,
    config: StreamConfig,
    format: SampleFormat,
    name: String,
    id: String,
}

/// The sound-card rig.
pub struct SoundcardRig {
    spec: SoundcardSpec,
    routes: Vec<(usize, usize)>,
    sample_rate_hz: u32,
    output: Endpoint,
    input: Endpoint,
    /// The hearing-safety guard the callbacks run, when armed.
    guard: Option<Guard>,
}

impl std::fmt::Debug for SoundcardRig {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SoundcardRig")
            .field("spec", &self.spec)
            .field("routes", &self.routes)
            .field("sample_rate_hz", &self.sample_rate_hz)
            .field("output", &(&self.output.name, self.output.config.channels))
            .field("input", &(&self.input.name, self.input.config.channels))
            .finish()
    }
}

fn bad(path: impl Into<String>, message: impl Into<String>) -> RigError {
    RigError::BadInput {
        path: path.into(),
        message: message.into(),
    }
}

/// The host the spec names (case-insensitive cpal host name), or the default host.
fn open_host(name: Option<&str>) -> Result<cpal::Host, RigError> {
    let Some(name) = name else {
        return Ok(cpal::default_host());
    };
    let ids = cpal::available_hosts();
    let id = ids
        .iter()
        .find(|id| id.name().eq_ignore_ascii_case(name))
        .ok_or_else(|| {
            bad(
                format!("host {name}"),
                format!(
                    "expected one of the available hosts ({}), found `{name}`",
                    ids.iter()
                        .map(|i| i.to_string())
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            )
        })?;
    cpal::host_from_id(*id).map_err(|e| bad(format!("host {name}"), format!("cannot open: {e}")))
}

/// A device's id (e.g. ALSA's PCM name `default`) and display name.
pub fn device_names(device: &cpal::Device) -> (String, String) {
    let id = device.id().map(|i| i.id().to_string()).unwrap_or_default();
    let name = device
        .description()
        .map(|d| d.name().to_string())
        .unwrap_or_else(|_| id.clone());
    (id, name)
}

fn supports(device: &cpal::Device, dir: Direction) -> bool {
    match dir {
        Direction::Input => device.supports_input(),
        Direction::Output => device.supports_output(),
    }
}

/// The device the spec names (by id or display name), or the host's default.
fn find_device(
    host: &cpal::Host,
    name: Option<&str>,
    dir: Direction,
) -> Result<cpal::Device, RigError> {
    let Some(name) = name else {
        let dev = match dir {
            Direction::Input => host.default_input_device(),
            Direction::Output => host.default_output_device(),
        };
        return dev.ok_or_else(|| {
            bad(
                format!("default {} device", dir.word()),
                format!(
                    "expected a default {} device on host {}, found none (is the sound card \
                     connected and the sound server running? see `tragus devices`)",
                    dir.word(),
                    host.id()
                ),
            )
        });
    };
    let devices: Vec<cpal::Device> = host
        .devices()
        .map_err(|e| {
            bad(
                format!("host {}", host.id()),
                format!("cannot list devices: {e}"),
            )
        })?
        .filter(|d| supports(d, dir))
        .collect();
    let mut names = Vec::new();
    for d in devices {
        let (id, display) = device_names(&d);
        if id == name || display == name {
            return Ok(d);
        }
        names.push(if id == display {
            id
        } else {
            format!("{id} ({display})")
        });
    }
    Err(bad(
        format!("{} device {name}", dir.word()),
        format!(
            "expected one of the {} devices of host {} ({}), found `{name}`",
            dir.word(),
            host.id(),
            if names.is_empty() {
                "none".to_string()
            } else {
                names.join(", ")
            }
        ),
    ))
}

/// `44100–48000 Hz` or `48000 Hz`.
fn rate_range(c: &SupportedStreamConfigRange) -> String {
    if c.min_sample_rate() == c.max_sample_rate() {
        format!("{} Hz", c.min_sample_rate())
    } else {
        format!("{}–{} Hz", c.min_sample_rate(), c.max_sample_rate())
    }
}

/// Pick a stream configuration: at least `n_channels` channels (the device's default count
/// when it has enough, so a stereo device is not opened mono and up-mixed), exactly
/// `rate_hz`, a PCM format by [`FORMAT_PREFERENCE`], and the buffer size asked for.
fn choose_config(
    device: &cpal::Device,
    dir: Direction,
    n_channels: usize,
    rate_hz: u32,
    buffer_frames: Option<u32>,
    label: &str,
) -> Result<(StreamConfig, SampleFormat), RigError> {
    let configs: Vec<SupportedStreamConfigRange> = match dir {
        Direction::Input => device.supported_input_configs().map(|c| c.collect()),
        Direction::Output => device.supported_output_configs().map(|c| c.collect()),
    }
    .map_err(|e| {
        bad(
            label,
            format!("cannot read the supported configurations: {e}"),
        )
    })?;
    let default_channels = match dir {
        Direction::Input => device.default_input_config(),
        Direction::Output => device.default_output_config(),
    }
    .map(|c| usize::from(c.channels()))
    .ok();
    let pcm = |c: &&SupportedStreamConfigRange| FORMAT_PREFERENCE.contains(&c.sample_format());
    let wide: Vec<&SupportedStreamConfigRange> = configs
        .iter()
        .filter(pcm)
        .filter(|c| usize::from(c.channels()) >= n_channels)
        .collect();
    if wide.is_empty() {
        let max = configs.iter().map(|c| c.channels()).max().unwrap_or(0);
        return Err(bad(
            label,
            format!(
                "expected at least {n_channels} {} channel(s) (the routes and loopback use \
                 them), found at most {max}",
                dir.word()
            ),
        ));
    }
    let at_rate: Vec<&&SupportedStreamConfigRange> =
        wide.iter().filter(|c| c.contains_rate(rate_hz)).collect();
    if at_rate.is_empty() {
        let mut rates: Vec<String> = wide.iter().map(|c| rate_range(c)).collect();
        rates.sort();
        rates.dedup();
        return Err(bad(
            label,
            format!(
                "expected a device that runs at the plan's {rate_hz} Hz, found only {}",
                rates.join(", ")
            ),
        ));
    }
    let channels_rank = |c: u16| -> (bool, u16) {
        // Prefer the default channel count, then the fewest channels that suffice.
        (Some(usize::from(c)) != default_channels, c)
    };
    let format_rank = |f: SampleFormat| FORMAT_PREFERENCE.iter().position(|&p| p == f);
    let best = at_rate
        .iter()
        .min_by_key(|c| (channels_rank(c.channels()), format_rank(c.sample_format())))
        .ok_or_else(|| bad(label, "no configuration left after filtering"))?;
    let buffer_size = match buffer_frames {
        None => cpal::BufferSize::Default,
        Some(n) => {
            if let cpal::SupportedBufferSize::Range { min, max } = best.buffer_size() {
                if n < *min || n > *max {
                    return Err(bad(
                        label,
                        format!("expected a buffer size of {min}–{max} frames, found {n}"),
                    ));
                }
            }
            cpal::BufferSize::Fixed(n)
        }
    };
    Ok((
        StreamConfig {
            channels: best.channels(),
            sample_rate: rate_hz,
            buffer_size,
        },
        best.sample_format(),
    ))
}

impl SoundcardRig {
    /// Open the host and devices of `spec` for `routes` (device output, device input per
    /// plan channel, 0-based) at `sample_rate_hz`. Checks names, channel counts, the rate
    /// (listing the supported ones), formats and the buffer size; streams are built per run.
    ///
    /// # Errors
    /// [`RigError::BadInput`] for anything the station settings got wrong (unknown host or
    /// device, no default device, too few channels, unsupported rate or buffer size, a
    /// loopback given by half).
    pub fn open(
        spec: SoundcardSpec,
        routes: Vec<(usize, usize)>,
        sample_rate_hz: u32,
    ) -> Result<Self, RigError> {
        if spec.loopback_input.is_some() != spec.loopback_output.is_some() {
            return Err(bad(
                "loopback",
                "expected both a loopback input and the output it replays, found only one",
            ));
        }
        if spec.max_clock_drift_ppm.is_nan() || spec.max_clock_drift_ppm <= 0.0 {
            return Err(bad(
                "max_clock_drift_ppm",
                format!(
                    "expected a positive drift bound, found {}",
                    spec.max_clock_drift_ppm
                ),
            ));
        }
        let host = open_host(spec.host.as_deref())?;
        let n_out = routes
            .iter()
            .map(|r| r.0 + 1)
            .chain(spec.loopback_output.map(|o| o + 1))
            .max()
            .unwrap_or(1);
        let n_in = routes
            .iter()
            .map(|r| r.1 + 1)
            .chain(spec.loopback_input.map(|i| i + 1))
            .chain(spec.extra_inputs.iter().map(|i| i + 1))
            .max()
            .unwrap_or(1);
        let endpoint = |dir: Direction, name: Option<&str>, n: usize| -> Result<Endpoint, _> {
            let device = find_device(&host, name, dir)?;
            let (id, shown) = device_names(&device);
            let label = format!("{} device {id}", dir.word());
            let (config, format) =
                choose_config(&device, dir, n, sample_rate_hz, spec.buffer_frames, &label)?;
            tracing::info!(
                direction = dir.word(),
                device = %shown,
                channels = config.channels,
                format = ?format,
                "sound-card endpoint"
            );
            Ok(Endpoint {
                device,
                config,
                format,
                name: shown,
                id,
            })
        };
        let output = endpoint(Direction::Output, spec.output_device.as_deref(), n_out)?;
        let input = endpoint(Direction::Input, spec.input_device.as_deref(), n_in)?;
        Ok(SoundcardRig {
            spec,
            routes,
            sample_rate_hz,
            output,
            input,
            guard: None,
        })
    }

    /// True when input and output are different devices (separate clocks, unless the
    /// hardware shares one).
    pub fn separate_devices(&self) -> bool {
        self.output.id != self.input.id
    }

    /// Output and input stream settings: (channels, sample format) each.
    pub fn stream_formats(&self) -> ((u16, SampleFormat), (u16, SampleFormat)) {
        (
            (self.output.config.channels, self.output.format),
            (self.input.config.channels, self.input.format),
        )
    }
}

/// What the callbacks tell the collecting thread, all lock-free.
struct Shared {
    /// Frames the output callback has handed to the device (stimulus and silence after it).
    frames_played: AtomicUsize,
    /// The whole rendered stimulus has been handed to the device.
    output_done: AtomicBool,
    /// Input callbacks that found the ring full (samples dropped).
    ring_overruns: AtomicU32,
    /// cpal xrun reports from either stream.
    xruns: AtomicU32,
    /// Stream errors other than xruns (device lost, ...).
    stream_errors: AtomicU32,
    /// Largest output latency the callbacks reported (playback − callback time), ns.
    output_latency_ns: AtomicU64,
    /// Largest input latency the callbacks reported (callback − capture time), ns.
    input_latency_ns: AtomicU64,
    /// The run-time guard (read only in the callbacks; its vectors are built beforehand).
    guard: Option<Guard>,
    /// The input callback saw a watched input over its limit.
    guard_tripped: AtomicBool,
    /// Which input (0-based).
    guard_input: AtomicUsize,
    /// Input frame (from the input's first frame) of the first sample over the limit.
    guard_first_frame: AtomicUsize,
    /// Its magnitude and the limit, f64 bits.
    guard_peak_bits: AtomicU64,
    guard_limit_bits: AtomicU64,
    /// Output frame at which the output callback began the fade; `usize::MAX` = none.
    fade_start_frame: AtomicUsize,
}

impl Shared {
    fn new(guard: Option<Guard>) -> Shared {
        Shared {
            frames_played: AtomicUsize::new(0),
            output_done: AtomicBool::new(false),
            ring_overruns: AtomicU32::new(0),
            xruns: AtomicU32::new(0),
            stream_errors: AtomicU32::new(0),
            output_latency_ns: AtomicU64::new(0),
            input_latency_ns: AtomicU64::new(0),
            guard,
            guard_tripped: AtomicBool::new(false),
            guard_input: AtomicUsize::new(0),
            guard_first_frame: AtomicUsize::new(0),
            guard_peak_bits: AtomicU64::new(0),
            guard_limit_bits: AtomicU64::new(0),
            fade_start_frame: AtomicUsize::new(usize::MAX),
        }
    }

    /// What the guard saw and did, once the streams have stopped.
    fn guard_trip(&self) -> Option<GuardTrip> {
        if !self.guard_tripped.load(Ordering::Acquire) {
            return None;
        }
        let fade_frames = self.guard.as_ref().map_or(1, |g| g.fade_frames.max(1));
        let fade_start = self.fade_start_frame.load(Ordering::Acquire);
        // The output may have finished before the trip was seen: nothing was left to fade.
        let fade_start = if fade_start == usize::MAX {
            self.frames_played.load(Ordering::Acquire)
        } else {
            fade_start
        };
        Some(GuardTrip {
            input: self.guard_input.load(Ordering::Acquire),
            first_over_sample: self.guard_first_frame.load(Ordering::Acquire),
            peak_fs: f64::from_bits(self.guard_peak_bits.load(Ordering::Acquire)),
            limit_fs: f64::from_bits(self.guard_limit_bits.load(Ordering::Acquire)),
            fade_start_sample: fade_start,
            silent_from_sample: fade_start + fade_frames - 1,
        })
    }
}

/// Map a cpal build/play error: a busy or vanished device is worth a retry (fault), a
/// configuration the device refuses is the station's mistake (bad input).
fn stream_error(label: &str, e: &cpal::Error) -> RigError {
    match e.kind() {
        ErrorKind::DeviceBusy => RigError::Fault(format!(
            "{label}: the device is busy (another program is using it); close it and test \
             the unit again: {e}"
        )),
        ErrorKind::DeviceNotAvailable | ErrorKind::HostUnavailable => RigError::Fault(format!(
            "{label}: the device is not available (unplugged, or the sound server stopped); \
             reconnect it and test the unit again: {e}"
        )),
        ErrorKind::UnsupportedConfig | ErrorKind::InvalidInput => bad(
            label,
            format!("the device refuses the stream settings: {e}"),
        ),
        _ => RigError::Fault(format!("{label}: cannot start the stream: {e}")),
    }
}

fn build_output<T>(
    device: &cpal::Device,
    config: &StreamConfig,
    rendered: Vec<f32>,
    shared: Arc<Shared>,
    mut errors: rtrb::Producer<cpal::Error>,
    err_shared: Arc<Shared>,
) -> Result<cpal::Stream, cpal::Error>
where
    T: SizedSample + FromSample<f32>,
{
    let channels = usize::from(config.channels);
    let mut cursor = 0usize;
    let mut fade_at: Option<usize> = None;
    let fade_frames = shared.guard.as_ref().map_or(1, |g| g.fade_frames.max(1));
    device.build_output_stream::<T, _, _>(
        *config,
        move |data: &mut [T], info: &cpal::OutputCallbackInfo| {
            let ts = info.timestamp();
            let latency = ts.playback.saturating_duration_since(ts.callback);
            shared
                .output_latency_ns
                .fetch_max(latency.as_nanos() as u64, Ordering::Relaxed);
            let n = data.len().min(rendered.len().saturating_sub(cursor));
            // Hearing-safety guard: once the input callback saw a level over its limit,
            // every frame from here on is faded to silence (raised cosine, all channels
            // alike; src/safety/ramp.rs). Arithmetic only: no allocation, no lock.
            if fade_at.is_none() && shared.guard_tripped.load(Ordering::Acquire) {
                let frame = cursor / channels.max(1);
                fade_at = Some(frame);
                shared.fade_start_frame.store(frame, Ordering::Release);
            }
            match fade_at {
                None => {
                    for (d, &s) in data[..n].iter_mut().zip(&rendered[cursor..cursor + n]) {
                        *d = T::from_sample(s);
                    }
                }
                Some(start) => {
                    for (i, (d, &s)) in data[..n]
                        .iter_mut()
                        .zip(&rendered[cursor..cursor + n])
                        .enumerate()
                    {
                        let frame = (cursor + i) / channels.max(1);
                        let k = frame - start + 1;
                        let g = if k >= fade_frames {
                            0.0
                        } else {
                            crate::dsp::ramp::fade_gain(k, fade_frames)
                        };
                        *d = T::from_sample((f64::from(s) * g) as f32);
                    }
                }
            }
            for d in &mut data[n..] {
                *d = T::EQUILIBRIUM;
            }
            cursor += n;
            shared
                .frames_played
                .fetch_add(data.len() / channels.max(1), Ordering::Release);
            if cursor >= rendered.len() {
                shared.output_done.store(true, Ordering::Release);
            }
        },
        move |e| note_error(&err_shared, &mut errors, e),
        None,
    )
}

fn build_input<T>(
    device: &cpal::Device,
    config: &StreamConfig,
    mut ring: rtrb::Producer<f32>,
    shared: Arc<Shared>,
    mut errors: rtrb::Producer<cpal::Error>,
    err_shared: Arc<Shared>,
) -> Result<cpal::Stream, cpal::Error>
where
    T: SizedSample,
    f32: FromSample<T>,
{
    let channels = usize::from(config.channels);
    let mut frames_seen = 0usize;
    device.build_input_stream::<T, _, _>(
        *config,
        move |data: &[T], info: &cpal::InputCallbackInfo| {
            let ts = info.timestamp();
            let latency = ts.callback.saturating_duration_since(ts.capture);
            shared
                .input_latency_ns
                .fetch_max(latency.as_nanos() as u64, Ordering::Relaxed);
            let n = data.len().min(ring.slots());
            if n < data.len() {
                shared.ring_overruns.fetch_add(1, Ordering::Relaxed);
            }
            if let Some(g) = &shared.guard {
                if !shared.guard_tripped.load(Ordering::Relaxed) {
                    watch(g, &shared, data, channels, frames_seen);
                }
            }
            frames_seen += data.len() / channels.max(1);
            if let Ok(mut chunk) = ring.write_chunk(n) {
                let (a, b) = chunk.as_mut_slices();
                let split = a.len();
                for (slot, &s) in a.iter_mut().zip(&data[..split]) {
                    *slot = f32::from_sample(s);
                }
                for (slot, &s) in b.iter_mut().zip(&data[split..n]) {
                    *slot = f32::from_sample(s);
                }
                chunk.commit_all();
            }
        },
        move |e| note_error(&err_shared, &mut errors, e),
        None,
    )
}

/// The guard's level watch over one input callback's interleaved block, from input frame
/// `first_frame` on: the first watched sample over its block's limit (or not finite) trips
/// the guard. Arithmetic only: no allocation, no lock.
fn watch<T>(g: &Guard, shared: &Shared, data: &[T], channels: usize, first_frame: usize)
where
    T: SizedSample,
    f32: FromSample<T>,
{
    let block = g.block_frames.max(1);
    for (f, frame) in data.chunks(channels.max(1)).enumerate() {
        let k = first_frame + f;
        for (c, limits) in g.limits_fs.iter().enumerate().take(frame.len()) {
            let Some(limits) = limits else { continue };
            let Some(&last) = limits.last() else { continue };
            let limit = limits.get(k / block).copied().unwrap_or(last);
            let x = f64::from(f32::from_sample(frame[c]));
            if !x.is_finite() || x.abs() > limit {
                shared.guard_input.store(c, Ordering::Relaxed);
                shared.guard_first_frame.store(k, Ordering::Relaxed);
                shared
                    .guard_peak_bits
                    .store(x.abs().to_bits(), Ordering::Relaxed);
                shared
                    .guard_limit_bits
                    .store(limit.to_bits(), Ordering::Relaxed);
                shared.guard_tripped.store(true, Ordering::Release);
                return;
            }
        }
    }
}

/// A stream error as the retest reason shows it: an xrun says what it means for the
/// measurement (samples lost) and where to look; other errors keep cpal's kind and text
/// (once: an xrun's text repeats its kind).
fn error_text(e: &cpal::Error) -> String {
    if e.kind() == ErrorKind::Xrun {
        return "xrun: samples were lost (a buffer underrun or overrun in the device or the \
                sound server)"
            .into();
    }
    let (kind, text) = (e.kind().to_string(), e.to_string());
    if text.contains(&kind) {
        format!("stream error: {text}")
    } else {
        format!("stream error: {kind}: {text}")
    }
}

/// Error callback body: counters and a ring push only (the callback may run on the audio
/// thread).
fn note_error(shared: &Shared, errors: &mut rtrb::Producer<cpal::Error>, error: cpal::Error) {
    if error.kind() == ErrorKind::Xrun {
        shared.xruns.fetch_add(1, Ordering::Relaxed);
    } else {
        shared.stream_errors.fetch_add(1, Ordering::Relaxed);
    }
    // Moved, not copied: cpal built the message already; a full ring drops it (counted).
    let _ = errors.push(error);
}

macro_rules! by_format {
    ($format:expr, $f:ident, $($arg:expr),*) => {
        match $format {
            SampleFormat::I8 => $f::<i8>($($arg),*),
            SampleFormat::I16 => $f::<i16>($($arg),*),
            SampleFormat::I24 => $f::<I24>($($arg),*),
            SampleFormat::I32 => $f::<i32>($($arg),*),
            SampleFormat::I64 => $f::<i64>($($arg),*),
            SampleFormat::U8 => $f::<u8>($($arg),*),
            SampleFormat::U16 => $f::<u16>($($arg),*),
            SampleFormat::U24 => $f::<U24>($($arg),*),
            SampleFormat::U32 => $f::<u32>($($arg),*),
            SampleFormat::U64 => $f::<u64>($($arg),*),
            SampleFormat::F32 => $f::<f32>($($arg),*),
            SampleFormat::F64 => $f::<f64>($($arg),*),
            other => Err(cpal::Error::with_message(
                ErrorKind::UnsupportedConfig,
                format!("sample format {other:?} is not PCM"),
            )),
        }
    };
}

/// What one run recorded, before alignment, with what went wrong while recording.
struct RawRecording {
    /// Per input channel.
    channels: Vec<Vec<f32>>,
    /// cpal xruns and input-ring overruns.
    xruns: u32,
    faults: Vec<String>,
    /// The guard's trip, in input and output frames from each stream's first frame.
    guard_trip: Option<GuardTrip>,
}

/// A clean recording made by [`SoundcardRig::play_and_record`]: every input channel of
/// the input device, from the input's first sample (before the output started) to the
/// tail after the last output sample. Not aligned: the device latency is in it.
#[derive(Debug, Clone, PartialEq)]
pub struct Recording {
    /// Sample rate, Hz (the rate the devices were opened at).
    pub sample_rate_hz: u32,
    /// Per device input channel (0-based), full scale ±1.0.
    pub channels: Vec<Vec<f32>>,
}

/// Longest buffer [`SoundcardRig::play_and_record`] plays, s: ten minutes of a 64-channel
/// float buffer is 7 GB at 48 kHz; a calibration reading needs seconds.
pub const MAX_PLAY_S: f64 = 600.0;

impl SoundcardRig {
    /// Play `outputs` (one buffer per device output channel from output 1, all of the same
    /// length, full scale ±1.0; device channels past the last buffer play silence) and
    /// record every input channel for as long, plus the device latencies and a tail.
    ///
    /// The same streams, real-time-safe callbacks and fault counting as a measurement
    /// ([`Rig::play_and_capture`]). For readings made outside a sweep, such as a sound
    /// calibrator on a microphone (`outputs` silent) or a calibration tone played through
    /// a known input.
    ///
    /// # Errors
    /// [`RigError::BadInput`] when the buffers are empty, of different lengths, longer
    /// than [`MAX_PLAY_S`], hold a non-finite sample, or are more than the device's
    /// outputs; [`RigError::Fault`] when the devices cannot be started, or when the
    /// recording had an xrun, a dropped buffer or a stream error: nothing may be read
    /// from a broken recording, so none is returned.
    pub fn play_and_record(&mut self, outputs: &[Vec<f32>]) -> Result<Recording, RigError> {
        let n_out = usize::from(self.output.config.channels);
        let n_frames = outputs.first().map_or(0, Vec::len);
        if n_frames == 0 {
            return Err(bad(
                "outputs",
                "expected at least one output buffer of at least one sample, found none",
            ));
        }
        if outputs.len() > n_out {
            return Err(bad(
                format!("output device {}", self.output.name),
                format!(
                    "expected at most {n_out} output buffers (the stream's channels), found {}",
                    outputs.len()
                ),
            ));
        }
        if let Some((k, b)) = outputs
            .iter()
            .enumerate()
            .find(|(_, b)| b.len() != n_frames)
        {
            return Err(bad(
                format!("output {}", k + 1),
                format!(
                    "expected {n_frames} samples like output 1, found {}",
                    b.len()
                ),
            ));
        }
        let max_frames = (MAX_PLAY_S * f64::from(self.sample_rate_hz)) as usize;
        if n_frames > max_frames {
            return Err(bad(
                "outputs",
                format!("expected at most {MAX_PLAY_S} s ({max_frames} samples), found {n_frames}"),
            ));
        }
        for (k, b) in outputs.iter().enumerate() {
            if let Some(i) = b.iter().position(|v| !v.is_finite()) {
                return Err(bad(
                    format!("output {}", k + 1),
                    format!("expected finite samples, found {} at sample {i}", b[i]),
                ));
            }
        }
        let raw = self.record_raw(outputs, n_frames)?;
        if raw.xruns > 0 || !raw.faults.is_empty() {
            let mut why = raw.faults;
            if raw.xruns > 0 && why.is_empty() {
                why.push(format!("{} xrun(s)", raw.xruns));
            }
            return Err(RigError::Fault(format!(
                "the recording is not usable, so nothing was read from it: {}",
                why.join("; ")
            )));
        }
        Ok(Recording {
            sample_rate_hz: self.sample_rate_hz,
            channels: raw.channels,
        })
    }

    /// Render `outputs` (device channel order, `n_frames` each; buffers past the device's
    /// channels are not played), play, record; no alignment. Faults and xruns are
    /// reported in the result, not as an error, so a measurement can record them.
    fn record_raw(&self, outputs: &[Vec<f32>], n_frames: usize) -> Result<RawRecording, RigError> {
        let fs = f64::from(self.sample_rate_hz);
        let n_stim = n_frames;
        let n_out = usize::from(self.output.config.channels);
        let n_in = usize::from(self.input.config.channels);
        let mut rendered = vec![0.0f32; n_stim * n_out];
        for (d, ch) in outputs.iter().enumerate().take(n_out) {
            for (k, &v) in ch.iter().enumerate().take(n_stim) {
                rendered[k * n_out + d] = v;
            }
        }
        let shared = Arc::new(Shared::new(self.guard.clone()));
        let ring_len = ((RING_S * fs) as usize).max(4096) * n_in;
        let (producer, mut consumer) = rtrb::RingBuffer::<f32>::new(ring_len);
        let (in_err_p, mut in_err_c) = rtrb::RingBuffer::<cpal::Error>::new(64);
        let (out_err_p, mut out_err_c) = rtrb::RingBuffer::<cpal::Error>::new(64);
        let tail_frames = |shared: &Shared| -> usize {
            let reported_s = (shared.output_latency_ns.load(Ordering::Relaxed)
                + shared.input_latency_ns.load(Ordering::Relaxed))
                as f64
                * 1e-9;
            ((TAIL_S + reported_s.min(MAX_REPORTED_LATENCY_S)) * fs) as usize
        };
        let max_tail_frames = ((TAIL_S + MAX_REPORTED_LATENCY_S) * fs) as usize;
        let mut interleaved: Vec<f32> =
            Vec::with_capacity((n_stim + 2 * max_tail_frames + ring_len / n_in.max(1)) * n_in);

        let in_label = format!("input device {}", self.input.name);
        let out_label = format!("output device {}", self.output.name);
        // Input first, so the recording holds the output's first sample.
        let input_stream = by_format!(
            self.input.format,
            build_input,
            &self.input.device,
            &self.input.config,
            producer,
            shared.clone(),
            in_err_p,
            shared.clone()
        )
        .map_err(|e| stream_error(&in_label, &e))?;
        input_stream
            .play()
            .map_err(|e| stream_error(&in_label, &e))?;
        // The input only records once its first callback ran (a sound server starts a
        // record stream lazily); output started earlier would lose stimulus sample 0.
        let waiting = Instant::now();
        while consumer.slots() == 0 {
            if shared.stream_errors.load(Ordering::Relaxed) > 0
                || waiting.elapsed() > Duration::from_secs_f64(STALL_S)
            {
                let mut kinds = Vec::new();
                while let Ok(kind) = in_err_c.pop() {
                    kinds.push(kind.to_string());
                }
                return Err(RigError::Fault(format!(
                    "{in_label}: the input delivered no samples within {STALL_S} s of starting \
                     (device lost or sound server stopped){}",
                    if kinds.is_empty() {
                        String::new()
                    } else {
                        format!(": {}", kinds.join("; "))
                    }
                )));
            }
            std::thread::sleep(Duration::from_millis(1));
        }
        let output_stream = by_format!(
            self.output.format,
            build_output,
            &self.output.device,
            &self.output.config,
            rendered,
            shared.clone(),
            out_err_p,
            shared.clone()
        )
        .map_err(|e| stream_error(&out_label, &e))?;
        // The sound server connects a new stream asynchronously; starting it at once fails
        // now and then (ALSA's pulse plugin: `snd_pcm_avail_delay` I/O error). Measured here.
        std::thread::sleep(Duration::from_millis(STREAM_SETTLE_MS));
        output_stream
            .play()
            .map_err(|e| stream_error(&out_label, &e))?;

        let mut faults = Vec::new();
        let started = Instant::now();
        let mut last_input = Instant::now();
        let mut frames_at_done: Option<usize> = None;
        let deadline =
            Duration::from_secs_f64(n_stim as f64 / fs + TAIL_S + MAX_REPORTED_LATENCY_S + 10.0);
        loop {
            let available = consumer.slots();
            if available > 0 {
                if let Ok(chunk) = consumer.read_chunk(available) {
                    let (a, b) = chunk.as_slices();
                    interleaved.extend_from_slice(a);
                    interleaved.extend_from_slice(b);
                    chunk.commit_all();
                }
                last_input = Instant::now();
            }
            let frames = interleaved.len() / n_in.max(1);
            if shared.stream_errors.load(Ordering::Relaxed) > 0 {
                break;
            }
            if frames_at_done.is_none() && shared.output_done.load(Ordering::Acquire) {
                frames_at_done = Some(frames);
            }
            if frames_at_done.is_some_and(|f0| frames >= f0 + tail_frames(&shared)) {
                break;
            }
            if last_input.elapsed() > Duration::from_secs_f64(STALL_S) {
                faults.push(format!(
                    "{in_label}: no input for {STALL_S} s (device lost or sound server \
                     stopped) after {frames} frames"
                ));
                break;
            }
            if started.elapsed() > deadline {
                faults.push(format!(
                    "{out_label}: the stimulus did not finish playing within {:.1} s \
                     ({} of {n_stim} frames played)",
                    deadline.as_secs_f64(),
                    shared.frames_played.load(Ordering::Relaxed)
                ));
                break;
            }
            std::thread::sleep(Duration::from_millis(5));
        }
        drop(output_stream);
        drop(input_stream);
        // One line per error kind with its count (a lost device repeats its error).
        for (label, errors) in [(&in_label, &mut in_err_c), (&out_label, &mut out_err_c)] {
            let mut kinds: Vec<(String, u32)> = Vec::new();
            while let Ok(e) = errors.pop() {
                let kind = error_text(&e);
                match kinds.iter_mut().find(|(k, _)| *k == kind) {
                    Some((_, n)) => *n += 1,
                    None => kinds.push((kind, 1)),
                }
            }
            for (kind, n) in kinds {
                faults.push(format!("{label}: {kind} ({n}×)"));
            }
        }
        let overruns = shared.ring_overruns.load(Ordering::Relaxed);
        if overruns > 0 {
            faults.push(format!(
                "{in_label}: the input ring was full {overruns} time(s) (samples dropped)"
            ));
        }
        let xruns = shared.xruns.load(Ordering::Relaxed) + overruns;
        let n_frames = interleaved.len() / n_in.max(1);
        tracing::debug!(
            n_frames,
            frames_at_done,
            output_latency_ns = shared.output_latency_ns.load(Ordering::Relaxed),
            input_latency_ns = shared.input_latency_ns.load(Ordering::Relaxed),
            "recorded"
        );
        let channels = (0..n_in)
            .map(|c| (0..n_frames).map(|k| interleaved[k * n_in + c]).collect())
            .collect();
        Ok(RawRecording {
            channels,
            xruns,
            faults,
            guard_trip: shared.guard_trip(),
        })
    }

    /// The recording lag of stimulus sample 0 (see the module doc), or a fault message.
    fn align(&self, stimulus: &Stimulus, rec: &RawRecording) -> Result<i64, String> {
        let n_stim = stimulus.n_samples();
        let n_rec = rec.channels.first().map_or(0, Vec::len);
        let max_lag = n_rec.saturating_sub(n_stim / 2);
        if let (Some(li), Some(lo)) = (self.spec.loopback_input, self.spec.loopback_output) {
            let d = align::find_delay(&stimulus.channels[lo], &rec.channels[li], max_lag)
                .filter(|d| d.is_confident())
                .ok_or_else(|| {
                    format!(
                        "loopback input {} does not carry output {}'s stimulus (check the \
                         loopback cable and channel numbers)",
                        li + 1,
                        lo + 1
                    )
                })?;
            if d.inverted {
                return Err(format!(
                    "loopback input {} carries output {}'s stimulus inverted (check the \
                     loopback wiring)",
                    li + 1,
                    lo + 1
                ));
            }
            return Ok(d.lag_samples);
        }
        let mut sum = vec![0.0f64; max_lag + 1];
        let mut used = 0;
        for &(o, i) in &self.routes {
            let r = align::cross_correlation(&stimulus.channels[o], &rec.channels[i], max_lag);
            let Some(mut d) = align::peak_of(&r) else {
                continue;
            };
            d.coefficient = align::coefficient(
                &stimulus.channels[o],
                &rec.channels[i],
                &r,
                d.lag_samples as usize,
            );
            tracing::debug!(
                output = o,
                input = i,
                n_rec,
                max_lag,
                ?d,
                "route correlation"
            );
            if !d.is_confident() {
                continue;
            }
            let peak = r[d.lag_samples as usize].abs();
            for (s, v) in sum.iter_mut().zip(&r) {
                *s += v.abs() / peak;
            }
            used += 1;
        }
        if used == 0 {
            return Err(
                "no input carries the stimulus, so the capture cannot be aligned (check the \
                 wiring and channel numbers; without a loopback a dead unit and a dead rig \
                 look the same)"
                    .into(),
            );
        }
        align::peak_of(&sum)
            .map(|d| d.lag_samples)
            .ok_or_else(|| "cross-correlation is empty".into())
    }
}

/// Sweep segments for the loopback continuity and clock check: [`LOOPBACK_SEGMENTS`]
/// ranges of stimulus samples spread from where the sweep passes [`LOOPBACK_FROM_HZ`] to
/// where it passes a quarter of the sample rate (or its fade-out).
fn loopback_segments(stimulus: &Stimulus) -> Vec<(usize, usize)> {
    let sw = &stimulus.sweep;
    let fs = f64::from(stimulus.sample_rate_hz);
    let t0 = sw.time_at(LOOPBACK_FROM_HZ.max(sw.f1_hz));
    let a = sw.start_sample + (t0 * fs).round() as usize;
    // Up to fs/4: nearer Nyquist a fractional delay makes the correlation's side lobes as
    // high as its peak, so the segment's delay is ambiguous.
    let t1 = sw.time_at((fs / 4.0).min(sw.f2_hz));
    let b = (sw.start_sample + (t1 * fs).round() as usize)
        .min(sw.start_sample + sw.n_sweep_samples.saturating_sub(sw.fade_out_samples));
    align::spread_segments(a, b, LOOPBACK_SEGMENTS, LOOPBACK_SEGMENT_SAMPLES)
}

impl SoundcardRig {
    /// Continuity and clock drift of the loopback (module doc); faults found.
    fn check_loopback(
        &self,
        stimulus: &Stimulus,
        loopback: &[f32],
        lo: usize,
        lag: i64,
    ) -> Vec<String> {
        let segments = loopback_segments(stimulus);
        if segments.is_empty() {
            // Too short a sweep to check; the analysis still judges the capture.
            tracing::warn!("sweep too short for the loopback continuity and clock check");
            return Vec::new();
        }
        let delays = align::segment_delays(
            &stimulus.channels[lo],
            loopback,
            lag,
            &segments,
            DRIFT_SEARCH_SAMPLES,
        );
        let hz = |k: usize| {
            let sw = &stimulus.sweep;
            sw.frequency_at(
                (k as f64 - sw.start_sample as f64) / f64::from(stimulus.sample_rate_hz),
            )
        };
        let mut faults = Vec::new();
        let mut points = Vec::new();
        for (d, &(a, b)) in delays.iter().zip(&segments) {
            match d {
                Some(d) if hz(a) >= DRIFT_FROM_HZ => points.push(((a + b) as f64 / 2.0, *d)),
                Some(_) => {}
                None => faults.push(format!(
                    "loopback input {}: the sweep from {:.0} to {:.0} Hz did not arrive intact \
                     (a dropout or glitch in the device or sound server)",
                    self.spec.loopback_input.map_or(0, |i| i + 1),
                    hz(a),
                    hz(b)
                )),
            }
        }
        if !faults.is_empty() {
            return faults;
        }
        if let Some((ppm, residual)) = align::fit_drift(&points) {
            tracing::info!(
                drift_ppm = ppm,
                residual_samples = residual,
                "loopback check"
            );
            if residual > MAX_LOOPBACK_RESIDUAL_SAMPLES {
                faults.push(format!(
                    "loopback delay jumped by {residual:.1} samples during the sweep (samples \
                     lost or repeated)"
                ));
            }
            if self.separate_devices() && ppm.abs() > self.spec.max_clock_drift_ppm {
                faults.push(format!(
                    "clock drift between output {} and input {} is {ppm:.1} ppm, above the \
                     bound of {} ppm",
                    self.output.name, self.input.name, self.spec.max_clock_drift_ppm
                ));
            }
        }
        faults
    }
}

impl Rig for SoundcardRig {
    fn name(&self) -> &str {
        "soundcard"
    }

    fn play_and_capture(
        &mut self,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        if stimulus.sample_rate_hz != self.sample_rate_hz {
            return Err(bad(
                "stimulus",
                format!(
                    "expected the rate the devices were opened at ({} Hz), found {} Hz",
                    self.sample_rate_hz, stimulus.sample_rate_hz
                ),
            ));
        }
        let n_stim_out = stimulus.channels.len();
        if let Some(&(o, _)) = self.routes.iter().find(|(o, _)| *o >= n_stim_out) {
            return Err(bad(
                "routes",
                format!(
                    "expected outputs below {n_stim_out} (the stimulus), found {}",
                    o + 1
                ),
            ));
        }
        if let Some(lo) = self.spec.loopback_output {
            if !stimulus.driven_outputs.contains(&lo) {
                return Err(bad(
                    "loopback",
                    format!(
                        "expected the loopback output {} to carry the sweep, but the plan \
                         drives outputs {:?} (1-based)",
                        lo + 1,
                        stimulus
                            .driven_outputs
                            .iter()
                            .map(|o| o + 1)
                            .collect::<Vec<_>>()
                    ),
                ));
            }
        }
        let n_in = usize::from(self.input.config.channels);
        if n_inputs > n_in {
            return Err(bad(
                format!("input device {}", self.input.name),
                format!("expected {n_inputs} input channels, the stream has {n_in}"),
            ));
        }
        let rec = self.record_raw(&stimulus.channels, stimulus.n_samples())?;
        let n_stim = stimulus.n_samples();
        let mut faults = rec.faults.clone();
        let lag = if faults.is_empty() && rec.xruns == 0 {
            match self.align(stimulus, &rec) {
                Ok(lag) => Some(lag),
                Err(msg) => {
                    faults.push(msg);
                    None
                }
            }
        } else {
            // A broken recording is a retest whatever its alignment; still hand on what
            // was recorded (from the first sample) so the record shows it.
            None
        };
        if let (Some(lag), Some(li), Some(lo)) =
            (lag, self.spec.loopback_input, self.spec.loopback_output)
        {
            faults.extend(self.check_loopback(stimulus, &rec.channels[li], lo, lag));
        }
        let start = lag.unwrap_or(0).max(0) as usize;
        let channels: Vec<Vec<f32>> = rec
            .channels
            .iter()
            .map(|c| {
                let s = start.min(c.len());
                c[s..(s + n_stim).min(c.len())].to_vec()
            })
            .collect();
        if channels.first().is_some_and(|c| c.len() < n_stim) {
            faults.push(format!(
                "the recording holds {} samples after the stimulus start, {n_stim} needed",
                channels[0].len()
            ));
        }
        if let Some(lag) = lag {
            tracing::info!(
                device_latency_samples = lag,
                device_latency_ms = lag as f64 * 1e3 / f64::from(self.sample_rate_hz),
                "aligned"
            );
        }
        // In capture samples: the input frame less the samples removed by the alignment.
        let guard_trip = rec.guard_trip.clone().map(|mut t| {
            t.first_over_sample = t.first_over_sample.saturating_sub(start);
            t
        });
        Ok(Capture {
            sample_rate_hz: self.sample_rate_hz,
            channels,
            xruns: rec.xruns,
            faults,
            device_latency_samples: lag,
            guard_trip,
        })
    }

    fn play_raw(
        &mut self,
        outputs: &[Vec<f32>],
        sample_rate_hz: u32,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        if sample_rate_hz != self.sample_rate_hz {
            return Err(bad(
                "outputs",
                format!(
                    "expected the rate the devices were opened at ({} Hz), found {sample_rate_hz} Hz",
                    self.sample_rate_hz
                ),
            ));
        }
        let n_in = usize::from(self.input.config.channels);
        if n_inputs > n_in {
            return Err(bad(
                format!("input device {}", self.input.name),
                format!("expected {n_inputs} input channels, the stream has {n_in}"),
            ));
        }
        let n_frames = outputs.iter().map(Vec::len).max().unwrap_or(0);
        let rec = self.record_raw(outputs, n_frames)?;
        Ok(Capture {
            sample_rate_hz: self.sample_rate_hz,
            channels: rec.channels,
            xruns: rec.xruns,
            faults: rec.faults,
            device_latency_samples: None,
            guard_trip: rec.guard_trip,
        })
    }

    fn arm_guard(&mut self, guard: Option<Guard>) {
        self.guard = guard;
    }
}

/// One supported stream configuration range, for `tragus devices`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ConfigInfo {
    /// Channel count.
    pub channels: u16,
    /// Lowest supported rate, Hz.
    pub min_rate_hz: u32,
    /// Highest supported rate, Hz.
    pub max_rate_hz: u32,
    /// Sample format (`i16`, `f32`, ...).
    pub sample_format: String,
    /// Buffer size range in frames, when the device tells.
    pub buffer_frames: Option<(u32, u32)>,
}

/// One device of a host, for `tragus devices`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DeviceInfo {
    /// Device id (what `--output-device`/`--input-device` take; the display name works too).
    pub id: String,
    /// Display name.
    pub name: String,
    /// The host's default output device.
    pub default_output: bool,
    /// The host's default input device.
    pub default_input: bool,
    /// Most output channels of any configuration (0: not an output).
    pub output_channels: u16,
    /// Most input channels of any configuration (0: not an input).
    pub input_channels: u16,
    /// Output configurations.
    pub output_configs: Vec<ConfigInfo>,
    /// Input configurations.
    pub input_configs: Vec<ConfigInfo>,
}

/// One host and its devices, for `tragus devices`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct HostInfo {
    /// Host name (what `--host` takes).
    pub name: String,
    /// The default host.
    pub default: bool,
    /// Devices; empty with `error` set when the host could not list them.
    pub devices: Vec<DeviceInfo>,
    /// Why the host or its devices could not be read, if so.
    pub error: Option<String>,
}

fn config_infos(configs: Result<Vec<SupportedStreamConfigRange>, cpal::Error>) -> Vec<ConfigInfo> {
    configs
        .unwrap_or_default()
        .into_iter()
        .map(|c| ConfigInfo {
            channels: c.channels(),
            min_rate_hz: c.min_sample_rate(),
            max_rate_hz: c.max_sample_rate(),
            sample_format: c.sample_format().to_string(),
            buffer_frames: match c.buffer_size() {
                cpal::SupportedBufferSize::Range { min, max } => Some((*min, *max)),
                _ => None,
            },
        })
        .collect()
}

/// Every available host with its devices, channel counts, rates, formats and defaults.
pub fn list_devices() -> Vec<HostInfo> {
    let default_host = cpal::default_host().id();
    cpal::available_hosts()
        .into_iter()
        .map(|id| {
            let mut info = HostInfo {
                name: id.to_string(),
                default: id == default_host,
                devices: Vec::new(),
                error: None,
            };
            let host = match cpal::host_from_id(id) {
                Ok(h) => h,
                Err(e) => {
                    info.error = Some(e.to_string());
                    return info;
                }
            };
            let def_out = host.default_output_device().map(|d| device_names(&d).0);
            let def_in = host.default_input_device().map(|d| device_names(&d).0);
            match host.devices() {
                Ok(devices) => {
                    for d in devices {
                        let (id, name) = device_names(&d);
                        let output_configs =
                            config_infos(d.supported_output_configs().map(|c| c.collect()));
                        let input_configs =
                            config_infos(d.supported_input_configs().map(|c| c.collect()));
                        info.devices.push(DeviceInfo {
                            default_output: def_out.as_deref() == Some(id.as_str()),
                            default_input: def_in.as_deref() == Some(id.as_str()),
                            output_channels: output_configs
                                .iter()
                                .map(|c| c.channels)
                                .max()
                                .unwrap_or(0),
                            input_channels: input_configs
                                .iter()
                                .map(|c| c.channels)
                                .max()
                                .unwrap_or(0),
                            id,
                            name,
                            output_configs,
                            input_configs,
                        });
                    }
                }
                Err(e) => info.error = Some(e.to_string()),
            }
            info
        })
        .collect()
}
