//! HTML building blocks of the audit report: escaping, the page frame with its inline style
//! sheet (screen and print), anchors, and small formatters.
//!
//! The page is one file with nothing to fetch: inline CSS, inline SVG, no script, no font
//! file, no image. Verdicts are always words; colour only repeats them.

use std::fmt::Write as _;

/// Text safe inside HTML elements and quoted attributes.
pub(crate) fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// The anchor (`id`) of a unit's place in the report: `u-` and the serial. Serial
/// characters (letters, digits, `- _ . / +`, crate::serial) are kept as they are, valid
/// both in an `id` and in a `#fragment`; any other byte (a record older than the serial
/// rule) becomes `~` and two hex digits, which no serial contains, so anchors never
/// collide.
pub fn unit_anchor(serial: &str) -> String {
    let mut id = String::from("u-");
    for b in serial.bytes() {
        if b.is_ascii_alphanumeric() || crate::serial::SERIAL_PUNCTUATION.as_bytes().contains(&b) {
            id.push(char::from(b));
        } else {
            let _ = write!(id, "~{b:02X}");
        }
    }
    id
}

/// `86.8 %`, or an em dash when undefined.
pub(crate) fn pct(x: Option<f64>) -> String {
    x.map_or_else(|| "—".into(), |v| format!("{:.1} %", 100.0 * v))
}

/// A number with `decimals`, or an em dash.
pub(crate) fn num(x: Option<f64>, decimals: usize) -> String {
    match x {
        Some(v) if v.is_finite() => format!("{v:.decimals$}"),
        _ => "—".into(),
    }
}

/// The CSS class of a verdict word (`pass`, `fail`, `retest`; `other` otherwise).
pub(crate) fn verdict_class(word: &str) -> &'static str {
    match word {
        "pass" => "pass",
        "fail" => "fail",
        "retest" => "retest",
        _ => "other",
    }
}

/// A verdict as a labelled word.
pub(crate) fn verdict_badge(word: &str) -> String {
    format!(
        r#"<span class="v {}">{}</span>"#,
        verdict_class(word),
        escape(&word.to_uppercase())
    )
}

/// The style sheet: a quiet paper-and-ink screen layout and a print layout (white page,
/// every unit on its own page, no navigation).
const CSS: &str = r#"
:root{--ink:#1f2933;--muted:#52606d;--rule:#d5dae1;--paper:#f7f6f2;--card:#ffffff;
--pass:#2d6a4f;--fail:#b42318;--retest:#9a5b00;--accent:#2f4b7c}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
header.top{background:var(--card);border-bottom:3px solid var(--accent);padding:18px 28px}
header.top h1{margin:0;font-size:22px;letter-spacing:.01em}
header.top p{margin:4px 0 0;color:var(--muted)}
nav.toc{padding:8px 28px;background:var(--card);border-bottom:1px solid var(--rule);font-size:13px}
nav.toc a{margin-right:14px;color:var(--accent);text-decoration:none}
main{max-width:1180px;margin:0 auto;padding:8px 28px 40px}
section.block{background:var(--card);border:1px solid var(--rule);border-radius:6px;padding:14px 18px;margin:18px 0}
h2{font-size:18px;margin:0 0 10px;border-left:4px solid var(--accent);padding-left:8px}
h3{font-size:15px;margin:16px 0 6px}
h4{font-size:13px;margin:12px 0 4px;color:var(--muted)}
table{border-collapse:collapse;margin:6px 0 10px;font-size:13px}
th,td{border-bottom:1px solid var(--rule);padding:3px 8px;text-align:left;vertical-align:top}
th{background:#eef1f5;font-weight:600}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}
code,.hash{font-family:ui-monospace,"SFMono-Regular",Menlo,Consolas,monospace;font-size:12px;word-break:break-all}
.v{font-weight:700;padding:0 5px;border-radius:3px;font-size:12px;letter-spacing:.03em}
.v.pass{color:var(--pass);background:#e3f1ea}.v.fail{color:var(--fail);background:#f9e4e2}
.v.retest{color:var(--retest);background:#f8ecd9}.v.other{color:var(--muted);background:#eceff3}
.status{font-size:16px;font-weight:700;padding:8px 12px;border-radius:4px;display:inline-block}
.status.ok{color:var(--pass);background:#e3f1ea}.status.bad{color:var(--fail);background:#f9e4e2}
.kpi{display:flex;flex-wrap:wrap;gap:10px;margin:6px 0 12px}
.kpi div{background:#eef1f5;border-radius:5px;padding:8px 12px;min-width:120px}
.kpi b{display:block;font-size:20px}
.kpi span{color:var(--muted);font-size:12px}
figure{margin:10px 0}
figcaption{color:var(--muted);font-size:12px;margin-top:2px}
svg{max-width:100%;height:auto;display:block}
.key{display:inline-block;width:18px;height:3px;vertical-align:middle;margin:0 4px 0 10px}
.grid2{display:grid;grid-template-columns:repeat(auto-fill,minmax(520px,1fr));gap:12px}
.index{columns:8 110px;font-size:12px;column-gap:12px}
.index a{display:block;text-decoration:none;color:var(--ink)}
.index a.fail{color:var(--fail)}.index a.retest{color:var(--retest)}
section.unit{border-top:2px solid var(--rule);padding-top:6px;margin-top:18px}
section.unit h3{margin-top:6px}
.note{color:var(--muted);font-size:12px}
ol.foot{font-size:12px;color:var(--muted)}
details pre{white-space:pre-wrap;font-size:11px;max-height:420px;overflow:auto;background:#f3f4f6;padding:8px}
@media print{
 body{background:#fff;font-size:11px}
 header.top,section.block,nav.toc{background:#fff;border-color:#999}
 nav.toc,.index{display:none}
 section.block{border:none;padding:0;margin:10px 0;break-inside:auto}
 section.unit{break-before:page}
 figure,table{break-inside:avoid}
 a{color:inherit;text-decoration:none}
 th{background:#fff;border-bottom:1px solid #000}
 .kpi div{background:#fff;border:1px solid #999}
 .v.pass,.v.fail,.v.retest,.v.other,.status.ok,.status.bad{background:#fff;border:1px solid currentColor}
}
"#;

/// Open the page: doctype, head with the inline style sheet, and the title bar.
pub(crate) fn open_page(out: &mut String, title: &str, subtitle: &str) {
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{t}</title>\n<style>{CSS}</style>\n</head>\n<body>\n\
         <header class=\"top\"><h1>{t}</h1><p>{s}</p></header>\n",
        t = escape(title),
        s = subtitle
    );
}

/// Close the page.
pub(crate) fn close_page(out: &mut String) {
    out.push_str("</main>\n</body>\n</html>\n");
}

/// A table head row from column titles; a title starting with `#` is right-aligned
/// (numbers) and shown without the `#`.
pub(crate) fn table_head(out: &mut String, class: &str, columns: &[&str]) {
    let _ = write!(out, "<table class=\"{class}\"><thead><tr>");
    for c in columns {
        match c.strip_prefix('#') {
            Some(c) => {
                let _ = write!(out, "<th class=\"n\">{}</th>", escape(c));
            }
            None => {
                let _ = write!(out, "<th>{}</th>", escape(c));
            }
        }
    }
    out.push_str("</tr></thead><tbody>\n");
}

/// Close a table opened with [`table_head`].
pub(crate) fn table_end(out: &mut String) {
    out.push_str("</tbody></table>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn anchors_keep_serials_and_encode_anything_else() {
        assert_eq!(unit_anchor("E2-000123"), "u-E2-000123");
        assert_eq!(unit_anchor("A/b+c_d.e"), "u-A/b+c_d.e");
        assert_eq!(unit_anchor("a b"), "u-a~20b");
        assert_ne!(unit_anchor("a~20b"), unit_anchor("a b"));
    }

    #[test]
    fn escaping_covers_markup_and_quotes() {
        assert_eq!(
            escape(r#"<a href="x">&'"#),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }
}
