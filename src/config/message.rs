//! How messages name what they found and what they expected, the same in every file kind:
//! values in backticks, control characters escaped, a "did you mean" for near misses.

use marked_yaml::Node;

/// How messages name a field: `revision` at the top level, `stimulus.start_hz` in a
/// section, `check fr: band_hz` in a list item.
pub fn label(ctx: &str, key: &str) -> String {
    if ctx.is_empty() {
        key.to_string()
    } else if ctx.contains(' ') {
        format!("{ctx}: {key}")
    } else {
        format!("{ctx}.{key}")
    }
}

/// The known name nearest to `word`, if it is near enough to be a likely typo.
///
/// Jaro–Winkler similarity ≥ 0.8 (a common threshold for "did you mean", e.g. in CLI
/// argument parsers; common practice), or the word is a prefix of the name (`stop` for
/// `stop_hz`).
pub fn suggest<'a>(word: &str, names: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    let mut best: Option<(f64, &str)> = None;
    for name in names {
        let mut score = strsim::jaro_winkler(word, name);
        if !word.is_empty() && name.starts_with(word) {
            score = score.max(0.9);
        }
        if best.is_none_or(|(b, _)| score > b) {
            best = Some((score, name));
        }
    }
    best.filter(|(s, _)| *s >= 0.8).map(|(_, n)| n)
}

/// "did you mean `x`?" when a known key is close, else the list of known keys.
pub fn expected_keys(field: &str, expected: &[&str]) -> String {
    match suggest(field, expected.iter().copied()) {
        Some(s) => format!("did you mean `{s}`?"),
        None => format!("expected one of {}", expected.join(", ")),
    }
}

/// How a node is named in "found ..." (a scalar by its text).
pub fn found(node: &Node) -> String {
    match node {
        Node::Scalar(s) => found_scalar(s.as_str()),
        Node::Sequence(_) => "a list".to_string(),
        Node::Mapping(_) => "a mapping".to_string(),
    }
}

/// A scalar's text for messages: in backticks, control characters escaped, long text cut.
pub fn found_scalar(text: &str) -> String {
    if text.is_empty() {
        "an empty value".to_string()
    } else {
        format!("`{}`", show_text(text))
    }
}

/// Text safe to show in a one-line message: control characters escaped, at most 40 chars.
pub fn show_text(text: &str) -> String {
    let mut out = String::new();
    for (i, c) in text.chars().enumerate() {
        if i == 40 {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out
}

/// An id (of a plan, a check, a coupler, a station): `[a-z0-9][a-z0-9._-]*`.
pub fn is_id(s: &str) -> bool {
    let mut chars = s.chars();
    chars
        .next()
        .is_some_and(|c| c.is_ascii_lowercase() || c.is_ascii_digit())
        && chars.all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || "._-".contains(c))
}

/// A channel or tap name: `[a-z0-9_-]+`.
pub fn is_channel_name(s: &str) -> bool {
    !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_' || c == '-')
}
