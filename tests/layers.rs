//! The layer rule: a file under src/ imports only from its own layer or layers of a lower
//! rank. Layers of the same rank are independent stages: the readers and the engine both
//! stand on the foundations and neither imports the other (tags reach the engine as
//! `ChannelTags`, defined in the foundations).
//! Every `crate::<module>` path (in `use` lines, brace groups and paths written inline) and,
//! in the binary's files, every `tagsieve::<module>` path is read from the source text and
//! its top module looked up in [`LAYERS`]; a path that climbs to a higher layer fails the
//! test unless it is listed in [`KNOWN_VIOLATIONS`]. `super::` paths are taken to stay in
//! the file's own top module: files below src/<module>/ and inline `mod tests` use them so;
//! a sibling module is reached through `crate::`, as the project's files do.
//!
//! The order (DEVELOPERS.md, "Layers"): foundations → read | engine/analysis → simulate →
//! output → jobs → cli.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Layers from the bottom: name, rank and the top-level modules each holds. The simulator
/// writes runs through the readers' writers and the manifest, so it sits above both.
const LAYERS: &[(&str, u32, &[&str])] = &[
    ("foundations", 0, &["tags", "units", "error", "sys"]),
    ("read", 1, &["read", "manifest"]),
    ("engine/analysis", 1, &["engine", "analysis"]),
    ("simulate", 2, &["simulate"]),
    ("output", 3, &["output"]),
    ("jobs", 4, &["jobs"]),
    ("cli", 5, &["cli", "main"]),
];

/// Items and modules re-exported at the crate root, and the module that defines each.
const ROOT_ITEMS: &[(&str, &str)] =
    &[("Error", "error"), ("Result", "error"), ("Channel", "tags"), ("ChannelTags", "tags"), ("guard", "sys"), ("progress", "sys")];

/// Imports known to break the rule, each `(file or folder path, imported top module)`; a
/// path covers the files it starts. The test fails on any violation not listed here and
/// on any entry that no longer occurs, so the list can only shrink.
const KNOWN_VIOLATIONS: &[(&str, &str)] = &[];

fn layer_of(module: &str) -> Option<usize> {
    LAYERS.iter().position(|(_, _, mods)| mods.contains(&module))
}

/// The top module of a file: `src/engine/lanes.rs` → `engine`, `src/tags.rs` → `tags`,
/// `src/main.rs` → `main`; `None` for the crate root `src/lib.rs`.
fn module_of(src: &Path, file: &Path) -> Option<String> {
    let rel = file.strip_prefix(src).unwrap();
    let first = rel.components().next().unwrap().as_os_str().to_string_lossy().into_owned();
    let name = first.strip_suffix(".rs").unwrap_or(&first).to_string();
    (name != "lib").then_some(name)
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// Identifiers at the top level of a brace group `{a, b::c, d::{e, f}}` starting at `s`
/// (just after the `{`).
fn brace_heads(s: &str) -> Vec<String> {
    let (mut depth, mut heads, mut cur, mut fresh) = (0, Vec::new(), String::new(), true);
    for c in s.chars() {
        match c {
            '{' => depth += 1,
            '}' if depth == 0 => break,
            '}' => depth -= 1,
            ',' if depth == 0 => {
                if fresh && !cur.is_empty() {
                    heads.push(std::mem::take(&mut cur));
                }
                fresh = true;
                cur.clear();
            }
            c if depth == 0 && fresh && (c.is_alphanumeric() || c == '_') => cur.push(c),
            _ if depth == 0 && fresh && !cur.is_empty() => {
                heads.push(std::mem::take(&mut cur));
                fresh = false;
            }
            _ => {}
        }
    }
    if fresh && !cur.is_empty() {
        heads.push(cur);
    }
    heads
}

/// Top modules a source text imports through `prefix` (`crate::` or `tagsieve::`).
/// Comments are skipped; brace groups may span lines.
fn imports(text: &str, prefix: &str) -> Result<BTreeSet<String>, String> {
    let code: String = text.lines().map(|l| l.split("//").next().unwrap_or("")).collect::<Vec<_>>().join("\n");
    let mut out = BTreeSet::new();
    let mut rest = code.as_str();
    while let Some(i) = rest.find(prefix) {
        let before = rest[..i].chars().next_back();
        rest = &rest[i + prefix.len()..];
        if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
            continue; // e.g. `mycrate::`
        }
        let heads = if let Some(group) = rest.strip_prefix('{') {
            brace_heads(group)
        } else {
            vec![rest.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect()]
        };
        for h in heads {
            if h.is_empty() || h == "self" {
                continue;
            }
            let module = match ROOT_ITEMS.iter().find(|(item, _)| *item == h) {
                Some((_, m)) => m.to_string(),
                None if h.starts_with(char::is_uppercase) => return Err(format!("root item {prefix}{h}: add it to ROOT_ITEMS")),
                None => h,
            };
            out.insert(module);
        }
    }
    Ok(out)
}

/// Every (file, imported module, file's layer, imported layer) that climbs upwards or
/// sideways into a sibling layer.
fn violations(src: &Path) -> Vec<(String, String, String, String)> {
    let mut files = Vec::new();
    rust_files(src, &mut files);
    files.sort();
    let mut found = Vec::new();
    for f in &files {
        let Some(module) = module_of(src, f) else { continue };
        let own = layer_of(&module).unwrap_or_else(|| panic!("{}: module `{module}` is in no layer of LAYERS", f.display()));
        let text = std::fs::read_to_string(f).unwrap();
        let in_binary = module == "main" || module == "cli";
        let prefix = if in_binary { "tagsieve::" } else { "crate::" };
        let used = imports(&text, prefix).unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        for m in used {
            let theirs = layer_of(&m).unwrap_or_else(|| panic!("{}: imports `{m}`, which is in no layer of LAYERS", f.display()));
            if theirs != own && LAYERS[theirs].1 >= LAYERS[own].1 {
                let rel = f.strip_prefix(src.parent().unwrap()).unwrap().to_string_lossy().replace('\\', "/");
                found.push((rel, m.clone(), LAYERS[own].0.to_string(), LAYERS[theirs].0.to_string()));
            }
        }
    }
    found
}

#[test]
fn no_file_imports_from_a_higher_layer() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let found = violations(&src);
    let new: Vec<String> = found
        .iter()
        .filter(|(f, m, _, _)| !KNOWN_VIOLATIONS.iter().any(|(p, n)| f.starts_with(p) && m == n))
        .map(|(f, m, own, theirs)| format!("{f} ({own}) imports {m} ({theirs})"))
        .collect();
    assert!(new.is_empty(), "imports from a higher or sibling layer:\n{}", new.join("\n"));
    let stale: Vec<_> = KNOWN_VIOLATIONS.iter().filter(|(p, m)| !found.iter().any(|(g, n, _, _)| g.starts_with(p) && n == m)).collect();
    assert!(stale.is_empty(), "KNOWN_VIOLATIONS entries that no longer occur (remove them): {stale:?}");
}

#[test]
fn the_import_reader_sees_groups_inline_paths_and_root_items() {
    // The reader itself, on text written here: a brace group over two lines, an inline
    // path, a root item, a comment and a longer crate name that must not count.
    let text = "use crate::{engine::{kernels, lanes}, Error,\n    output::Document};\n\
                // use crate::cli::Nope;\nlet x = crate::read::MAX_PS; let y = mycrate::jobs::X;\n";
    let got = imports(text, "crate::").unwrap();
    let want: BTreeSet<String> = ["engine", "error", "output", "read"].iter().map(|s| s.to_string()).collect();
    assert_eq!(got, want);
    assert!(imports("use crate::Unknown;", "crate::").is_err());
    // And a climbing import in a temporary tree is reported.
    let d = tempfile::tempdir().unwrap();
    let src = d.path().join("src");
    std::fs::create_dir_all(src.join("engine")).unwrap();
    std::fs::write(src.join("lib.rs"), "pub mod engine;\n").unwrap();
    std::fs::write(src.join("engine/tables.rs"), "use crate::output::Document;\nuse crate::tags::MAX_TIME_PS;\n").unwrap();
    std::fs::write(src.join("engine/parallel.rs"), "use crate::read::MAX_PS;\nuse crate::analysis::stats;\n").unwrap();
    let v = violations(&src);
    let own = |f: &str, m: &str, theirs: &str| (f.to_string(), m.to_string(), "engine/analysis".to_string(), theirs.to_string());
    assert_eq!(v, vec![own("src/engine/parallel.rs", "read", "read"), own("src/engine/tables.rs", "output", "output")]);
}
