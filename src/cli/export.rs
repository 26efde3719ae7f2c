//! `tragus export`: a store's records as CSV or JSON Lines (written by
//! [`crate::report::export`]), to `--out` (written through a temporary file and renamed)
//! or to stdout. Exit 0 when written, 2 on bad input.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;

use super::report::{open_existing, SelectionArgs};
use super::{stdout_bytes, Exit, EXIT_PASS};
use crate::report::export::{export, ExportFormat};

/// Arguments of `export`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Which records.
    #[command(flatten)]
    pub select: SelectionArgs,
    /// `csv` (RFC 4180, one row per record and check) or `jsonl` (one JSON object per
    /// record: its columns and its parsed result).
    #[arg(long, value_name = "FORMAT", value_parser = parse_format)]
    pub format: ExportFormat,
    /// The file to write; stdout when absent or `-`.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

fn parse_format(s: &str) -> Result<ExportFormat, String> {
    match s {
        "csv" => Ok(ExportFormat::Csv),
        "jsonl" => Ok(ExportFormat::Jsonl),
        _ => Err(format!("expected csv or jsonl, found {s:?}")),
    }
}

/// Standard output through the CLI's one writer (a closed pipe ends the output quietly).
struct Stdout;

impl Write for Stdout {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        stdout_bytes(buf)?;
        Ok(buf.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// Stream into a temporary sibling of `path`, then rename it into place, so a failure
/// never leaves half an export under the final name.
fn to_file(
    path: &Path,
    write: impl FnOnce(&mut dyn Write) -> Result<(), Exit>,
) -> Result<(), Exit> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "export".into());
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let cannot = |e: std::io::Error| {
        Exit::bad_input(anyhow::Error::new(e).context(format!("{}: cannot write", path.display())))
    };
    let result = (|| {
        let file = std::fs::File::create(&tmp).map_err(cannot)?;
        let mut w = std::io::BufWriter::with_capacity(1 << 16, file);
        write(&mut w)?;
        let file = w.into_inner().map_err(|e| cannot(e.into_error()))?;
        file.sync_all().map_err(cannot)?;
        std::fs::rename(&tmp, path).map_err(cannot)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let store = open_existing(&args.select.store)?;
    let selection = args.select.selection();
    let run_export = |out: &mut dyn Write| -> Result<(), Exit> {
        export(&store, &selection, args.format, out)
            .map(|_| ())
            .context("export")
            .map_err(Exit::bad_input)
    };
    match args.out.as_deref() {
        None => run_with_stdout(run_export)?,
        Some(p) if p.as_os_str() == "-" => run_with_stdout(run_export)?,
        Some(path) => to_file(path, run_export)?,
    }
    Ok(EXIT_PASS)
}

fn run_with_stdout(write: impl FnOnce(&mut dyn Write) -> Result<(), Exit>) -> Result<(), Exit> {
    let mut w = std::io::BufWriter::with_capacity(1 << 16, Stdout);
    write(&mut w)?;
    w.flush().context("stdout").map_err(Exit::bad_input)
}
