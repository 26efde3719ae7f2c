//! Reports: human-readable tables of a unit result.
