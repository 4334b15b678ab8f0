//! Architecture check: the crate's modules form layers (the order of
//! `pub mod` in `src/lib.rs`, lowest first); a module uses only modules
//! listed before it — no upward import and so no import cycle — and the
//! kind-neutral pipeline kernel names no kind.

use std::path::{Path, PathBuf};

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        let p = e.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// The code of a file without comment lines (doc links may name any module).
fn code(p: &Path) -> String {
    std::fs::read_to_string(p).unwrap().lines().filter(|l| !l.trim_start().starts_with("//")).collect::<Vec<_>>().join("\n")
}

/// Top-level modules in layer order, from lib.rs.
fn layers() -> Vec<String> {
    let lib = std::fs::read_to_string(root().join("src/lib.rs")).unwrap();
    lib.lines().filter_map(|l| l.strip_prefix("pub mod ")).map(|m| m.trim_end_matches(';').to_string()).collect()
}

#[test]
fn modules_use_only_lower_layers() {
    let order = layers();
    assert!(order.len() >= 15, "{order:?}");
    let rank = |m: &str| order.iter().position(|x| x == m);
    let mut files = Vec::new();
    rust_files(&root().join("src"), &mut files);
    let mut violations = Vec::new();
    for f in &files {
        let rel = f.strip_prefix(root().join("src")).unwrap();
        let first = rel.components().next().unwrap().as_os_str().to_string_lossy().trim_end_matches(".rs").to_string();
        let Some(own) = rank(&first) else { continue }; // lib.rs, main.rs, cli.rs: the top
        let text = code(f);
        for (i, _) in text.match_indices("crate::") {
            let name: String = text[i + 7..].chars().take_while(|c| c.is_ascii_alphanumeric() || *c == '_').collect();
            if let Some(r) = rank(&name)
                && r > own
            {
                violations.push(format!("{} uses crate::{name} (layer {r} above {own})", rel.display()));
            }
        }
    }
    assert!(violations.is_empty(), "upward imports:\n{}", violations.join("\n"));
}

#[test]
fn the_pipeline_kernel_names_no_kind() {
    let mut files = Vec::new();
    rust_files(&root().join("src/pipeline"), &mut files);
    for f in files {
        let text = code(&f);
        for needle in ["crate::kinds", "crate::pulsar", "crate::tracking", "\"pulsar\"", "\"tracking\"", "\"timescales\""] {
            assert!(!text.contains(needle), "{} names a kind: {needle}", f.display());
        }
    }
}

#[test]
fn no_string_errors_in_library_code() {
    let mut files = Vec::new();
    rust_files(&root().join("src"), &mut files);
    for f in files.iter().filter(|f| !f.ends_with("main.rs") && !f.ends_with("cli.rs")) {
        let text = code(f);
        for needle in [", String>", "Result<(), String>"] {
            for (i, _) in text.match_indices(needle) {
                let start = text[..i].rfind('\n').map_or(0, |k| k + 1);
                let line = &text[start..text[i..].find('\n').map_or(text.len(), |k| i + k)];
                assert!(!line.contains("Result<"), "{}: string error type in `{}`", f.display(), line.trim());
            }
        }
    }
}
