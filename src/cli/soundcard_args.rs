//! The sound-card options shared by `run`, `station` and `calibrate mic|drive`: one clap
//! struct flattened into each, so the flags, their help and their precedence over the
//! station file's `audio:` settings are the same everywhere.

use crate::rig::SoundcardSpec;
use crate::station::Station;

/// Sound-card options; each one given wins over the station file's `audio:` setting.
#[derive(Debug, Clone, Default, clap::Args)]
#[command(next_help_heading = "Sound card (override the station file's audio settings)")]
pub struct SoundcardArgs {
    /// cpal host (`alsa`, `jack`, ...); default: the station's, else the default host.
    #[arg(long, value_name = "HOST")]
    pub host: Option<String>,
    /// Output device (id or name, see `tragus devices`); default: the station's, else the
    /// host's default output.
    #[arg(long, value_name = "DEVICE")]
    pub output_device: Option<String>,
    /// Input device; default: the station's, else the host's default input.
    #[arg(long, value_name = "DEVICE")]
    pub input_device: Option<String>,
    /// Buffer size, frames; default: the station's, else the device's.
    #[arg(long, value_name = "FRAMES")]
    pub buffer_frames: Option<u32>,
    /// Input channel (1-based) wired back from `--loopback-output` (latency and clock
    /// reference of a measurement).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..), requires = "loopback_output")]
    pub loopback_input: Option<u16>,
    /// Output channel (1-based) the loopback input replays.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..), requires = "loopback_input")]
    pub loopback_output: Option<u16>,
}

impl SoundcardArgs {
    /// The station's sound-card settings (the defaults without a station), with every
    /// option given here replacing the station's value.
    pub fn spec_for(&self, station: Option<&Station>) -> SoundcardSpec {
        let mut spec = station.map(|s| s.soundcard.clone()).unwrap_or_default();
        if let Some(h) = &self.host {
            spec.host = Some(h.clone());
        }
        if let Some(d) = &self.output_device {
            spec.output_device = Some(d.clone());
        }
        if let Some(d) = &self.input_device {
            spec.input_device = Some(d.clone());
        }
        if let Some(b) = self.buffer_frames {
            spec.buffer_frames = Some(b);
        }
        if let (Some(i), Some(o)) = (self.loopback_input, self.loopback_output) {
            spec.loopback_input = Some(usize::from(i) - 1);
            spec.loopback_output = Some(usize::from(o) - 1);
        }
        spec
    }
}
