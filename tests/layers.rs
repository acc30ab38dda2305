//! The front ends stay apart: the cockpit never imports the CLI and the CLI never imports the
//! cockpit, so each can change (or be left out of a build) without the other. What both need
//! lives in the library: `config_write` (saving gains), `format` (numbers), `commission`
//! (tuning steps). The one crossing allowed is the dispatcher starting the cockpit when no
//! subcommand is given.

use std::fs;
use std::path::{Path, PathBuf};

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in fs::read_dir(dir).expect("source folder") {
        let path = entry.expect("entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// Lines of the files under `src/<front>` that name `crate::<other>`, minus allowed ones.
fn crossings(front: &str, other: &str, allowed: &[&str]) -> Vec<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src").join(front);
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    assert!(!files.is_empty(), "no sources under {}", root.display());
    let needle = format!("crate::{other}");
    let mut found = Vec::new();
    for f in files {
        let text = fs::read_to_string(&f).expect("read");
        for (i, line) in text.lines().enumerate() {
            if line.contains(&needle) && !allowed.iter().any(|a| line.contains(a)) {
                found.push(format!("{}:{}: {}", f.display(), i + 1, line.trim()));
            }
        }
    }
    found
}

#[test]
fn the_cockpit_does_not_import_the_cli() {
    let found = crossings("cockpit", "cli", &[]);
    assert!(found.is_empty(), "the cockpit imports the CLI:\n{}", found.join("\n"));
}

#[test]
fn the_cli_does_not_import_the_cockpit_except_to_start_it() {
    let found = crossings("cli", "cockpit", &["crate::cockpit::run("]);
    assert!(found.is_empty(), "the CLI imports the cockpit:\n{}", found.join("\n"));
}
