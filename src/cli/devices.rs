//! `tragus devices [--json]`: the audio hosts and devices the sound-card rig can use.

use super::{Exit, JsonOut};

/// Arguments of `devices`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Write the list as JSON here (`-` for stdout) instead of the human listing.
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

#[cfg(feature = "soundcard")]
pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    use crate::rig::soundcard::{list_devices, ConfigInfo};
    let hosts = list_devices();
    if let Some(j) = &args.json {
        j.write(&hosts).map_err(Exit::bad_input)?;
        if j.is_stdout() {
            return Ok(super::EXIT_PASS);
        }
    }
    let summary = |configs: &[ConfigInfo]| -> String {
        let mut rates: Vec<String> = configs
            .iter()
            .map(|c| {
                if c.min_rate_hz == c.max_rate_hz {
                    format!("{}", c.min_rate_hz)
                } else {
                    format!("{}–{}", c.min_rate_hz, c.max_rate_hz)
                }
            })
            .collect();
        rates.sort();
        rates.dedup();
        let mut formats: Vec<String> = configs.iter().map(|c| c.sample_format.clone()).collect();
        formats.sort();
        formats.dedup();
        format!(
            "rates {} Hz; formats {}",
            rates.join(", "),
            formats.join(", ")
        )
    };
    for h in &hosts {
        outln!(
            "host {}{}",
            h.name,
            if h.default { " (default)" } else { "" }
        );
        if let Some(e) = &h.error {
            outln!("  cannot list devices: {e}");
        }
        if h.devices.is_empty() && h.error.is_none() {
            outln!("  no devices");
        }
        for d in &h.devices {
            let mut marks = Vec::new();
            if d.default_output {
                marks.push("default output");
            }
            if d.default_input {
                marks.push("default input");
            }
            let marks = if marks.is_empty() {
                String::new()
            } else {
                format!(" [{}]", marks.join(", "))
            };
            if d.id == d.name {
                outln!("  {}{marks}", d.id);
            } else {
                outln!("  {} ({}){marks}", d.id, d.name);
            }
            if d.output_channels > 0 {
                outln!(
                    "    output: up to {} channel(s); {}",
                    d.output_channels,
                    summary(&d.output_configs)
                );
            }
            if d.input_channels > 0 {
                outln!(
                    "    input:  up to {} channel(s); {}",
                    d.input_channels,
                    summary(&d.input_configs)
                );
            }
        }
    }
    Ok(super::EXIT_PASS)
}

#[cfg(not(feature = "soundcard"))]
pub(crate) fn run(_args: Args) -> Result<i32, Exit> {
    Err(Exit::bad_input(anyhow::anyhow!("{}", NOT_BUILT)))
}

#[cfg(not(feature = "soundcard"))]
pub(crate) use crate::rig::SOUNDCARD_NOT_BUILT as NOT_BUILT;
