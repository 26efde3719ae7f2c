//! `tragus analyze PLAN --capture FILE.wav [--drive-gain-db G,…] [--json OUT]`: judge a
//! recorded capture; `tragus analyze --store DIR --record ID [--json OUT]`: judge a stored
//! record's capture again from the archive ([`crate::bench::reanalyze`]) and compare.

use super::{Exit, JsonOut, Output, EXIT_BAD_INPUT, EXIT_FAIL, EXIT_PASS};
use crate::bench::reanalyze::{reanalyze, Reanalysis, TOLERANCE_DB};
use crate::rig::recording::RecordingRig;
use crate::rig::Rig;
use std::path::PathBuf;

/// Arguments of `analyze`.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "With --store and --record: exit 0 when the record is reproduced (same \
    verdicts, every margin within 1e-6 dB), 1 when it is not, 2 when it cannot be re-analysed."
)]
pub struct Args {
    /// The test plan whose stimulus was recorded.
    #[arg(
        value_name = "PLAN",
        required_unless_present = "record",
        conflicts_with = "record"
    )]
    pub plan: Option<PathBuf>,
    /// The capture: a WAV with the plan's input channels, at the plan's rate, sample 0
    /// aligned with stimulus sample 0.
    #[arg(long, value_name = "FILE.wav", required_unless_present = "record")]
    pub capture: Option<PathBuf>,
    /// Serial number to put in the result.
    #[arg(long, default_value = "")]
    pub serial: String,
    /// The station's own fixture model: replaces the plan's `correction.fixture` for every
    /// corrected channel (the plan's `fixture_tap` must exist in it).
    #[arg(long, value_name = "MODEL.yaml")]
    pub fixture: Option<PathBuf>,
    /// The gain the sweep was played at relative to the plan, dB, per plan channel (one
    /// value: every channel), as hearing safety scaled it down (`playback_json` of a
    /// record): the capture's levels are brought back to the plan's.
    #[arg(
        long,
        value_name = "G[,G...]",
        value_delimiter = ',',
        allow_hyphen_values = true,
        conflicts_with = "record"
    )]
    pub drive_gain_db: Vec<f64>,
    /// The store holding the record to re-analyse.
    #[arg(long, value_name = "DIR", requires = "record")]
    pub store: Option<PathBuf>,
    /// Re-analyse this record of `--store` from its archived plan, station file, capture
    /// and recorded gains, and compare with its stored result.
    #[arg(
        long,
        value_name = "ID",
        requires = "store",
        conflicts_with_all = ["capture", "serial", "fixture"]
    )]
    pub record: Option<i64>,
    /// Write the result JSON here (`-` for stdout: human output then goes nowhere). With
    /// `--record`, the re-analysed result with a `reproduction` object added.
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

pub(crate) fn run(args: Args, out: Output) -> Result<i32, Exit> {
    if let (Some(store), Some(id)) = (&args.store, args.record) {
        return run_record(store, id, args.json.as_ref(), out);
    }
    let (Some(plan), Some(capture)) = (&args.plan, &args.capture) else {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "expected PLAN --capture FILE.wav, or --store DIR --record ID"
        )));
    };
    let mut prep = crate::bench::Prepared::new(plan, args.fixture.as_deref())?;
    let n = prep.plan.channels.len();
    let gains = match args.drive_gain_db.as_slice() {
        [] => Vec::new(),
        [g] => vec![*g; n],
        g if g.len() == n => g.to_vec(),
        g => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--drive-gain-db: expected one value or {n} (one per plan channel), found {}",
                g.len()
            )))
        }
    };
    if let Some(g) = gains.iter().find(|g| !g.is_finite() || g.abs() > 200.0) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--drive-gain-db: expected gains in dB between -200 and 200, found {g}"
        )));
    }
    let mut rig = RecordingRig::open(capture).map_err(Exit::from_rig)?;
    let capture = rig
        .play_and_capture(&prep.stimulus, prep.plan.n_inputs())
        .map_err(Exit::from_rig)?;
    let result = prep.judge_capture(&capture, &args.serial, rig.name(), None, &gains)?;
    if let Some(j) = &args.json {
        j.write(&result).map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        out!("{}", crate::report::render_human(&result, out.color));
    }
    Ok(result.verdict.exit_code())
}

fn run_record(
    dir: &std::path::Path,
    id: i64,
    json: Option<&JsonOut>,
    out: Output,
) -> Result<i32, Exit> {
    let store = super::show::open_store(dir)?;
    let record = store.get(id).map_err(Exit::bad_input)?.ok_or_else(|| {
        Exit::bad_input(anyhow::anyhow!(
            "{}: expected a record #{id}, found none",
            dir.display()
        ))
    })?;
    let re = reanalyze(&store, &record).map_err(|e| Exit {
        code: EXIT_BAD_INPUT,
        error: anyhow::Error::new(e),
    })?;
    if let Some(j) = json {
        j.write(&document(&re)).map_err(Exit::bad_input)?;
    }
    if !json.is_some_and(JsonOut::is_stdout) {
        out!("{}", crate::report::render_human(&re.result, out.color));
        outln!("{}", summary(&re));
    }
    Ok(if re.comparison.reproduced() {
        EXIT_PASS
    } else {
        EXIT_FAIL
    })
}

/// The re-analysed result with the comparison as `reproduction`.
fn document(re: &Reanalysis) -> serde_json::Value {
    let mut doc = serde_json::to_value(&re.result).unwrap_or_default();
    if let Some(map) = doc.as_object_mut() {
        map.insert(
            "reproduction".into(),
            serde_json::json!({
                "record_id": re.record_id,
                "judged": re.judged,
                "carried_over_checks": re.carried_over,
                "tolerance_db": TOLERANCE_DB,
                "reproduced": re.comparison.reproduced(),
                "comparison": re.comparison,
            }),
        );
    }
    doc
}

/// `reproduced: …` or the differences, one per line.
fn summary(re: &Reanalysis) -> String {
    let c = &re.comparison;
    let mut s = String::new();
    if !re.judged {
        s.push_str(&format!(
            "record #{}: the sweep was abandoned for hearing safety; nothing was measured, so \
             nothing is re-measured (not judged)\n",
            re.record_id
        ));
    }
    if re.carried_over > 0 {
        s.push_str(&format!(
            "{} listening check(s) carried over from the record (operator answers)\n",
            re.carried_over
        ));
    }
    if c.reproduced() {
        s.push_str(&format!(
            "reproduced: verdict {}, {} checks, max |Δmargin| = {:.1e} dB",
            c.verdict.word(),
            c.n_checks,
            c.max_margin_delta_db
        ));
    } else {
        s.push_str(&format!(
            "NOT reproduced: record #{} ({} difference(s), tolerance {TOLERANCE_DB:e} dB):",
            re.record_id,
            c.differences.len()
        ));
        for d in &c.differences {
            s.push_str(&format!("\n  {d}"));
        }
    }
    s
}
