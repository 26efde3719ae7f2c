//! Digests: the one SHA-256 spelling every identity in tragus uses (plans, models,
//! calibrations, records, captures).

use sha2::{Digest, Sha256};

/// SHA-256 (FIPS 180-4) of `bytes` as 64 lowercase hex digits.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}
