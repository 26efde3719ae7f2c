//! The new plan revision, written from the old plan's text by targeted replacements.
//!
//! The engineer's file stays the engineer's: comments, order, flow or block style and
//! spacing are kept; only these change —
//!
//! - `revision:` becomes the new revision;
//! - the limit values of each derived check (`min_db`, `max_db`, `max_percent`,
//!   `max_diff_db`, the `upper`/`lower` CSV paths; inline points become a CSV path);
//! - with a split per channel, the check's whole item is written once per channel, with
//!   the id `<id>-<channel>` and `channels: [<channel>]`;
//! - every path the plan names (limit CSVs of other checks, coupler models, earphone files:
//!   any value that names a file the plan loaded) is rewritten relative to the directory
//!   the new plan is written to, so that it loads from there;
//! - a note (a comment block between two marker lines, replacing an earlier one) says how
//!   the limits were made, just before the first key.
//!
//! Positions come from the YAML parser's marks (the start of every scalar; flow lists and
//! mappings are matched bracket by bracket from their start).

use super::yaml_pos::Text;
use crate::config::parse_tree;
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::ops::Range;
use std::path::{Component, Path, PathBuf};

/// First line of the derivation note.
pub const NOTE_BEGIN: &str = "# ---- limits derived by `tragus limits derive` ----";
/// Last line of the derivation note.
pub const NOTE_END: &str = "# ---- end of the derived-limits note ----";

/// The new values of one derived check.
#[derive(Debug, Clone, PartialEq)]
pub struct CheckEdit {
    /// The check's id in the old plan.
    pub id: String,
    /// One copy: the check is changed in place; several: it is split, one item per copy.
    pub copies: Vec<CheckCopy>,
}

/// One item a derived check becomes.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct CheckCopy {
    /// The item's new id (a split); `None` keeps it.
    pub id: Option<String>,
    /// The one channel of the item (a split); `None` keeps the check's channels.
    pub channel: Option<String>,
    /// Key → new value as YAML text.
    pub values: Vec<(String, String)>,
}

/// Everything [`rewrite`] needs.
pub struct Rewrite<'a> {
    /// The old plan's text.
    pub text: &'a str,
    /// Its path, for messages.
    pub label: &'a str,
    /// The directory its relative paths resolve from.
    pub plan_dir: &'a Path,
    /// The directory the new plan goes to.
    pub out_dir: &'a Path,
    /// Canonical paths of every file loading the old plan read.
    pub read_files: &'a [PathBuf],
    /// The new revision.
    pub revision: u32,
    /// The derived checks.
    pub edits: &'a [CheckEdit],
    /// The note's lines (without `# `).
    pub note: &'a [String],
}

/// The new plan's text (module doc); an error says which part of the old text could not
/// be edited.
pub fn rewrite(r: &Rewrite) -> Result<String, String> {
    let (root, problems) = parse_tree(r.text, r.label, "plan");
    let root = match (root, problems.first()) {
        (Some(root), None) => root,
        (_, Some(p)) => return Err(p.to_string()),
        (None, None) => return Err(format!("{}: the plan has no content", r.label)),
    };
    let root = root
        .as_mapping()
        .ok_or_else(|| format!("{}: expected a mapping at the top", r.label))?;
    let t = Text::new(r.text);
    let mut edits: Vec<(Range<usize>, String)> = Vec::new();
    let rev = root
        .get_scalar("revision")
        .ok_or_else(|| format!("{}: expected a `revision:` key", r.label))?;
    edits.push((t.scalar_range(rev)?, r.revision.to_string()));
    collect_paths(&t, &Node::from(root.clone()), r, &mut edits)?;

    let items: Vec<&MarkedMappingNode> = root
        .get_sequence("checks")
        .map(|s| s.iter().filter_map(Node::as_mapping).collect())
        .unwrap_or_default();
    for edit in r.edits {
        let item = items
            .iter()
            .find(|m| m.get_scalar("id").is_some_and(|s| s.as_str() == edit.id))
            .ok_or_else(|| format!("{}: no check with id `{}`", r.label, edit.id))?;
        let mut value_edits = Vec::new();
        for copy in &edit.copies {
            value_edits.push(copy_edits(&t, item, copy, &edit.id)?);
        }
        if let ([in_place], [copy]) = (&value_edits[..], &edit.copies[..]) {
            if copy.id.is_none() && copy.channel.is_none() {
                for (range, text) in in_place {
                    edits.retain(|(r2, _)| !overlaps(r2, range));
                    edits.push((range.clone(), text.clone()));
                }
                continue;
            }
        }
        let block = t.item_block(item)?;
        // Paths inside the item travel with every copy.
        let inside: Vec<(Range<usize>, String)> = edits
            .iter()
            .filter(|(e, _)| e.start >= block.start && e.end <= block.end)
            .cloned()
            .collect();
        edits.retain(|(e, _)| !overlaps(e, &block));
        let mut out = String::new();
        for copy_edits in value_edits {
            let mut local: Vec<(Range<usize>, String)> = inside
                .iter()
                .filter(|(e, _)| !copy_edits.iter().any(|(c, _)| overlaps(c, e)))
                .cloned()
                .collect();
            local.extend(copy_edits);
            let shifted: Vec<(Range<usize>, String)> = local
                .into_iter()
                .map(|(e, s)| (e.start - block.start..e.end - block.start, s))
                .collect();
            out.push_str(&apply(&r.text[block.clone()], shifted)?);
        }
        edits.push((block, out));
    }
    let edited = apply(r.text, edits)?;
    Ok(with_note(&edited, r.note))
}

/// The value edits of one copy of a check item.
fn copy_edits(
    t: &Text,
    item: &MarkedMappingNode,
    copy: &CheckCopy,
    id: &str,
) -> Result<Vec<(Range<usize>, String)>, String> {
    let mut out = Vec::new();
    for (key, value) in &copy.values {
        let node = item
            .get_node(key)
            .ok_or_else(|| format!("check {id}: expected a `{key}:` key to replace"))?;
        out.push((t.value_range(node)?, value.clone()));
    }
    let id_node = item.get_scalar("id").ok_or("a check without an id")?;
    if let Some(new_id) = &copy.id {
        out.push((t.scalar_range(id_node)?, new_id.clone()));
    }
    if let Some(ch) = &copy.channel {
        let list = format!("[{ch}]");
        match item.get_node("channels") {
            Some(node) => out.push((t.value_range(node)?, list)),
            None => {
                let id_end = t.scalar_range(id_node)?.end;
                if t.is_flow(item) {
                    out.push((id_end..id_end, format!(", channels: {list}")));
                } else {
                    let key = item
                        .keys()
                        .find(|k| k.as_str() == "id")
                        .ok_or("a check without an id key")?;
                    let col = key.span().start().map_or(1, |m| m.column());
                    let eol = t.line_end(id_end);
                    out.push((
                        eol..eol,
                        format!("\n{}channels: {list}", " ".repeat(col - 1)),
                    ));
                }
            }
        }
    }
    Ok(out)
}

/// Every scalar value naming a file the plan read, rewritten relative to `out_dir`.
fn collect_paths(
    t: &Text,
    node: &Node,
    r: &Rewrite,
    edits: &mut Vec<(Range<usize>, String)>,
) -> Result<(), String> {
    match node {
        Node::Scalar(s) => {
            let v = s.as_str();
            if v.is_empty() || Path::new(v).is_absolute() || v.contains('\n') {
                return Ok(());
            }
            let Ok(target) = r.plan_dir.join(v).canonicalize() else {
                return Ok(());
            };
            if r.read_files.contains(&target) {
                let rel = relative_path(r.out_dir, &target);
                edits.push((t.scalar_range(s)?, yaml_string(&rel)));
            }
        }
        Node::Sequence(seq) => {
            for n in seq.iter() {
                collect_paths(t, n, r, edits)?;
            }
        }
        Node::Mapping(map) => {
            for (_, n) in map.iter() {
                collect_paths(t, n, r, edits)?;
            }
        }
    }
    Ok(())
}

/// `to` as seen from `from_dir` (both absolute), with `/` separators; `to` itself when the
/// two share nothing but the root (a path climbing to `/` and down again says less than
/// the absolute one).
pub fn relative_path(from_dir: &Path, to: &Path) -> String {
    let from: Vec<Component> = from_dir.components().collect();
    let to_c: Vec<Component> = to.components().collect();
    let common = from.iter().zip(&to_c).take_while(|(a, b)| a == b).count();
    if common <= 1 {
        return to.display().to_string();
    }
    let mut parts: Vec<String> = vec!["..".to_string(); from.len() - common];
    parts.extend(
        to_c[common..]
            .iter()
            .map(|c| c.as_os_str().to_string_lossy().into_owned()),
    );
    parts.join("/")
}

/// `s` as a YAML scalar: plain when it is made of path-safe characters, else double-quoted.
pub fn yaml_string(s: &str) -> String {
    let plain = !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "._/-+".contains(c))
        && !s.starts_with('-');
    if plain {
        s.to_string()
    } else {
        format!("{:?}", s)
    }
}

fn overlaps(a: &Range<usize>, b: &Range<usize>) -> bool {
    a.start < b.end && b.start < a.end
        || (a.start == a.end && b.start <= a.start && a.start < b.end)
}

/// `text` with the edits (byte ranges of it) applied; overlapping edits are a bug of the
/// caller, reported rather than mangled.
fn apply(text: &str, mut edits: Vec<(Range<usize>, String)>) -> Result<String, String> {
    edits.sort_by_key(|(r, _)| (r.start, r.end));
    for w in edits.windows(2) {
        if w[1].0.start < w[0].0.end {
            return Err(format!(
                "two edits of the plan text overlap at bytes {:?} and {:?}",
                w[0].0, w[1].0
            ));
        }
    }
    let mut out = text.to_string();
    for (range, new) in edits.into_iter().rev() {
        out.replace_range(range, &new);
    }
    Ok(out)
}

/// `text` without an earlier note and with `note` just before the first top-level key.
fn with_note(text: &str, note: &[String]) -> String {
    let lines: Vec<&str> = text.split_inclusive('\n').collect();
    let mut kept: Vec<&str> = Vec::with_capacity(lines.len());
    let mut in_note = false;
    for l in lines {
        let trimmed = l.trim_end();
        if trimmed == NOTE_BEGIN {
            in_note = true;
            continue;
        }
        if in_note {
            in_note = trimmed != NOTE_END;
            continue;
        }
        kept.push(l);
    }
    let at = kept
        .iter()
        .position(|l| {
            let c = l.chars().next();
            c.is_some_and(|c| !c.is_whitespace() && c != '#') && !l.starts_with("---")
        })
        .unwrap_or(kept.len());
    let mut block = String::new();
    block.push_str(NOTE_BEGIN);
    block.push('\n');
    for line in note.iter().flat_map(|l| wrapped(l, NOTE_WIDTH)) {
        block.push_str(if line.is_empty() { "#" } else { "# " });
        block.push_str(&line);
        block.push('\n');
    }
    block.push_str(NOTE_END);
    block.push('\n');
    let mut out = String::new();
    for l in &kept[..at] {
        out.push_str(l);
    }
    out.push_str(&block);
    for l in &kept[at..] {
        out.push_str(l);
    }
    out
}

/// Characters of a note line after `# ` before it is wrapped.
const NOTE_WIDTH: usize = 92;

/// `line` broken at spaces into lines of at most `width` characters (a longer word stays
/// whole); continuation lines are indented by two spaces.
fn wrapped(line: &str, width: usize) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    let mut current = String::new();
    for word in line.split(' ') {
        let len = current.chars().count();
        if len > 0 && len + 1 + word.chars().count() > width {
            out.push(std::mem::take(&mut current));
            current.push_str("  ");
        } else if len > 0 {
            current.push(' ');
        }
        current.push_str(word);
    }
    out.push(current);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const PLAN: &str = "# demo\nplan: p\nrevision: 5\nchecks:\n  # response\n  - id: fr\n    kind: response\n    upper: limits/u.csv\n    lower: [[100, -3], [1000, -3]]\n  - {id: sens, kind: sensitivity, band_hz: [500, 2000], min_db: -10.3, max_db: \"-6.3\"}\n";

    fn rw(edits: &[CheckEdit]) -> String {
        rewrite(&Rewrite {
            text: PLAN,
            label: "p.yaml",
            plan_dir: Path::new("/nonexistent"),
            out_dir: Path::new("/nonexistent/out"),
            read_files: &[],
            revision: 6,
            edits,
            note: &["made by a test".into()],
        })
        .unwrap()
    }

    #[test]
    fn in_place_values_keep_the_rest() {
        let out = rw(&[
            CheckEdit {
                id: "sens".into(),
                copies: vec![CheckCopy {
                    values: vec![
                        ("min_db".into(), "-9.5".into()),
                        ("max_db".into(), "-7.1".into()),
                    ],
                    ..CheckCopy::default()
                }],
            },
            CheckEdit {
                id: "fr".into(),
                copies: vec![CheckCopy {
                    values: vec![
                        ("upper".into(), "limits/n-u.csv".into()),
                        ("lower".into(), "limits/n-l.csv".into()),
                    ],
                    ..CheckCopy::default()
                }],
            },
        ]);
        let want = format!(
            "# demo\n{NOTE_BEGIN}\n# made by a test\n{NOTE_END}\nplan: p\nrevision: 6\nchecks:\n  # response\n  - id: fr\n    kind: response\n    upper: limits/n-u.csv\n    lower: limits/n-l.csv\n  - {{id: sens, kind: sensitivity, band_hz: [500, 2000], min_db: -9.5, max_db: -7.1}}\n"
        );
        assert_eq!(out, want);
        // A second derivation replaces the note instead of adding one.
        let again = rewrite(&Rewrite {
            text: &out,
            label: "p.yaml",
            plan_dir: Path::new("/nonexistent"),
            out_dir: Path::new("/nonexistent/out"),
            read_files: &[],
            revision: 7,
            edits: &[],
            note: &["second".into()],
        })
        .unwrap();
        assert_eq!(again.matches(NOTE_BEGIN).count(), 1);
        assert!(again.contains("# second\n") && !again.contains("made by a test"));
    }

    #[test]
    fn split_per_channel() {
        let copy = |ch: &str| CheckCopy {
            id: Some(format!("sens-{ch}")),
            channel: Some(ch.into()),
            values: vec![("min_db".into(), "-9".into())],
        };
        let copy_fr = |ch: &str| CheckCopy {
            id: Some(format!("fr-{ch}")),
            channel: Some(ch.into()),
            values: vec![("upper".into(), format!("limits/{ch}.csv"))],
        };
        let out = rw(&[
            CheckEdit {
                id: "sens".into(),
                copies: vec![copy("left"), copy("right")],
            },
            CheckEdit {
                id: "fr".into(),
                copies: vec![copy_fr("left"), copy_fr("right")],
            },
        ]);
        assert!(out.contains("  - {id: sens-left, channels: [left], kind: sensitivity, band_hz: [500, 2000], min_db: -9, max_db: \"-6.3\"}\n  - {id: sens-right, channels: [right],"), "{out}");
        assert!(out.contains("  # response\n  - id: fr-left\n    channels: [left]\n    kind: response\n    upper: limits/left.csv\n    lower: [[100, -3], [1000, -3]]\n  - id: fr-right\n    channels: [right]\n"), "{out}");
    }

    #[test]
    fn note_lines_are_wrapped() {
        let w = wrapped("aaa bbb ccc ddd", 7);
        assert_eq!(w, ["aaa bbb", "  ccc", "  ddd"]);
        assert_eq!(wrapped("", 7), [""]);
    }

    #[test]
    fn relative_paths_and_quoting() {
        assert_eq!(
            relative_path(Path::new("/a/b/out"), Path::new("/a/reference/c.yaml")),
            "../../reference/c.yaml"
        );
        assert_eq!(
            relative_path(Path::new("/a/plans"), Path::new("/a/plans/limits/x.csv")),
            "limits/x.csv"
        );
        assert_eq!(
            relative_path(Path::new("/tmp/out"), Path::new("/a/c.yaml")),
            "/a/c.yaml"
        );
        assert_eq!(yaml_string("limits/x-1.csv"), "limits/x-1.csv");
        assert_eq!(yaml_string("my limits/x.csv"), "\"my limits/x.csv\"");
    }
}
