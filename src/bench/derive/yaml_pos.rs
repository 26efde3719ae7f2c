//! Where things are in a YAML text: byte ranges of scalars as written, of flow lists and
//! mappings (matched bracket by bracket), and of whole check items, from the parser's
//! marks (which give the start of every node, counted in characters).

use marked_yaml::types::{MarkedMappingNode, MarkedScalarNode};
use marked_yaml::Node;
use std::ops::Range;

/// The old text with the byte offset of every character (the parser counts characters).
pub(super) struct Text<'a> {
    text: &'a str,
    byte_of_char: Vec<usize>,
}

impl<'a> Text<'a> {
    pub(super) fn new(text: &'a str) -> Self {
        let mut byte_of_char: Vec<usize> = text.char_indices().map(|(b, _)| b).collect();
        byte_of_char.push(text.len());
        Text { text, byte_of_char }
    }

    pub(super) fn start_of(&self, span: &marked_yaml::Span) -> Result<usize, String> {
        let m = span.start().ok_or("a YAML node without a position")?;
        self.byte_of_char
            .get(m.character())
            .copied()
            .ok_or_else(|| format!("a YAML position past the end (line {})", m.line()))
    }

    /// The bytes of a scalar as written (quotes included).
    pub(super) fn scalar_range(&self, s: &MarkedScalarNode) -> Result<Range<usize>, String> {
        let b = self.start_of(s.span())?;
        let rest = &self.text[b..];
        let end = match rest.chars().next() {
            Some('"') => {
                let mut escaped = false;
                rest.char_indices()
                    .skip(1)
                    .find(|&(_, c)| {
                        let close = c == '"' && !escaped;
                        escaped = c == '\\' && !escaped;
                        close
                    })
                    .map(|(i, _)| b + i + 1)
            }
            Some('\'') => {
                let bytes = rest.as_bytes();
                let mut i = 1;
                let mut end = None;
                while i < bytes.len() {
                    if bytes[i] == b'\'' {
                        if bytes.get(i + 1) == Some(&b'\'') {
                            i += 2;
                            continue;
                        }
                        end = Some(b + i + 1);
                        break;
                    }
                    i += 1;
                }
                end
            }
            _ => rest.starts_with(s.as_str()).then(|| b + s.as_str().len()),
        };
        end.map(|e| b..e).ok_or_else(|| {
            let m = s
                .span()
                .start()
                .map(|m| (m.line(), m.column()))
                .unwrap_or((0, 0));
            format!(
                "line {}:{}: cannot find the value `{}` as written (a multi-line scalar?)",
                m.0,
                m.1,
                s.as_str()
            )
        })
    }

    /// The bytes of a flow list or mapping starting at `start` (`[`/`{` to its match).
    pub(super) fn flow_range(&self, start: usize) -> Result<Range<usize>, String> {
        let bytes = self.text.as_bytes();
        let mut depth = 0usize;
        let mut i = start;
        let mut quote: Option<u8> = None;
        while i < bytes.len() {
            let c = bytes[i];
            match quote {
                Some(q) => {
                    if c == b'\\' && q == b'"' {
                        i += 1;
                    } else if c == q {
                        quote = None;
                    }
                }
                None => match c {
                    b'"' | b'\'' => quote = Some(c),
                    b'[' | b'{' => depth += 1,
                    b']' | b'}' => {
                        depth -= 1;
                        if depth == 0 {
                            return Ok(start..i + 1);
                        }
                    }
                    b'#' if i > 0 && bytes[i - 1].is_ascii_whitespace() => {
                        while i < bytes.len() && bytes[i] != b'\n' {
                            i += 1;
                        }
                    }
                    _ => {}
                },
            }
            i += 1;
        }
        Err(format!("an unclosed flow collection at byte {start}"))
    }

    /// The bytes of a value: a scalar, or a flow list or mapping.
    pub(super) fn value_range(&self, node: &Node) -> Result<Range<usize>, String> {
        match node {
            Node::Scalar(s) => self.scalar_range(s),
            _ => {
                let b = self.start_of(node.span())?;
                if matches!(self.text.as_bytes().get(b), Some(b'[' | b'{')) {
                    self.flow_range(b)
                } else {
                    Err(format!(
                        "line {}: expected a scalar or a flow list ([…]) to replace, found a \
                         block list or mapping",
                        node.span().start().map_or(0, |m| m.line())
                    ))
                }
            }
        }
    }

    pub(super) fn is_flow(&self, map: &MarkedMappingNode) -> bool {
        self.start_of(map.span())
            .is_ok_and(|b| self.text.as_bytes().get(b) == Some(&b'{'))
    }

    /// The end of the last thing written for `node`.
    pub(super) fn node_end(&self, node: &Node) -> Result<usize, String> {
        match node {
            Node::Scalar(s) => Ok(self.scalar_range(s)?.end),
            _ => {
                let b = self.start_of(node.span())?;
                if matches!(self.text.as_bytes().get(b), Some(b'[' | b'{')) {
                    return Ok(self.flow_range(b)?.end);
                }
                let mut end = b;
                match node {
                    Node::Sequence(seq) => {
                        for n in seq.iter() {
                            end = end.max(self.node_end(n)?);
                        }
                    }
                    Node::Mapping(map) => {
                        for (k, n) in map.iter() {
                            end = end.max(self.scalar_range(k)?.end).max(self.node_end(n)?);
                        }
                    }
                    Node::Scalar(_) => {}
                }
                Ok(end)
            }
        }
    }

    /// Whole lines holding a check item, its `-` included.
    pub(super) fn item_block(&self, item: &MarkedMappingNode) -> Result<Range<usize>, String> {
        let first_key = item
            .keys()
            .map(|k| self.start_of(k.span()))
            .collect::<Result<Vec<_>, _>>()?
            .into_iter()
            .min()
            .ok_or("an empty check item")?;
        let flow_start = self.start_of(item.span())?;
        let start_at = if self.is_flow(item) {
            flow_start
        } else {
            first_key
        };
        let mut start = self.line_start(start_at);
        if !self.text[start..start_at].contains('-') {
            // `-` alone on the line before.
            let prev = self.line_start(start.saturating_sub(1));
            if start > 0 && self.text[prev..start].trim() == "-" {
                start = prev;
            } else {
                return Err(format!(
                    "cannot find the `-` of the check item at byte {start_at}"
                ));
            }
        }
        let end = self.node_end(&Node::from(item.clone()))?;
        let eol = self.line_end(end);
        let end = if eol < self.text.len() { eol + 1 } else { eol };
        Ok(start..end)
    }

    pub(super) fn line_start(&self, b: usize) -> usize {
        self.text[..b].rfind('\n').map_or(0, |i| i + 1)
    }

    /// The byte of the `\n` ending the line of `b` (or the text's end).
    pub(super) fn line_end(&self, b: usize) -> usize {
        self.text[b..].find('\n').map_or(self.text.len(), |i| b + i)
    }
}
