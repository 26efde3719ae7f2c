//! The exact inputs of a bench, as the store archives them with every record: the plan with
//! every file it read (limit CSVs, models), the station file with its fixture model, and the
//! calibration file (see [`crate::store::InputBundle`] for the form).

use super::BenchError;
use crate::station::Station;
use crate::store::InputBundle;
use std::path::{Path, PathBuf};

/// The archived inputs of one bench: each as a bundle, with the role it plays.
#[derive(Debug, Clone, Default)]
pub struct Inputs {
    /// `(role, bundle)`: `plan`, `station`, `calibration`.
    pub bundles: Vec<(String, InputBundle)>,
}

impl Inputs {
    /// The plan loaded from `plan` with the files read meanwhile; `fixture` is the model
    /// given to replace the plan's (`--fixture`), which those reads include.
    pub fn add_plan(
        &mut self,
        plan: &Path,
        reads: &[(PathBuf, Vec<u8>)],
        fixture: Option<&Path>,
    ) -> Result<(), BenchError> {
        let options: Vec<(&str, &Path)> = fixture.map(|f| ("fixture", f)).into_iter().collect();
        let b = InputBundle::from_files("plan", plan, reads, &options).map_err(not_archived)?;
        self.bundles.push(("plan".into(), b));
        Ok(())
    }

    /// The station file (read again, with its fixture model, and checked against the hash
    /// taken when it was loaded: a file changed meanwhile is refused).
    pub fn add_station(&mut self, station: &Station) -> Result<(), BenchError> {
        let (loaded, reads) =
            crate::config::recording_reads(|| crate::station::load_station(&station.source));
        let loaded = loaded.map_err(|e| BenchError::BadInput(Box::new(e)))?;
        if loaded.sha256 != station.sha256 {
            return Err(BenchError::bad_input(format!(
                "{}: the station file changed while the bench was being set up; start again",
                station.source.display()
            )));
        }
        let b = InputBundle::from_files("station", &station.source, &reads, &[])
            .map_err(not_archived)?;
        self.bundles.push(("station".into(), b));
        Ok(())
    }

    /// The calibration file read from `path` (the reads of the calibration decision).
    pub fn add_calibration(
        &mut self,
        path: &Path,
        reads: &[(PathBuf, Vec<u8>)],
    ) -> Result<(), BenchError> {
        let b = InputBundle::from_files("calibration", path, reads, &[]).map_err(not_archived)?;
        self.bundles.push(("calibration".into(), b));
        Ok(())
    }

    /// The record's `inputs_json`: role → SHA-256 of the archived bundle, keys sorted.
    pub fn links_json(&self) -> String {
        let map: std::collections::BTreeMap<&str, String> = self
            .bundles
            .iter()
            .map(|(role, b)| (role.as_str(), b.sha256()))
            .collect();
        serde_json::to_string(&map).unwrap_or_else(|_| "{}".into())
    }

    /// Every bundle's bytes, to hand to the append.
    pub fn archive_bytes(&self) -> Vec<Vec<u8>> {
        self.bundles.iter().map(|(_, b)| b.to_bytes()).collect()
    }
}

fn not_archived(e: String) -> BenchError {
    BenchError::bad_input(format!("cannot archive the inputs: {e}"))
}
