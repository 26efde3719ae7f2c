//! The layers of `src/` (DEVELOPERS.md, "Layers"): a module may import only from its own
//! layer or below, and no two modules import each other, directly or round a cycle.
//!
//! The check reads every `crate::…` path in `src/` (in `use` lines and inline, braces
//! expanded; comments skipped), maps the importing file and the imported path to a module
//! of the table below by the longest prefix, and fails on an import that points to a higher
//! layer or on a cycle between modules.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// The layer of every module, by path prefix (the longest prefix wins). The crate root
/// (`Verdict`, `VERSION`) is foundation.
const LAYERS: &[(&str, u8, &str)] = &[
    ("", 0, "crate root: Verdict, VERSION"),
    ("units", 0, "foundation"),
    ("digest", 0, "foundation"),
    ("config", 0, "foundation"),
    ("serial", 0, "foundation"),
    ("wav", 0, "foundation"),
    ("dsp", 0, "foundation"),
    ("acoustics", 1, "physics"),
    ("plan", 2, "configuration"),
    ("station", 2, "configuration"),
    ("keys", 2, "configuration"),
    ("models", 2, "configuration"),
    ("calibration::file", 2, "configuration"),
    ("stimulus", 3, "stages"),
    ("rig", 3, "stages"),
    ("analysis", 3, "stages"),
    ("correction", 3, "stages"),
    ("checks", 3, "stages"),
    ("safety", 3, "stages"),
    ("calibration", 3, "stages"),
    ("limits", 3, "stages"),
    ("result", 4, "records"),
    ("store", 4, "records"),
    ("report", 4, "records"),
    ("bench", 5, "engine"),
    ("cli", 6, "command line"),
];

/// The table entry a module path belongs to (longest prefix by segments).
fn module_of(path: &[String]) -> Option<&'static (&'static str, u8, &'static str)> {
    LAYERS
        .iter()
        .filter(|(prefix, _, _)| {
            let p: Vec<&str> = prefix.split("::").filter(|s| !s.is_empty()).collect();
            p.len() <= path.len() && p.iter().zip(path).all(|(a, b)| *a == b)
        })
        .max_by_key(|(prefix, _, _)| prefix.split("::").filter(|s| !s.is_empty()).count())
}

/// Source text without comments and string literals (so `crate::` in a doc or a message is
/// no import).
fn code_only(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    let b = text.as_bytes();
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'/' && b.get(i + 1) == Some(&b'/') {
            while i < b.len() && b[i] != b'\n' {
                i += 1;
            }
        } else if b[i] == b'/' && b.get(i + 1) == Some(&b'*') {
            i += 2;
            while i + 1 < b.len() && !(b[i] == b'*' && b[i + 1] == b'/') {
                i += 1;
            }
            i += 2;
        } else if b[i] == b'"' {
            i += 1;
            while i < b.len() && b[i] != b'"' {
                if b[i] == b'\\' {
                    i += 1;
                }
                i += 1;
            }
            i += 1;
            out.push_str("\"\"");
        } else if b[i] == b'\'' && b.get(i + 2) == Some(&b'\'') {
            // A char literal such as '"' (lifetimes have no closing quote two bytes on).
            i += 3;
        } else {
            out.push(b[i] as char);
            i += 1;
        }
    }
    out
}

/// Every path named after `crate::` in `code`, with `{…}` groups expanded.
fn crate_paths(code: &str) -> Vec<Vec<String>> {
    let mut paths = Vec::new();
    let mut rest = code;
    while let Some(at) = rest.find("crate::") {
        let before = rest[..at].chars().last();
        rest = &rest[at + "crate::".len()..];
        if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
            continue; // e.g. `mycrate::`
        }
        let (found, used) = parse_tree(rest);
        paths.extend(found);
        rest = &rest[used..];
    }
    paths
}

/// Parse `a::b::{c, d::e}` at the start of `s`: the paths and the bytes consumed.
fn parse_tree(s: &str) -> (Vec<Vec<String>>, usize) {
    let bytes = s.as_bytes();
    let mut i = 0;
    let mut prefix: Vec<String> = Vec::new();
    loop {
        while i < bytes.len() && bytes[i].is_ascii_whitespace() {
            i += 1;
        }
        if i < bytes.len() && bytes[i] == b'{' {
            i += 1;
            let mut out = Vec::new();
            loop {
                let (inner, used) = parse_tree(&s[i..]);
                i += used;
                for p in inner {
                    let mut full = prefix.clone();
                    full.extend(p);
                    out.push(full);
                }
                while i < bytes.len() && bytes[i].is_ascii_whitespace() {
                    i += 1;
                }
                match bytes.get(i) {
                    Some(b',') => {
                        i += 1;
                        while i < bytes.len() && bytes[i].is_ascii_whitespace() {
                            i += 1;
                        }
                        if bytes.get(i) == Some(&b'}') {
                            i += 1;
                            return (out, i);
                        }
                    }
                    Some(b'}') => return (out, i + 1),
                    _ => return (out, i),
                }
            }
        }
        let start = i;
        while i < bytes.len() && (bytes[i].is_ascii_alphanumeric() || bytes[i] == b'_') {
            i += 1;
        }
        if start == i {
            return (vec![prefix], i);
        }
        prefix.push(s[start..i].to_string());
        if s[i..].starts_with("::") {
            i += 2;
        } else {
            return (vec![prefix], i);
        }
    }
}

/// The module path of a file under `src/` (`calibration/file.rs` → `calibration::file`).
fn file_module(rel: &Path) -> Vec<String> {
    let mut parts: Vec<String> = rel
        .iter()
        .map(|p| p.to_string_lossy().into_owned())
        .collect();
    let last = parts.pop().unwrap_or_default();
    let stem = last.trim_end_matches(".rs");
    if stem != "mod" && stem != "lib" && stem != "main" {
        parts.push(stem.to_string());
    }
    parts
}

/// One import that breaks the layering, in words.
fn violations(files: &[(Vec<String>, String)]) -> (Vec<String>, Graph) {
    let mut bad = Vec::new();
    let mut examples = BTreeMap::new();
    let mut graph: BTreeMap<&'static str, BTreeSet<&'static str>> = BTreeMap::new();
    for (module, text) in files {
        let Some(from) = module_of(module) else {
            bad.push(format!("{}: not in the layer table", module.join("::")));
            continue;
        };
        for path in crate_paths(&code_only(text)) {
            let Some(to) = module_of(&path) else {
                bad.push(format!(
                    "{}: `crate::{}` is in no layer",
                    module.join("::"),
                    path.join("::")
                ));
                continue;
            };
            if to.1 > from.1 {
                bad.push(format!(
                    "{} (layer {}, {}) imports crate::{} (layer {}, {})",
                    module.join("::"),
                    from.1,
                    from.2,
                    path.join("::"),
                    to.1,
                    to.2
                ));
            }
            if from.0 != to.0 && !to.0.is_empty() {
                graph.entry(from.0).or_default().insert(to.0);
                examples.entry((from.0, to.0)).or_insert_with(|| {
                    format!("{} → crate::{}", module.join("::"), path.join("::"))
                });
            }
        }
    }
    (
        bad,
        Graph {
            edges: graph,
            examples,
        },
    )
}

/// Imports between modules of the table: who imports whom, and one import for each pair.
struct Graph {
    edges: BTreeMap<&'static str, BTreeSet<&'static str>>,
    examples: BTreeMap<(&'static str, &'static str), String>,
}

impl Graph {
    /// The imports inside one cycle, one example each, so a failure says what to cut.
    fn explain(&self, members: &str) -> String {
        let m: Vec<&str> = members.split(" ↔ ").collect();
        self.examples
            .iter()
            .filter(|((a, b), _)| m.contains(a) && m.contains(b))
            .map(|(_, e)| format!("    {e}"))
            .collect::<Vec<_>>()
            .join("\n")
    }
}

/// Every cycle between modules, each named once by its members.
fn cycles(graph: &BTreeMap<&'static str, BTreeSet<&'static str>>) -> Vec<String> {
    // Tarjan's strongly connected components: a component of more than one module is a
    // cycle.
    struct State<'g> {
        graph: &'g BTreeMap<&'static str, BTreeSet<&'static str>>,
        index: BTreeMap<&'static str, usize>,
        low: BTreeMap<&'static str, usize>,
        stack: Vec<&'static str>,
        on_stack: BTreeSet<&'static str>,
        next: usize,
        found: Vec<String>,
    }
    fn visit(s: &mut State, v: &'static str) {
        s.index.insert(v, s.next);
        s.low.insert(v, s.next);
        s.next += 1;
        s.stack.push(v);
        s.on_stack.insert(v);
        let edges: Vec<&'static str> = s.graph.get(v).into_iter().flatten().copied().collect();
        for w in edges {
            if !s.index.contains_key(w) {
                visit(s, w);
                let lw = s.low[w];
                let lv = s.low[v];
                s.low.insert(v, lv.min(lw));
            } else if s.on_stack.contains(w) {
                let iw = s.index[w];
                let lv = s.low[v];
                s.low.insert(v, lv.min(iw));
            }
        }
        if s.low[v] == s.index[v] {
            let mut members = Vec::new();
            while let Some(w) = s.stack.pop() {
                s.on_stack.remove(w);
                members.push(w);
                if w == v {
                    break;
                }
            }
            if members.len() > 1 {
                members.sort();
                s.found.push(members.join(" ↔ "));
            }
        }
    }
    let mut s = State {
        graph,
        index: BTreeMap::new(),
        low: BTreeMap::new(),
        stack: Vec::new(),
        on_stack: BTreeSet::new(),
        next: 0,
        found: Vec::new(),
    };
    let nodes: Vec<&'static str> = graph.keys().copied().collect();
    for v in nodes {
        if !s.index.contains_key(v) {
            visit(&mut s, v);
        }
    }
    s.found
}

fn read_src() -> Vec<(Vec<String>, String)> {
    fn walk(dir: &Path, root: &Path, out: &mut Vec<(Vec<String>, String)>) {
        let mut entries: Vec<_> = std::fs::read_dir(dir).unwrap().flatten().collect();
        entries.sort_by_key(|e| e.path());
        for e in entries {
            let p = e.path();
            if p.is_dir() {
                walk(&p, root, out);
            } else if p.extension().is_some_and(|x| x == "rs") {
                let rel = p.strip_prefix(root).unwrap();
                out.push((file_module(rel), std::fs::read_to_string(&p).unwrap()));
            }
        }
    }
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut out = Vec::new();
    walk(&root, &root, &mut out);
    out
}

#[test]
fn no_module_imports_a_higher_layer_and_there_are_no_cycles() {
    let files = read_src();
    assert!(files.len() > 50, "src/ read: {} files", files.len());
    let (bad, graph) = violations(&files);
    let loops: Vec<String> = cycles(&graph.edges)
        .into_iter()
        .map(|c| format!("{c}\n{}", graph.explain(&c)))
        .collect();
    assert!(
        bad.is_empty() && loops.is_empty(),
        "layer violations:\n  {}\nimport cycles:\n  {}",
        bad.join("\n  "),
        loops.join("\n  ")
    );
}

// The checker itself: an upward import and a cycle in a made-up tree are found, and braces,
// comments and strings are read as the compiler reads them.
#[test]
fn the_checker_finds_an_upward_import_and_a_cycle() {
    let files = vec![
        (
            vec!["dsp".to_string(), "sweep".to_string()],
            "use crate::units::P_REF_PA;\n// crate::cli in a comment\nlet s = \"crate::bench\";\nuse crate::{wav, store::Store};\n".to_string(),
        ),
        (vec!["checks".to_string()], "use crate::safety::x;".to_string()),
        (vec!["safety".to_string()], "fn f() { crate::checks::judge(); }".to_string()),
    ];
    let (bad, graph) = violations(&files);
    let graph = graph.edges;
    assert_eq!(bad.len(), 1, "{bad:?}");
    assert!(
        bad[0].starts_with("dsp::sweep (layer 0, foundation) imports crate::store::Store (layer 4"),
        "{bad:?}"
    );
    assert_eq!(cycles(&graph), vec!["checks ↔ safety".to_string()]);
    assert_eq!(
        crate_paths("use crate::a::{b, c::{d, e}, f};"),
        vec![
            vec!["a", "b"],
            vec!["a", "c", "d"],
            vec!["a", "c", "e"],
            vec!["a", "f"]
        ]
        .into_iter()
        .map(|v| v.into_iter().map(String::from).collect::<Vec<_>>())
        .collect::<Vec<_>>()
    );
}
