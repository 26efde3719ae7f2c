//! The sound-card settings as plain data (no cpal types), so that the station configuration
//! can produce them in every build, with or without the `soundcard` feature.

/// Where and how the sound-card rig plays and records (station settings, plain data).
#[derive(Debug, Clone, PartialEq)]
pub struct SoundcardSpec {
    /// cpal host name (`alsa`, `jack`, ...); `None` = the default host.
    pub host: Option<String>,
    /// Output device name; `None` = the host's default output device.
    pub output_device: Option<String>,
    /// Input device name; `None` = the host's default input device.
    pub input_device: Option<String>,
    /// Buffer size in frames; `None` = the device default.
    pub buffer_frames: Option<u32>,
    /// 0-based input channel that carries the electrical loopback of the drive (latency and
    /// clock reference), if the station has one; it replays output `loopback_output`.
    pub loopback_input: Option<usize>,
    /// 0-based output channel whose drive the loopback input carries.
    pub loopback_output: Option<usize>,
    /// Above this estimated clock drift (ppm) between separate input and output devices the
    /// measurement is a retest.
    pub max_clock_drift_ppm: f64,
}

impl SoundcardSpec {
    /// Default drift bound, ppm. Two free-running crystal clocks of ±50 ppm each (a common
    /// tolerance for audio-grade oscillators, common practice) differ by up to 100 ppm;
    /// more than that means a clock is out of tolerance or a converter resamples. At 100
    /// ppm a 2 s sweep ends 0.2 ms (9.6 samples at 48 kHz) later than it started, which
    /// smears the impulse response and bends the phase at high frequencies.
    pub const DEFAULT_MAX_CLOCK_DRIFT_PPM: f64 = 100.0;
}

impl Default for SoundcardSpec {
    /// Default host and devices, device buffer size, no loopback, the default drift bound.
    fn default() -> Self {
        SoundcardSpec {
            host: None,
            output_device: None,
            input_device: None,
            buffer_frames: None,
            loopback_input: None,
            loopback_output: None,
            max_clock_drift_ppm: Self::DEFAULT_MAX_CLOCK_DRIFT_PPM,
        }
    }
}
