//! No panic on any input: truncated and mutated plans, garbage, deep nesting.
//!
//! Every outcome must be `Ok` with a consistent hash, or `Err` with at least one problem,
//! each located (line and column ≥ 1, within the text) and worded as the style requires
//! (lowercase start, no trailing period). Randomness is seeded (ChaCha8, fixed seeds).

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use tragus::plan::{hash, load_plan, load_plan_str, Plan, PlanError};

/// Check one outcome; `n_lines` bounds the line numbers of problems in the plan file.
fn check(result: Result<Plan, PlanError>, plan_path: &str, n_lines: usize, what: &str) {
    match result {
        Ok(plan) => {
            assert_eq!(plan.sha256.len(), 64, "{what}");
            assert_eq!(plan.sha256, hash::plan_sha256(&plan), "{what}");
        }
        Err(PlanError::Invalid(problems)) => {
            assert!(!problems.is_empty(), "{what}: empty problem list");
            for p in &problems {
                let l = &p.location;
                assert!(l.line >= 1 && l.col >= 1, "{what}: unlocated {p}");
                if l.path == plan_path {
                    assert!(l.line <= n_lines + 1, "{what}: line past the end: {p}");
                }
                let first = p.message.chars().next();
                assert!(first.is_some_and(|c| !c.is_uppercase()), "{what}: {p}");
                assert!(!p.message.ends_with('.'), "{what}: {p}");
                assert_eq!(
                    p.to_string(),
                    format!("{}:{}:{}: {}", l.path, l.line, l.col, p.message)
                );
            }
        }
        Err(e @ PlanError::Io { .. }) => panic!("{what}: unexpected i/o error {e}"),
    }
}

fn check_str(text: &str, path: &str, what: &str) {
    let n_lines = text.split('\n').count();
    check(load_plan_str(text, Path::new(path)), path, n_lines, what);
}

const DEMO: &str = "plans/demo-earbud.yaml";
const LOOPBACK: &str = "plans/loopback.yaml";

#[test]
fn truncation_at_every_byte_never_panics() {
    let dir = tempfile::tempdir().unwrap();
    for path in [DEMO, LOOPBACK] {
        let bytes = std::fs::read(path).unwrap();
        for cut in 0..=bytes.len() {
            let head = &bytes[..cut];
            match std::str::from_utf8(head) {
                Ok(text) => check_str(text, path, &format!("{path} cut at {cut}")),
                Err(_) => {
                    // Mid-character cuts go through the file reader's UTF-8 check.
                    let p = dir.path().join("cut.yaml");
                    std::fs::write(&p, head).unwrap();
                    let label = p.display().to_string();
                    check(
                        load_plan(&p),
                        &label,
                        usize::MAX - 1,
                        &format!("{path} cut at {cut}"),
                    );
                }
            }
        }
        // The whole file is the valid plan.
        assert!(load_plan(Path::new(path)).is_ok());
    }
}

/// Characters that mean something to YAML, to numbers or to our schema.
const PALETTE: &[char] = &[
    ':', '-', '[', ']', '{', '}', ',', '#', '&', '*', '!', '|', '>', '\'', '"', '\n', ' ', '\t',
    '%', '@', '`', '?', '0', '1', '9', '.', 'e', 'x', '/', '\\', '\0', '\u{feff}', 'é', '\r',
];

fn mutate(rng: &mut ChaCha8Rng, text: &str) -> String {
    let mut chars: Vec<char> = text.chars().collect();
    for _ in 0..rng.random_range(1..=3) {
        let n = chars.len().max(1);
        match rng.random_range(0..6) {
            0 if !chars.is_empty() => {
                let i = rng.random_range(0..chars.len());
                chars[i] = PALETTE[rng.random_range(0..PALETTE.len())];
            }
            1 if !chars.is_empty() => {
                let i = rng.random_range(0..chars.len());
                let j = (i + rng.random_range(1..20)).min(chars.len());
                chars.drain(i..j);
            }
            2 => {
                let i = rng.random_range(0..=chars.len().min(n));
                for _ in 0..rng.random_range(1..5) {
                    chars.insert(i, PALETTE[rng.random_range(0..PALETTE.len())]);
                }
            }
            _ => {
                // Line-level: duplicate, swap or re-indent a line.
                let s: String = chars.iter().collect();
                let mut lines: Vec<String> = s.split('\n').map(String::from).collect();
                let a = rng.random_range(0..lines.len());
                let b = rng.random_range(0..lines.len());
                match rng.random_range(0..3) {
                    0 => {
                        let l = lines[a].clone();
                        lines.insert(b, l);
                    }
                    1 => lines.swap(a, b),
                    _ => {
                        if rng.random_bool(0.5) {
                            lines[a].insert_str(0, "  ");
                        } else {
                            lines[a] = lines[a].trim_start().to_string();
                        }
                    }
                }
                chars = lines.join("\n").chars().collect();
            }
        }
    }
    chars.into_iter().collect()
}

#[test]
fn seeded_mutations_never_panic() {
    let demo = std::fs::read_to_string(DEMO).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    let mut n_ok = 0;
    for i in 0..3000 {
        let text = mutate(&mut rng, &demo);
        let result = load_plan_str(&text, Path::new(DEMO));
        n_ok += usize::from(result.is_ok());
        check(
            result,
            DEMO,
            text.split('\n').count(),
            &format!("mutation {i}:\n{text}"),
        );
    }
    // Some mutations only touch comments or spacing; most break something. Both outcomes
    // must occur, or the mutator is not exercising the validator.
    assert!(n_ok > 0 && n_ok < 3000, "{n_ok} of 3000 mutations loaded");
}

#[test]
fn garbage_never_panics() {
    let mut inputs: Vec<String> = [
        "",
        "\0",
        "\u{feff}",
        "[",
        "]]]]",
        "{",
        ":",
        "- - -",
        "? a",
        "? [a]: b",
        "!!binary x",
        "a: &x [1]\nb: *x\n",
        "*x",
        "%YAML 1.2\n---\na: 1\n",
        "'unterminated",
        "\"\\xZZ\"",
        "\t",
        "---\n...\n",
        "plan: p\n---\nplan: q\n",
        "~",
        "null",
        "true",
        "42",
        "revision: 999999999999999999999999999999999999999999999",
        "stimulus: {duration_s: nan, level_dbfs: inf, start_hz: 1e309, stop_hz: -0}",
        "channels: [[[]]]\nchecks: [[{}]]\n",
        "checks: [{upper: {a: 1}}]",
        "checks: [{kind: response, upper: [[1, 2, 3], [], [x, y]], normalize: []}]",
        "analysis: [1, 2]\nrig: 7\n",
        "plan:\n  - - - -\n",
    ]
    .map(String::from)
    .to_vec();
    inputs.push("a".repeat(100_000));
    inputs.push(format!("{}: 1", "k".repeat(10_000)));
    inputs.push(format!("a: {}", "[".repeat(100_000)));
    inputs.push(format!("a: {}{}", "[".repeat(200), "]".repeat(200)));
    inputs.push(format!("a:\n  {}x", "- ".repeat(50_000)));
    inputs.push(format!("a: {}1{}", "{b: ".repeat(300), "}".repeat(300)));
    let mut nested = String::from("a:\n");
    for i in 0..3000 {
        nested.push_str(&format!("{}k:\n", " ".repeat(i + 1)));
    }
    inputs.push(nested);
    for (i, text) in inputs.iter().enumerate() {
        check_str(text, "g.yaml", &format!("garbage {i}"));
    }
    let deep = load_plan_str(
        &format!("a:\n  {}x", "- ".repeat(50_000)),
        Path::new("g.yaml"),
    );
    // Level 1 is the top mapping, level 2 the first `- ` (column 3 of line 2); level 17,
    // the first too deep, is the 16th `- `, at column 3 + 2·15 = 33.
    assert_eq!(
        deep.unwrap_err().to_string(),
        "g.yaml:2:33: expected at most 16 levels of nested mappings and lists, found deeper \
         nesting"
    );
}

#[test]
fn random_bytes_never_panic() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("r.yaml");
    let label = path.display().to_string();
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    for i in 0..300 {
        let n = rng.random_range(0..400);
        let bytes: Vec<u8> = (0..n).map(|_| rng.random()).collect();
        std::fs::write(&path, &bytes).unwrap();
        check(
            load_plan(&path),
            &label,
            usize::MAX - 1,
            &format!("bytes {i}"),
        );
        // The same bytes made valid UTF-8, through the text entry point.
        let text = String::from_utf8_lossy(&bytes);
        check_str(&text, "r.yaml", &format!("lossy bytes {i}"));
    }
}
