//! Node-level reading of a project file's tree: each value checked where it is written.
//!
//! The files that are not decoded through serde structs (coupler models, earphone files,
//! station files, calibration files) are read node by node with a [`NodeReader`], which
//! records every problem at the node that caused it, in the words all file kinds share
//! (`what: expected …, found …`, "did you mean" for unknown keys).

use super::diag::{Pos, Problem};
use super::message::{found, found_scalar, show_text, suggest};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::path::PathBuf;

/// Reads values from the node tree of one file and collects its problems.
pub struct NodeReader {
    /// The file's label in problems (its path as given).
    pub path: String,
    /// The directory relative paths in the file resolve against.
    pub dir: PathBuf,
    /// Problems found so far, in the order found.
    pub problems: Vec<Problem>,
}

impl NodeReader {
    /// A reader for the file labelled `path`, whose relative paths resolve against `dir`.
    pub fn new(path: String, dir: PathBuf) -> Self {
        NodeReader {
            path,
            dir,
            problems: Vec::new(),
        }
    }

    /// Record a problem at `pos` of this file.
    pub fn report(&mut self, pos: Pos, message: String) {
        self.problems.push(Problem {
            location: pos.at(&self.path),
            message,
        });
    }

    /// Report keys of `map` not in `known`, with a suggestion. `ctx` prefixes messages.
    pub fn unknown_keys(&mut self, map: &MarkedMappingNode, known: &[&str], ctx: &str) {
        for k in map.keys() {
            if !known.contains(&k.as_str()) {
                let hint = match suggest(k.as_str(), known.iter().copied()) {
                    Some(s) => format!("did you mean `{s}`?"),
                    None => format!("expected one of {}", known.join(", ")),
                };
                let at = if ctx.is_empty() {
                    String::new()
                } else {
                    format!("{ctx}: ")
                };
                self.report(
                    Pos::of(k.span()),
                    format!("{at}unknown key `{}`, {hint}", show_text(k.as_str())),
                );
            }
        }
    }

    /// A scalar's text, or a problem (`expected` names what should have been written).
    pub fn scalar(&mut self, n: &Node, what: &str, expected: &str) -> Option<String> {
        match n {
            Node::Scalar(s) if !s.is_empty() => Some(s.as_str().to_string()),
            other => {
                self.report(
                    Pos::of(other.span()),
                    format!("{what}: expected {expected}, found {}", found(other)),
                );
                None
            }
        }
    }

    /// A finite number, or a problem.
    pub fn number(&mut self, n: &Node, what: &str) -> Option<f64> {
        let text = self.scalar(n, what, "a number")?;
        match text.trim().replace('_', "").parse::<f64>() {
            Ok(x) if x.is_finite() => Some(x),
            _ => {
                self.report(
                    Pos::of(n.span()),
                    format!("{what}: expected a number, found {}", found_scalar(&text)),
                );
                None
            }
        }
    }

    /// A finite number within `range` (inclusive), `unit` written after the range.
    pub fn number_in(
        &mut self,
        n: &Node,
        what: &str,
        range: (f64, f64),
        unit: &str,
    ) -> Option<f64> {
        let x = self.number(n, what)?;
        if x >= range.0 && x <= range.1 {
            Some(x)
        } else {
            self.report(
                Pos::of(n.span()),
                format!(
                    "{what}: expected {} to {}{unit}, found {x}",
                    range.0, range.1
                ),
            );
            None
        }
    }

    /// A number above 0 (a size), in the unit written.
    pub fn positive(&mut self, n: &Node, what: &str, unit: &str) -> Option<f64> {
        let x = self.number(n, what)?;
        if x > 0.0 {
            Some(x)
        } else {
            self.report(
                Pos::of(n.span()),
                format!("{what}: expected a value above 0 {unit}, found {x}"),
            );
            None
        }
    }

    /// The keys of a mapping: unknown ones reported, required ones checked. Returns the
    /// value nodes of `keys` (in order), `None` per absent key; `None` when the node is not
    /// a mapping or a required key is missing.
    pub fn fields<'n>(
        &mut self,
        node: &'n Node,
        what: &str,
        keys: &[&str],
        required: &[&str],
    ) -> Option<Vec<Option<&'n Node>>> {
        let Node::Mapping(m) = node else {
            self.report(
                Pos::of(node.span()),
                format!(
                    "{what}: expected a mapping with {}, found {}",
                    keys.join(", "),
                    found(node)
                ),
            );
            return None;
        };
        self.unknown_keys(m, keys, what);
        let pos = m
            .keys()
            .next()
            .map_or(Pos::of(node.span()), |k| Pos::of(k.span()));
        let mut ok = true;
        for r in required {
            if m.get_node(r).is_none() {
                self.report(pos, format!("{what}: missing required key `{r}`"));
                ok = false;
            }
        }
        let out = keys.iter().map(|k| m.get_node(k)).collect();
        ok.then_some(out)
    }
}
