//! Station keys and signatures (Ed25519, RFC 8032): what signs a store's rows and what an
//! auditor checks them with.
//!
//! A station holds one private key ([`StationKey`]); the auditor holds a [`Keyring`] of public
//! keys with the station each belongs to and when it is valid. Every row the store appends
//! (records, safety events, exposures) and every checkpoint is signed over its hash, through
//! [`signature_message`], so a signature cannot be moved from one table or purpose to another.
//!
//! Files: the station's private key file (`tragus-station-key/1`, [`StationKey::load`],
//! [`StationKey::write_new`]) and the auditor's keyring (`tragus-keyring/1`,
//! [`Keyring::load`], [`Keyring::append_to_file`]); [`new_station_key`] makes a key, its
//! keyring entry and the station file's `signing_key:` line (`tragus keys new`).

mod error;
mod fields;
mod keyfile;
mod keyring;
mod provision;

pub use error::KeyError;
pub use fields::format_time_utc;
pub use keyfile::{KEY_FILE_FORMAT, KEY_FILE_HEADER};
pub use keyring::{KEYRING_FORMAT, KEYRING_HEADER};
pub use provision::{new_station_key, NewKey, NewKeyRequest, MAX_VALID_DAYS};

use ed25519_dalek::{Signature, Signer, SigningKey, Verifier, VerifyingKey};
use time::OffsetDateTime;

/// First line of every signed message; the `v1` changes only with the message form.
pub const SIGNATURE_HEADER: &[u8] = b"tragus-signature-v1\n";

/// The bytes a station signs for the row (or checkpoint) whose SHA-256 is `hash_hex`:
/// `"tragus-signature-v1" LF PURPOSE LF HASH_HEX` (no trailing LF), where PURPOSE is the table
/// name (`records`, `safety_events`, `exposures`) or `checkpoint`.
pub fn signature_message(purpose: &str, hash_hex: &str) -> Vec<u8> {
    let mut m = Vec::with_capacity(SIGNATURE_HEADER.len() + purpose.len() + 1 + hash_hex.len());
    m.extend_from_slice(SIGNATURE_HEADER);
    m.extend_from_slice(purpose.as_bytes());
    m.push(b'\n');
    m.extend_from_slice(hash_hex.as_bytes());
    m
}

/// Key id of a public key: the first 16 lowercase hex digits of the SHA-256 of its 32 bytes.
pub fn key_id_of(public_key: &[u8; 32]) -> String {
    crate::digest::sha256_hex(public_key)[..16].to_string()
}

/// A station's private signing key, with the station it belongs to.
#[derive(Clone)]
pub struct StationKey {
    station: String,
    key_id: String,
    signing: SigningKey,
}

impl std::fmt::Debug for StationKey {
    // Never print the secret.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("StationKey")
            .field("station", &self.station)
            .field("key_id", &self.key_id)
            .finish_non_exhaustive()
    }
}

impl StationKey {
    /// The key made from a 32-byte Ed25519 secret (RFC 8032 section 5.1.5) for `station`.
    pub fn from_secret(station: &str, secret: &[u8; 32]) -> StationKey {
        let signing = SigningKey::from_bytes(secret);
        let key_id = key_id_of(&signing.verifying_key().to_bytes());
        StationKey {
            station: station.to_string(),
            key_id,
            signing,
        }
    }

    /// The station this key signs for.
    pub fn station(&self) -> &str {
        &self.station
    }

    /// The key id (see [`key_id_of`]).
    pub fn key_id(&self) -> &str {
        &self.key_id
    }

    /// The 32-byte public key.
    pub fn public_key(&self) -> [u8; 32] {
        self.signing.verifying_key().to_bytes()
    }

    /// Ed25519 signature of `message` (64 bytes).
    pub fn sign(&self, message: &[u8]) -> [u8; 64] {
        self.signing.sign(message).to_bytes()
    }

    /// Signature over a row's hash ([`signature_message`]).
    pub fn sign_hash(&self, purpose: &str, hash_hex: &str) -> [u8; 64] {
        self.sign(&signature_message(purpose, hash_hex))
    }
}

/// One public key an auditor trusts: whose it is and when.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KeyringEntry {
    /// Key id ([`key_id_of`] of `public_key`).
    pub key_id: String,
    /// Station id the key signs for.
    pub station: String,
    /// The 32-byte Ed25519 public key.
    pub public_key: [u8; 32],
    /// First instant the key may sign (inclusive).
    pub valid_from: OffsetDateTime,
    /// Instant from which the key may no longer sign (exclusive); `None`: no end.
    pub valid_until: Option<OffsetDateTime>,
}

/// Why a signature does not count.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SignatureProblem {
    /// The row has no signature or no key id.
    Unsigned,
    /// The key id is not in the keyring.
    UnknownKey {
        /// The key id named by the row.
        key_id: String,
    },
    /// The key belongs to another station.
    WrongStation {
        /// The key id.
        key_id: String,
        /// The station the keyring gives for it.
        key_station: String,
        /// The station the row names.
        row_station: String,
    },
    /// The row's time is outside the key's validity.
    NotValidAt {
        /// The key id.
        key_id: String,
        /// The row's time, RFC 3339.
        at: String,
    },
    /// The signature is not 64 bytes or does not verify.
    Mismatch {
        /// The key id.
        key_id: String,
    },
}

impl std::fmt::Display for SignatureProblem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SignatureProblem::Unsigned => write!(f, "not signed"),
            SignatureProblem::UnknownKey { key_id } => {
                write!(f, "signed by key {key_id}, which is not in the keyring")
            }
            SignatureProblem::WrongStation {
                key_id,
                key_station,
                row_station,
            } => write!(
                f,
                "signed by key {key_id} of station {key_station}, but the row is from station \
                 {row_station}"
            ),
            SignatureProblem::NotValidAt { key_id, at } => {
                write!(f, "signed by key {key_id}, which was not valid at {at}")
            }
            SignatureProblem::Mismatch { key_id } => {
                write!(f, "the signature does not verify with key {key_id}")
            }
        }
    }
}

/// The public keys an auditor trusts.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Keyring {
    /// The keys, in file order.
    pub entries: Vec<KeyringEntry>,
}

impl Keyring {
    /// Check a row's signature: `key_id` and `signature` as stored (either may be missing),
    /// the station and time the row names, and the message that was signed.
    pub fn check(
        &self,
        key_id: Option<&str>,
        signature: Option<&[u8]>,
        station: &str,
        at: OffsetDateTime,
        message: &[u8],
    ) -> Result<(), SignatureProblem> {
        let (Some(key_id), Some(signature)) = (key_id, signature) else {
            return Err(SignatureProblem::Unsigned);
        };
        let Some(entry) = self.entries.iter().find(|e| e.key_id == key_id) else {
            return Err(SignatureProblem::UnknownKey {
                key_id: key_id.to_string(),
            });
        };
        if entry.station != station {
            return Err(SignatureProblem::WrongStation {
                key_id: key_id.to_string(),
                key_station: entry.station.clone(),
                row_station: station.to_string(),
            });
        }
        if at < entry.valid_from || entry.valid_until.is_some_and(|u| at >= u) {
            let at = at
                .format(&time::format_description::well_known::Rfc3339)
                .unwrap_or_default();
            return Err(SignatureProblem::NotValidAt {
                key_id: key_id.to_string(),
                at,
            });
        }
        let mismatch = || SignatureProblem::Mismatch {
            key_id: key_id.to_string(),
        };
        let sig = <[u8; 64]>::try_from(signature).map_err(|_| mismatch())?;
        let vk = VerifyingKey::from_bytes(&entry.public_key).map_err(|_| mismatch())?;
        vk.verify(message, &Signature::from_bytes(&sig))
            .map_err(|_| mismatch())
    }
}
