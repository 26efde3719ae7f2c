//! YAML text → a tree of marked nodes, and mappings decoded key by key into serde structs.
//!
//! [`parse_tree`] (and [`Decoder::tree`]) parse a file's text into a `marked-yaml` node tree
//! whose every node keeps the line and column it was written at, so that every problem can be
//! reported at the value that caused it. `serde_yaml` is deprecated and unmaintained;
//! `marked-yaml` is maintained and gives every node a span.
//!
//! Before the tree is built, a streaming pass over the YAML events refuses nesting deeper
//! than [`MAX_NESTING_DEPTH`], anchors and aliases, and a second document: the node tree is
//! dropped recursively, and junk nested tens of thousands deep would overflow the stack.
//! Duplicate keys, tags and a top level that is not a mapping are refused too.
//!
//! # How all problems of a mapping are found at once
//!
//! [`Decoder::section`] deserializes a mapping one key at a time into a struct whose fields
//! are all optional: a key whose value does not deserialize (or that the struct does not
//! know) is reported and left out, the rest deserialize together. Because every field is
//! optional, a mapping holding one valid key always deserializes, so the key-at-a-time test
//! is exact. Keys left out this way are listed in [`Section::rejected`], so that a later
//! check does not also call them missing.

use super::diag::{Pos, Problem};
use super::message::{expected_keys, found, found_scalar, label, show_text};
use marked_yaml::types::{MarkedMappingNode, MarkedScalarNode};
use marked_yaml::{FromNodeError, LoadError, LoaderOptions, Node, Span};
use serde::de::DeserializeOwned;
use yaml_rust2::parser::{Event, Parser};

/// Deepest nesting of mappings and lists accepted in a project file (a plan, the deepest,
/// needs 5 levels: top → checks → check → upper → point).
pub const MAX_NESTING_DEPTH: usize = 16;

/// One decoded mapping and what decoding it found.
#[derive(Debug, Clone)]
pub struct Section<T> {
    /// The decoded keys (those that deserialized).
    pub value: T,
    /// Where the mapping is: its first key, or the key naming it when it is empty.
    pub pos: Pos,
    /// Keys present in the YAML whose values were rejected (already reported).
    pub rejected: Vec<String>,
}

impl<T> Section<T> {
    /// Whether `key` was present but rejected when decoded.
    pub fn was_rejected(&self, key: &str) -> bool {
        self.rejected.iter().any(|k| k == key)
    }
}

/// Parse YAML text into a marked node tree whose top level is a mapping, with every guard
/// of [`Decoder::tree`] and no decoding.
///
/// `path` labels the problems; `what` names the file kind in messages (`coupler model`).
pub fn parse_tree(text: &str, path: &str, what: &'static str) -> (Option<Node>, Vec<Problem>) {
    let mut d = Decoder::new(path, what);
    let root = d.tree(text);
    (root, d.into_problems())
}

/// The position of a mapping for messages: its first key (block mappings' own marks point
/// past the first key), or `fallback` when it is empty.
pub fn mapping_pos(map: &MarkedMappingNode, fallback: Pos) -> Pos {
    map.keys().next().map_or(fallback, |k| Pos::of(k.span()))
}

/// Parses one file's text and decodes its mappings, collecting every problem found.
pub struct Decoder<'a> {
    path: &'a str,
    /// The file kind named in messages (`plan`).
    what: &'static str,
    problems: Vec<Problem>,
}

impl<'a> Decoder<'a> {
    /// A decoder for the file labelled `path`, of the kind `what` (`plan`, `coupler model`).
    pub fn new(path: &'a str, what: &'static str) -> Self {
        Decoder {
            path,
            what,
            problems: Vec::new(),
        }
    }

    /// Record a problem at `pos` of this file.
    pub fn report(&mut self, pos: Pos, message: String) {
        self.problems.push(Problem {
            location: pos.at(self.path),
            message,
        });
    }

    /// How many problems have been recorded.
    pub fn n_problems(&self) -> usize {
        self.problems.len()
    }

    /// Every problem recorded, in the order found.
    pub fn into_problems(self) -> Vec<Problem> {
        self.problems
    }

    /// The node tree, top level a mapping, or `None` with the problems reported.
    pub fn tree(&mut self, text: &str) -> Option<Node> {
        if !self.prescan(text) {
            return None;
        }
        let options = LoaderOptions::default().error_on_duplicate_keys(true);
        let mut root = match marked_yaml::parse_yaml_with_options(0, text, options) {
            Ok(n) => n,
            Err(e) => {
                self.load_error(e);
                return None;
            }
        };
        fix_empty_value_spans(&mut root);
        if !matches!(root, Node::Mapping(_)) {
            self.report(
                Pos::of(root.span()),
                format!("expected a mapping of {} keys at the top level", self.what),
            );
            return None;
        }
        Some(root)
    }

    /// Streaming pass over the YAML events: refuse what the node tree cannot hold safely
    /// (deep nesting, anchors and aliases, several documents). Returns false if refused.
    fn prescan(&mut self, text: &str) -> bool {
        let mut parser = Parser::new_from_str(text);
        let mut depth = 0usize;
        let mut documents = 0usize;
        let mut top_seen = false;
        loop {
            let (event, mark) = match parser.next_token() {
                Ok(x) => x,
                // Syntax errors are reported by the loader, with the same parser and mark.
                Err(_) => return true,
            };
            let pos = Pos {
                line: mark.line(),
                col: mark.col() + 1,
            };
            let anchored = match &event {
                Event::MappingStart(aid, _) | Event::SequenceStart(aid, _) => {
                    depth += 1;
                    *aid != 0
                }
                Event::Scalar(_, _, aid, _) => *aid != 0,
                _ => false,
            };
            if anchored || matches!(event, Event::Alias(_)) {
                self.report(
                    pos,
                    format!(
                        "expected plain YAML, found an anchor or alias (`&name`, `*name`), \
                         which {}s do not use",
                        self.what
                    ),
                );
                return false;
            }
            if documents == 1 && !top_seen {
                let top_kind = match event {
                    Event::SequenceStart(..) => Some("a list"),
                    Event::Scalar(..) => Some("a single value"),
                    Event::MappingStart(..) => None,
                    _ => Some(""),
                };
                if top_kind != Some("") {
                    top_seen = true;
                }
                if let Some(kind) = top_kind.filter(|k| !k.is_empty()) {
                    self.report(
                        pos,
                        format!(
                            "expected a mapping of {} keys at the top level, found {kind}",
                            self.what
                        ),
                    );
                    return false;
                }
            }
            match event {
                Event::MappingEnd | Event::SequenceEnd => depth = depth.saturating_sub(1),
                Event::DocumentStart => {
                    documents += 1;
                    if documents > 1 {
                        self.report(
                            pos,
                            "expected one YAML document, found a second one (`---`)".into(),
                        );
                        return false;
                    }
                }
                Event::StreamEnd => return true,
                _ => {}
            }
            if depth > MAX_NESTING_DEPTH {
                self.report(
                    pos,
                    format!(
                        "expected at most {MAX_NESTING_DEPTH} levels of nested mappings \
                         and lists, found deeper nesting"
                    ),
                );
                return false;
            }
        }
    }

    fn load_error(&mut self, e: LoadError) {
        let (marker, message) = match e {
            LoadError::TopLevelMustBeMapping(m) => (
                Some(m),
                format!(
                    "expected a mapping of {} keys at the top level, found a list or a single value",
                    self.what
                ),
            ),
            LoadError::TopLevelMustBeSequence(m) => {
                (Some(m), "expected a mapping at the top level".to_string())
            }
            LoadError::UnexpectedAnchor(m) => (
                Some(m),
                format!(
                    "expected plain YAML, found an anchor or alias, which {}s do not use",
                    self.what
                ),
            ),
            LoadError::MappingKeyMustBeScalar(m) => (
                Some(m),
                "expected a plain key, found a list or mapping used as a key".to_string(),
            ),
            LoadError::UnexpectedTag(m) => (
                Some(m),
                format!(
                    "expected plain YAML, found a tag (`!name`), which {}s do not use",
                    self.what
                ),
            ),
            LoadError::ScanError(m, se) => (Some(m), format!("invalid YAML: {}", se.info())),
            LoadError::DuplicateKey(inner) => {
                let first = Pos::of(inner.prev_key.span());
                (
                    inner.key.span().start().copied(),
                    format!(
                        "duplicate key `{}`, first given at line {} column {}",
                        show_text(inner.key.as_str()),
                        first.line,
                        first.col
                    ),
                )
            }
        };
        let pos = marker.map_or(Pos::default(), |m| Pos {
            line: m.line(),
            col: m.column(),
        });
        self.report(pos, message);
    }

    /// Decode a mapping key by key (see the module doc). `ctx` prefixes messages.
    pub fn section<T: DeserializeOwned + Default>(
        &mut self,
        map: &MarkedMappingNode,
        pos: Pos,
        ctx: &str,
    ) -> Section<T> {
        let mut good = Vec::new();
        let mut rejected = Vec::new();
        for (key, value) in map.iter() {
            let decoded = self.entry(map, key, value, ctx, |single| {
                marked_yaml::from_node::<T>(single).map(drop)
            });
            if decoded {
                good.push((key.clone(), value.clone()));
            } else {
                rejected.push(key.as_str().to_string());
            }
        }
        let all = Node::Mapping(MarkedMappingNode::new(
            *map.span(),
            good.into_iter().collect(),
        ));
        let value = self.decode_all(&all, pos, ctx);
        Section {
            value,
            pos,
            rejected,
        }
    }

    /// Decode the keys of `map` that [`Decoder::entry`] accepted one by one, all together.
    pub fn decode_all<T: DeserializeOwned + Default>(
        &mut self,
        map: &Node,
        pos: Pos,
        ctx: &str,
    ) -> T {
        match marked_yaml::from_node::<T>(map) {
            Ok(v) => v,
            Err(e) => {
                // Keys that decode one by one decode together (every field is optional);
                // reported rather than assumed, since this is outside input.
                self.report(pos, with_ctx(ctx, &format!("cannot decode: {}", *e)));
                T::default()
            }
        }
    }

    /// Decode one `key: value` of `map` on its own: `decode` is given the one-key mapping.
    /// A failure is reported at the key or value that caused it, in the file's words (did
    /// you mean, expected a number, …); returns whether it decoded.
    pub fn entry(
        &mut self,
        map: &MarkedMappingNode,
        key: &MarkedScalarNode,
        value: &Node,
        ctx: &str,
        decode: impl FnOnce(&Node) -> Result<(), FromNodeError>,
    ) -> bool {
        let single = Node::Mapping(MarkedMappingNode::new(
            *map.span(),
            std::iter::once((key.clone(), value.clone())).collect(),
        ));
        match decode(&single) {
            Ok(()) => true,
            Err(e) => {
                let (epos, message) = describe_error(&e, key, value, ctx);
                self.report(epos, message);
                false
            }
        }
    }

    /// Report `key` as unknown, with the nearest of `expected` or the list of them: the
    /// message serde's own unknown-field error gets.
    pub fn unknown_key(&mut self, key: &MarkedScalarNode, ctx: &str, expected: &[&str]) {
        let message = format!(
            "{}unknown key `{}`, {}",
            prefix(ctx),
            show_text(key.as_str()),
            expected_keys(key.as_str(), expected)
        );
        self.report(Pos::of(key.span()), message);
    }

    /// Decode the mapping under `key` of `parent`, if present. A value that is not a
    /// mapping is reported and its key added to `rejected` (the parent's).
    pub fn sub_section<T: DeserializeOwned + Default>(
        &mut self,
        parent: &MarkedMappingNode,
        key: &str,
        rejected: &mut Vec<String>,
    ) -> Option<Section<T>> {
        let (k, node) = parent.get_key_value(key)?;
        let key_pos = Pos::of(k.span());
        match node {
            Node::Mapping(m) => Some(self.section(m, mapping_pos(m, key_pos), key)),
            Node::Scalar(s) if s.is_empty() => Some(Section {
                value: T::default(),
                pos: key_pos,
                rejected: Vec::new(),
            }),
            other => {
                self.report(
                    Pos::of(other.span()),
                    format!("{key}: expected a mapping, found {}", found(other)),
                );
                rejected.push(key.to_string());
                None
            }
        }
    }
}

/// The loader marks an empty value (`key:` then a new line) at the start of the next line;
/// point it at its key instead, where the user left it empty.
fn fix_empty_value_spans(root: &mut Node) {
    // Iterative: nesting depth is bounded by the prescan, but there is no need to recurse.
    let mut stack: Vec<&mut Node> = vec![root];
    while let Some(node) = stack.pop() {
        match node {
            Node::Mapping(m) => {
                for (k, v) in m.iter_mut() {
                    if let Node::Scalar(s) = v {
                        if s.is_empty() {
                            *s.span_mut() = *k.span();
                        }
                    }
                    stack.push(v);
                }
            }
            Node::Sequence(s) => stack.extend(s.iter_mut()),
            Node::Scalar(_) => {}
        }
    }
}

/// Turn a serde error on `key: value` into a position and a message.
fn describe_error(
    e: &FromNodeError,
    key: &MarkedScalarNode,
    value: &Node,
    ctx: &str,
) -> (Pos, String) {
    use marked_yaml::Error as E;
    let value_pos = Pos::of(value.span());
    let key_name = key.as_str();
    let field_ctx = label(ctx, key_name);
    let scalar_found = |span: &Span| -> String {
        span.start()
            .and_then(|m| scalar_at(value, m))
            .map_or_else(|| found(value), |s| found_scalar(s.as_str()))
    };
    match &**e {
        E::UnknownFieldError(field, expected, _) => {
            if field == key_name {
                let message = format!(
                    "{}unknown key `{}`, {}",
                    prefix(ctx),
                    show_text(field),
                    expected_keys(field, expected)
                );
                (Pos::of(key.span()), message)
            } else {
                // Unknown key inside a nested mapping (e.g. `normalize:`).
                let pos = find_key(value, field).map_or(value_pos, |k| Pos::of(k.span()));
                let message = format!(
                    "{field_ctx}: unknown key `{}`, {}",
                    show_text(field),
                    expected_keys(field, expected)
                );
                (pos, message)
            }
        }
        E::IntegerParseFailure(_, span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected a whole number, found {}",
                scalar_found(span)
            ),
        ),
        E::FloatParseFailure(_, span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected a number, found {}",
                scalar_found(span)
            ),
        ),
        E::NotBoolean(span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected true or false, found {}",
                scalar_found(span)
            ),
        ),
        E::Other(msg, span) => (
            span_pos(span, value_pos),
            format!("{field_ctx}: {}", translate_serde_message(msg, value)),
        ),
    }
}

fn span_pos(span: &Span, fallback: Pos) -> Pos {
    if span.start().is_some() {
        Pos::of(span)
    } else {
        fallback
    }
}

fn with_ctx(ctx: &str, rest: &str) -> String {
    if ctx.is_empty() {
        rest.to_string()
    } else {
        format!("{ctx}: {rest}")
    }
}

fn prefix(ctx: &str) -> String {
    if ctx.is_empty() {
        String::new()
    } else {
        format!("{ctx}: ")
    }
}

/// Rewrite serde's `invalid type: X, expected Y` in the files' words.
fn translate_serde_message(msg: &str, value: &Node) -> String {
    if let Some(rest) = msg.strip_prefix("invalid type: ") {
        if let Some((unexp, exp)) = rest.rsplit_once(", expected ") {
            let exp = match exp {
                "f64" => "a number",
                "i128" => "a whole number",
                "a sequence" => "a list",
                "a string" => "a string",
                other => other,
            };
            let found_text = if let Some(s) = unexp.strip_prefix("string ") {
                found_scalar(s.trim_matches('"'))
            } else if unexp == "sequence" {
                "a list".to_string()
            } else if unexp == "map" {
                "a mapping".to_string()
            } else {
                found(value)
            };
            return format!("expected {exp}, found {found_text}");
        }
    }
    let mut m = msg.to_string();
    if let Some(first) = m.get(0..1) {
        let lower = first.to_lowercase();
        m.replace_range(0..1, &lower);
    }
    m
}

/// The scalar whose span starts at `mark`, within `node`.
fn scalar_at<'n>(node: &'n Node, mark: &marked_yaml::Marker) -> Option<&'n MarkedScalarNode> {
    let mut stack = vec![node];
    while let Some(n) = stack.pop() {
        match n {
            Node::Scalar(s) => {
                if s.span().start() == Some(mark) {
                    return Some(s);
                }
            }
            Node::Sequence(q) => stack.extend(q.iter()),
            Node::Mapping(m) => stack.extend(m.values()),
        }
    }
    None
}

/// The first mapping key named `name` within `node`.
fn find_key<'n>(node: &'n Node, name: &str) -> Option<&'n MarkedScalarNode> {
    let mut stack = vec![node];
    while let Some(n) = stack.pop() {
        match n {
            Node::Scalar(_) => {}
            Node::Sequence(q) => stack.extend(q.iter().rev()),
            Node::Mapping(m) => {
                if let Some(k) = m.keys().find(|k| k.as_str() == name) {
                    return Some(k);
                }
                stack.extend(m.values().rev());
            }
        }
    }
    None
}
