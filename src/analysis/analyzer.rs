//! The analyzer (stub).
/// Analyzer (stub).
pub struct Analyzer;
/// Analysis error (stub).
#[derive(Debug, thiserror::Error)]
#[error("analysis")]
pub struct AnalysisError;
