//! Diagnostics of project files: where a problem is and what it says.
//!
//! Every loader reports all problems of a file at once, each as `path:line:col: message`
//! ([`Problem`]'s `Display`), the message saying what was expected and what was found.

use marked_yaml::{Span, Spanned};
use std::fmt;

/// A position in a file's text: 1-based line and column (0 when unknown).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, PartialOrd, Ord)]
pub struct Pos {
    /// 1-based line.
    pub line: usize,
    /// 1-based column, counted in characters.
    pub col: usize,
}

impl Pos {
    /// The start of a span (unknown when the span has no start).
    pub fn of(span: &Span) -> Pos {
        span.start().map_or(Pos::default(), |m| Pos {
            line: m.line(),
            col: m.column(),
        })
    }

    /// The position of a spanned value.
    pub fn of_value<T>(value: &Spanned<T>) -> Pos {
        Pos::of(value.span())
    }

    /// A [`Location`] in the file labelled `path`.
    pub fn at(self, path: &str) -> Location {
        Location {
            path: path.to_string(),
            line: self.line,
            col: self.col,
        }
    }
}

/// A position in a source file, 1-based line and column.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// File path as given by the user.
    pub path: String,
    /// 1-based line (0 when unknown).
    pub line: usize,
    /// 1-based column (0 when unknown).
    pub col: usize,
}

/// One problem found in a file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// Where the problem is.
    pub location: Location,
    /// What was expected and what was found, lowercase, no trailing period.
    pub message: String,
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}:{}:{}: {}",
            self.location.path, self.location.line, self.location.col, self.message
        )
    }
}

/// Problems of the main file (`main_path`: a plan, a coupler model, …) first, then those of
/// the files it names (limit or impedance CSVs) by path; within a file by line and column,
/// keeping the order found for the same position.
pub fn sort_problems(problems: &mut [Problem], main_path: &str) {
    problems.sort_by(|a, b| {
        let key = |p: &Problem| {
            (
                p.location.path != main_path,
                p.location.path.clone(),
                p.location.line,
                p.location.col,
            )
        };
        key(a).cmp(&key(b))
    });
}
