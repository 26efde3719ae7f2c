//! Limit-line CSV files: the file form of a response check's `upper:` / `lower:`.
//!
//! Read in stage two ([`super`]) when a plan names a CSV path. The format, kept small so a
//! spreadsheet export or a hand edit both work:
//!
//! - two columns separated by a comma: frequency in Hz, level in dB;
//! - an optional header line (the first non-comment line, when neither field is a number);
//! - `#` starts a comment, to the end of the line; blank lines are skipped;
//! - a UTF-8 byte-order mark at the start is ignored, and so are `\r` line ends.
//!
//! Problems are reported at the CSV's own `path:line:col` (column of the offending field).
//! Ordering, point count and range are checked by the caller, the same way for CSV and
//! inline points.

use crate::plan::{Location, Problem};

/// One point read from a CSV file, with where its frequency was written.
#[derive(Debug, Clone, PartialEq)]
pub struct CsvPoint {
    /// Frequency, Hz.
    pub freq_hz: f64,
    /// Level, dB.
    pub level_db: f64,
    /// Where the frequency field is.
    pub location: Location,
}

/// Parse a limit-line CSV (`path` labels the problems): the points that could be read and
/// every problem found (lines with a problem give no point).
pub fn parse_limit_csv(text: &str, path: &str) -> (Vec<CsvPoint>, Vec<Problem>) {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut points = Vec::new();
    let mut problems = Vec::new();
    let mut seen_data_line = false;
    let at = |line: usize, col: usize| Location {
        path: path.to_string(),
        line,
        col,
    };
    for (i, raw_line) in text.split('\n').enumerate() {
        let line_no = i + 1;
        let line = raw_line.strip_suffix('\r').unwrap_or(raw_line);
        let content = match line.find('#') {
            Some(k) => &line[..k],
            None => line,
        };
        if content.trim().is_empty() {
            continue;
        }
        // Fields with their 1-based character column (after leading blanks).
        let mut fields = Vec::new();
        let mut start_char = 0usize;
        for part in content.split(',') {
            let lead = part.chars().take_while(|c| c.is_whitespace()).count();
            fields.push((part.trim(), start_char + lead + 1));
            start_char += part.chars().count() + 1;
        }
        let first_data_line = !seen_data_line;
        seen_data_line = true;
        if fields.len() != 2 {
            problems.push(Problem {
                location: at(line_no, fields[0].1),
                message: format!(
                    "expected 2 columns (hz,db), found {} column{}",
                    fields.len(),
                    if fields.len() == 1 { "" } else { "s" }
                ),
            });
            continue;
        }
        let parsed: Vec<Option<f64>> = fields.iter().map(|(f, _)| f.parse::<f64>().ok()).collect();
        if first_data_line && parsed.iter().all(Option::is_none) {
            continue; // header line
        }
        let mut values = [0.0f64; 2];
        let mut ok = true;
        for (k, ((field, col), value)) in fields.iter().zip(&parsed).enumerate() {
            let what = if k == 0 {
                "a frequency in Hz"
            } else {
                "a level in dB"
            };
            match value {
                Some(v) if v.is_finite() => values[k] = *v,
                _ => {
                    ok = false;
                    problems.push(Problem {
                        location: at(line_no, *col),
                        message: format!(
                            "expected {what}, found {}",
                            crate::plan::raw::found_scalar(field)
                        ),
                    });
                }
            }
        }
        if ok {
            points.push(CsvPoint {
                freq_hz: values[0],
                level_db: values[1],
                location: at(line_no, fields[0].1),
            });
        }
    }
    (points, problems)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_comments_blank_lines_and_crlf() {
        let text = "\u{feff}# lower limit\r\nhz, db\r\n\r\n20, -3 # low end\r\n 20000 ,-3\r\n";
        let (p, problems) = parse_limit_csv(text, "l.csv");
        assert!(problems.is_empty());
        assert_eq!(p.len(), 2);
        assert_eq!((p[0].freq_hz, p[0].level_db), (20.0, -3.0));
        assert_eq!((p[1].location.line, p[1].location.col), (5, 2));
    }

    #[test]
    fn bad_fields_are_located() {
        let text = "hz,db\n20,-3\n1k,-3\n30,x,1\n";
        let (p, e) = parse_limit_csv(text, "l.csv");
        assert_eq!(p.len(), 1);
        let s: Vec<String> = e.iter().map(|p| p.to_string()).collect();
        assert_eq!(
            s,
            [
                "l.csv:3:1: expected a frequency in Hz, found `1k`",
                "l.csv:4:1: expected 2 columns (hz,db), found 3 columns",
            ]
        );
    }
}
