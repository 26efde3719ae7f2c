//! The sound-card settings as plain data: where and how the sound-card rig plays and
//! records. Always compiled (no audio-backend types), so that station files can be read and
//! validated on any machine; the station configuration ([`crate::station`]) produces it.

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
    /// 0-based inputs recorded besides the routes' and the loopback's: the drive monitors
    /// (hearing safety watches them; the analysis does not read them).
    pub extra_inputs: Vec<usize>,
    /// Above this estimated clock drift (ppm) between separate input and output devices the
    /// measurement is a retest.
    pub max_clock_drift_ppm: f64,
}

impl SoundcardSpec {
    /// Default drift bound, ppm. 20 ppm over a 1 s sweep is 20 µs, one sample at 48 kHz:
    /// beyond that the deconvolved impulse response smears at high frequencies. Consumer
    /// converter crystals are specified to some tens of ppm each (common practice, from
    /// memory), so two unlocked devices can exceed it and are then told apart from locked
    /// ones.
    pub const DEFAULT_MAX_CLOCK_DRIFT_PPM: f64 = 20.0;
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
            extra_inputs: Vec::new(),
            max_clock_drift_ppm: Self::DEFAULT_MAX_CLOCK_DRIFT_PPM,
        }
    }
}
