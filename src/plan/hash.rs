//! The plan's SHA-256 over a canonical form.
