//! Stage one of plan loading: serde structs that mirror the YAML (no I/O, no validation).
