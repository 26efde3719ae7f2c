//! The one rule for a unit's serial number, for every way one enters: `run --serial`,
//! a line scanned into `station`, a `station --sim-unit SERIAL=KIND`.
//!
//! A serial is 1 to [`MAX_SERIAL_CHARS`] characters, each an ASCII letter, an ASCII digit
//! or one of [`SERIAL_PUNCTUATION`] (`-` `_` `.` `/` `+`), with at least one letter or
//! digit. So no spaces (leading, trailing or inside), no control characters, no
//! bidirectional controls and nothing outside ASCII: a serial is hashed into the record
//! chain byte for byte and shown on screens and in audits, where an invisible or reordering
//! character would make two different records look like the same unit.
//!
//! A foundation module: it uses nothing else from the crate, so any layer may call it.

/// Longest serial number accepted, characters (barcode serials are short; longer input is
/// a scanner or keyboard accident).
pub const MAX_SERIAL_CHARS: usize = 64;

/// The characters a serial may hold besides ASCII letters and digits.
pub const SERIAL_PUNCTUATION: &str = "-_./+";

/// The Unicode bidirectional formatting characters (Unicode Standard Annex #9): embeddings
/// and overrides U+202A–U+202E, isolates U+2066–U+2069, the marks U+200E, U+200F and the
/// Arabic letter mark U+061C. Named apart from other refused characters because they
/// reorder how the text around them is displayed.
pub const BIDI_CONTROLS: [char; 12] = [
    '\u{202A}', '\u{202B}', '\u{202C}', '\u{202D}', '\u{202E}', '\u{2066}', '\u{2067}', '\u{2068}',
    '\u{2069}', '\u{200E}', '\u{200F}', '\u{061C}',
];

/// Why a text is not a serial number. Messages never repeat a refused character as itself
/// (a control or bidirectional character would garble the message): they give its code
/// point and its 1-based position.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum SerialError {
    /// Nothing was given.
    #[error("expected a serial number, found an empty string")]
    Empty,
    /// More than [`MAX_SERIAL_CHARS`] characters.
    #[error("expected a serial number of at most {max} characters, found {found}")]
    TooLong {
        /// [`MAX_SERIAL_CHARS`].
        max: usize,
        /// How many characters were given.
        found: usize,
    },
    /// A space (U+0020) anywhere, leading and trailing included.
    #[error(
        "expected letters, digits and {SERIAL_PUNCTUATION} only, found a space at character \
         {position}"
    )]
    Space {
        /// 1-based position in characters.
        position: usize,
    },
    /// A control character (Unicode category Cc: C0, DEL, C1).
    #[error(
        "expected letters, digits and {SERIAL_PUNCTUATION} only, found the control character \
         {} at character {position}", code_point(*.found)
    )]
    Control {
        /// 1-based position in characters.
        position: usize,
        /// The character.
        found: char,
    },
    /// One of [`BIDI_CONTROLS`].
    #[error(
        "expected letters, digits and {SERIAL_PUNCTUATION} only, found the bidirectional \
         control {} at character {position} (it reorders how text is displayed)",
        code_point(*.found)
    )]
    Bidi {
        /// 1-based position in characters.
        position: usize,
        /// The character.
        found: char,
    },
    /// Any other character outside the allowed set.
    #[error(
        "expected letters, digits and {SERIAL_PUNCTUATION} only, found {} at character \
         {position}", describe(*.found)
    )]
    Character {
        /// 1-based position in characters.
        position: usize,
        /// The character.
        found: char,
    },
    /// Only punctuation (`---`): no letter or digit identifies a unit.
    #[error("expected at least one letter or digit in a serial number, found only {found:?}")]
    NoLetterOrDigit {
        /// The text (punctuation only, so safe to show).
        found: String,
    },
}

/// `U+XXXX`.
fn code_point(c: char) -> String {
    format!("U+{:04X}", u32::from(c))
}

/// A visible ASCII character quoted; anything else by its code point.
fn describe(c: char) -> String {
    if c.is_ascii_graphic() {
        format!("`{c}`")
    } else {
        format!("{} (not ASCII)", code_point(c))
    }
}

/// Whether `s` is a serial number by the module's rule; the first thing wrong otherwise.
///
/// `s` is checked as given: callers that read padded input (a scanned line) trim it first,
/// an argument is not trimmed (a leading or trailing space is refused).
pub fn check_serial(s: &str) -> Result<(), SerialError> {
    if s.is_empty() {
        return Err(SerialError::Empty);
    }
    let n = s.chars().count();
    if n > MAX_SERIAL_CHARS {
        return Err(SerialError::TooLong {
            max: MAX_SERIAL_CHARS,
            found: n,
        });
    }
    for (i, c) in s.chars().enumerate() {
        let position = i + 1;
        if c.is_ascii_alphanumeric() || SERIAL_PUNCTUATION.contains(c) {
            continue;
        }
        return Err(if c == ' ' {
            SerialError::Space { position }
        } else if c.is_control() {
            SerialError::Control { position, found: c }
        } else if BIDI_CONTROLS.contains(&c) {
            SerialError::Bidi { position, found: c }
        } else {
            SerialError::Character { position, found: c }
        });
    }
    if !s.chars().any(|c| c.is_ascii_alphanumeric()) {
        return Err(SerialError::NoLetterOrDigit {
            found: s.to_string(),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    // Moved from the station's tally with the rule it had there.
    #[test]
    fn serials() {
        assert!(check_serial("E2-000123").is_ok());
        assert!(check_serial("ab/12.x+y_z").is_ok());
        assert!(check_serial("---").is_err());
        assert!(check_serial("E2 000123").is_err());
        assert!(check_serial("%%%%").is_err());
        assert!(check_serial(&"9".repeat(65)).is_err());
        assert!(check_serial("").is_err());
    }

    #[test]
    fn plausible_serials_pass() {
        for s in [
            "E2-000123",
            "ab/12.x+y_z",
            "7",
            &"9".repeat(MAX_SERIAL_CHARS),
        ] {
            assert_eq!(check_serial(s), Ok(()), "{s}");
        }
    }

    #[test]
    fn length_is_bounded_in_characters() {
        assert_eq!(check_serial(""), Err(SerialError::Empty));
        assert_eq!(
            check_serial(&"9".repeat(MAX_SERIAL_CHARS + 1)),
            Err(SerialError::TooLong { max: 64, found: 65 })
        );
        let e = check_serial(&"A".repeat(200)).unwrap_err();
        assert_eq!(
            e.to_string(),
            "expected a serial number of at most 64 characters, found 200"
        );
    }

    #[test]
    fn spaces_anywhere_are_refused() {
        assert_eq!(
            check_serial(" E2-1"),
            Err(SerialError::Space { position: 1 })
        );
        assert_eq!(
            check_serial("E2-1 "),
            Err(SerialError::Space { position: 5 })
        );
        assert_eq!(
            check_serial("E2 000123"),
            Err(SerialError::Space { position: 3 })
        );
    }

    #[test]
    fn control_characters_are_named_by_code_point() {
        for (s, c) in [
            ("E2\u{7}1", '\u{7}'),
            ("E2\u{7f}", '\u{7f}'),
            ("\u{85}E2", '\u{85}'),
        ] {
            let e = check_serial(s).unwrap_err();
            assert!(
                matches!(e, SerialError::Control { found, .. } if found == c),
                "{e:?}"
            );
            let text = e.to_string();
            assert!(text.contains(&format!("U+{:04X}", u32::from(c))), "{text}");
            assert!(
                !text.contains(c),
                "the message must not carry the raw character"
            );
        }
        assert_eq!(
            check_serial("E2\t1").unwrap_err().to_string(),
            "expected letters, digits and -_./+ only, found the control character U+0009 at \
             character 3"
        );
    }

    #[test]
    fn every_bidirectional_control_is_refused() {
        for &c in &BIDI_CONTROLS {
            let s = format!("E2-{c}321");
            let e = check_serial(&s).unwrap_err();
            assert_eq!(
                e,
                SerialError::Bidi {
                    position: 4,
                    found: c
                }
            );
            assert!(!e.to_string().contains(c));
        }
        assert_eq!(
            check_serial("E2-\u{202E}321").unwrap_err().to_string(),
            "expected letters, digits and -_./+ only, found the bidirectional control U+202E at \
             character 4 (it reorders how text is displayed)"
        );
    }

    #[test]
    fn other_characters_are_refused() {
        assert_eq!(
            check_serial("%%%%").unwrap_err().to_string(),
            "expected letters, digits and -_./+ only, found `%` at character 1"
        );
        // Printable but not ASCII: a look-alike of a Latin letter is a different serial.
        assert_eq!(
            check_serial("E2-0\u{0430}1").unwrap_err().to_string(),
            "expected letters, digits and -_./+ only, found U+0430 (not ASCII) at character 5"
        );
        // Invisible but not a control: zero-width space.
        assert!(matches!(
            check_serial("E2\u{200B}1"),
            Err(SerialError::Character { position: 3, .. })
        ));
    }

    #[test]
    fn punctuation_alone_is_not_a_serial() {
        assert_eq!(
            check_serial("---").unwrap_err().to_string(),
            "expected at least one letter or digit in a serial number, found only \"---\""
        );
    }
}
