//! Build identity: the git commit the binary was built from and whether the working tree had
//! changes, so every record names the exact build that judged the unit.
//!
//! Sets `TRAGUS_BUILD` to `VERSION+git.COMMIT12` (`…​.dirty` when tracked files differ from the
//! commit), or `VERSION+unknown` when git or the repository is not there (a source tarball).

use std::process::Command;

fn git(args: &[&str]) -> Option<String> {
    let out = Command::new("git").args(args).output().ok()?;
    out.status
        .success()
        .then(|| String::from_utf8_lossy(&out.stdout).trim().to_string())
}

fn main() {
    let version = std::env::var("CARGO_PKG_VERSION").unwrap_or_default();
    let build = match git(&["rev-parse", "HEAD"]) {
        Some(commit) if commit.len() >= 12 => {
            let dirty = git(&["status", "--porcelain", "--untracked-files=no"])
                .map(|s| !s.is_empty())
                .unwrap_or(true);
            format!(
                "{version}+git.{}{}",
                &commit[..12],
                if dirty { ".dirty" } else { "" }
            )
        }
        _ => format!("{version}+unknown"),
    };
    println!("cargo:rustc-env=TRAGUS_BUILD={build}");
    // Re-run when the commit or the index moves, and when sources change (the dirty flag).
    for p in ["HEAD", "index"] {
        if let Some(path) = git(&["rev-parse", "--git-path", p]) {
            println!("cargo:rerun-if-changed={path}");
        }
    }
    if let Some(head_ref) = git(&["symbolic-ref", "-q", "HEAD"]) {
        if let Some(path) = git(&["rev-parse", "--git-path", &head_ref]) {
            println!("cargo:rerun-if-changed={path}");
        }
    }
    for p in ["src", "Cargo.toml", "Cargo.lock", "build.rs"] {
        println!("cargo:rerun-if-changed={p}");
    }
}
